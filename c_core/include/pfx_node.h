/*
 * pfx_node.h - node state and one update (module "node"), included by peerfix.h.
 *
 * Mirrors python/peerfix/reference/node.py: settings, the inbox of one
 * iteration, the update (neighbours most informative first, the first
 * message as a whole ring, reduction after every later message, the belief
 * reduced to K), the broadcast (censoring and inflation), the random-walk
 * prediction and the point estimate.
 *
 * All state is caller-owned; pfx_node_update needs a pfx_workspace_t
 * (sizeof 15 144 bytes on the host, contents meaningless between calls) so that nothing large
 * lives on the stack.
 *
 * Validation (every entry point): NULL pointers and settings out of their
 * bounds -> PFX_ERR_ARG; a belief with count > PFX_MAX_COMPONENTS or a
 * covariance that is not positive semi-definite -> PFX_ERR_DEGENERATE; a
 * range < 0 or > max_range -> PFX_ERR_RANGE; sigma <= 0 -> PFX_ERR_ARG.
 * On any error the node and the inbox are unchanged.
 */
#ifndef PFX_NODE_H
#define PFX_NODE_H

#include "peerfix.h"

#ifdef __cplusplus
extern "C" {
#endif

/* PFX_CDEF_BEGIN */

/* One broadcast heard, with the range measured to its sender. */
typedef struct {
    pfx_belief_t belief;                /* as sent (already inflated by the sender) */
    pfx_len_q10_t range;                /* measured range, >= 0 */
    pfx_len_q10_t sigma;                /* its line-of-sight standard deviation, > 0 */
    uint32_t is_anchor;                 /* 1: an anchor (point belief) */
} pfx_heard_t;

/* What an agent heard in this iteration, in arrival order. */
typedef struct {
    uint32_t count;
    pfx_heard_t heard[PFX_MAX_NEIGHBOURS];
} pfx_inbox_t;

/* Scratch memory of one update; caller-owned so that the node state stays small
 * and nothing large lives on the stack.  Contents are meaningless between calls. */
typedef struct {
    pfx_component_t work[PFX_MAX_CANDIDATES];
    pfx_component_t cand[PFX_MAX_CANDIDATES];
    uint32_t work_count, cand_count;
    /* added after the contract's fields: */
    pfx_mixture_scratch_t mix;          /* gate merge and Runnalls scratch */
    pfx_range_scratch_t range;          /* rings of the current neighbour, broad arcs */
    uint8_t order[PFX_MAX_NEIGHBOURS];  /* neighbours in update order */
    int32_t order_key[PFX_MAX_NEIGHBOURS]; /* their sort keys: -1 anchor, else lambda_max (Q20) */
    pfx_belief_t message;               /* a one-mode neighbour's belief as one component */
} pfx_workspace_t;

/* One agent's state. */
typedef struct {
    pfx_params_t params;
    pfx_len_q10_t bounds[4];            /* xmin, ymin, xmax, ymax of the site */
    pfx_belief_t belief;                /* current belief; count 0 = still the prior */
    pfx_belief_t prior;                 /* tracking prior; count 0 = uniform over bounds */
} pfx_node_t;

void pfx_params_default(pfx_params_t *p);
pfx_status_t pfx_params_check(const pfx_params_t *p);

/* bounds: xmin < xmax, ymin < ymax, each within +-2^30 (Q10), else PFX_ERR_ARG. */
pfx_status_t pfx_node_init(pfx_node_t *node, const pfx_params_t *params, const pfx_len_q10_t bounds[4]);
void pfx_inbox_clear(pfx_inbox_t *inbox);
/* Appends one broadcast.  A full inbox keeps the PFX_MAX_NEIGHBOURS most informative
 * (anchors, then agents by the spread of their heaviest component, earlier arrival on
 * ties): the new one displaces the least informative when it is strictly more
 * informative (PFX_OK), else it is not kept (PFX_ERR_FULL).  PFX_ERR_RANGE for a
 * negative or absurd range (> params max_range is checked in update, here only < 0);
 * PFX_ERR_DEGENERATE for a belief with count > PFX_MAX_COMPONENTS or a covariance that
 * is not positive semi-definite; PFX_ERR_ARG for sigma <= 0. Inbox unchanged on error.
 * A belief with count 0 (censored) is accepted and skipped by the update. */
pfx_status_t pfx_inbox_add(pfx_inbox_t *inbox, const pfx_belief_t *belief, pfx_len_q10_t range,
                           pfx_len_q10_t sigma, uint32_t is_anchor);
/* Recomputes the belief from the prior and the inbox.  On any error the node is unchanged. */
pfx_status_t pfx_node_update(pfx_node_t *node, const pfx_inbox_t *inbox, pfx_workspace_t *ws);
/* What the node sends now: out->count = 0 when censored or still the prior. */
pfx_status_t pfx_node_broadcast(const pfx_node_t *node, pfx_belief_t *out);
/* Anchor broadcast: one component, zero covariance, log2w 0. */
pfx_status_t pfx_belief_point(pfx_belief_t *out, pfx_len_q10_t x, pfx_len_q10_t y);
/* prior = belief with each covariance grown by q * dt (random walk), q in m^2/s as Q20 per second.
 * q * dt_ms / 1000 is rounded once (exact 64-bit division); q < 0: PFX_ERR_ARG. */
pfx_status_t pfx_node_predict(pfx_node_t *node, uint32_t dt_ms, pfx_area_q20_t q_per_s);
/* Point estimate; still the prior: the box centre, diag(w^2/12, h^2/12) (saturated to the Q20
 * range), mode_count 0, mode_weight 1.0, components 0. */
pfx_status_t pfx_node_estimate(const pfx_node_t *node, pfx_estimate_t *out);

/* PFX_CDEF_END */

#ifdef __cplusplus
}
#endif

#endif /* PFX_NODE_H */
