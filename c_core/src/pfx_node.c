/*
 * pfx_node.c - node state and one update.  Mirrors
 * python/peerfix/reference/node.py; see pfx_node.h for the contract.
 */
#include <string.h>

#include "peerfix.h"

#define BOUND_LIMIT (INT32_C(1) << 30)

/* ------------------------------------------------------------------------ */
/* settings                                                                   */
/* ------------------------------------------------------------------------ */

void pfx_params_default(pfx_params_t *p)
{
    if (p == NULL) {
        return;
    }
    memset(p, 0, sizeof(*p));
    p->max_components = 4u;
    p->working_cap = 4u;
    p->candidate_cap = 64u;
    p->broad_max_arcs = 16u;
    p->iekf_iterations = 3u;
    p->ring_arc_spacing = 1024;              /* 1.0 m */
    p->arc_tangential_ratio = 644245094;     /* round(0.6 * 2^30) */
    p->broad_window_sigmas = 4 << 16;
    p->broad_sagitta_ratio = 4 << 16;
    p->merge_gate = 9 << 16;
    p->prune_log2_ratio = -870791;           /* round(-9.21 / ln 2 * 2^16): the twin's ln-ratio -9.21 */
    p->broadcast_inflation = 2 << 16;
    p->censor_spread = 2048;                 /* 2.0 m */
    p->mode_gate = 9 << 16;
    p->mode_min_weight = 53687091;           /* round(0.05 * 2^30) */
    p->blocked_weight = 0;
    p->blocked_bias = 1024;                  /* 1.0 m */
    p->max_range = 1024000;                  /* 1000 m */
    p->product_gate = 16 << 16;              /* squared normalised innovation (4 sigma) */
    p->directional_spread = 0u;              /* rings widened by lambda_max of the neighbour */
}

pfx_status_t pfx_params_check(const pfx_params_t *p)
{
    if (p == NULL) {
        return PFX_ERR_ARG;
    }
    if (p->max_components < 1u || p->max_components > PFX_MAX_COMPONENTS || p->working_cap < 1u ||
        p->working_cap > PFX_MAX_WORKING || p->candidate_cap < 1u || p->candidate_cap > PFX_MAX_CANDIDATES ||
        p->broad_max_arcs < 1u || p->broad_max_arcs > PFX_MAX_BROAD_ARCS || p->iekf_iterations < 1u ||
        p->iekf_iterations > 8u) {
        return PFX_ERR_ARG;
    }
    if (p->max_range < 1 || p->max_range > (INT32_C(1) << 24) || p->ring_arc_spacing < 1 ||
        p->ring_arc_spacing > (INT32_C(1) << 20) || p->arc_tangential_ratio < 0 ||
        p->arc_tangential_ratio > PFX_FIXED_FRAC_Q30_ONE || p->broad_window_sigmas <= 0 ||
        p->broad_window_sigmas > (INT32_C(64) << 16) || p->broad_sagitta_ratio < 0 || p->merge_gate < 0 ||
        p->prune_log2_ratio < -(INT32_C(24) << 16) || p->prune_log2_ratio > 0 || p->broadcast_inflation <= 0 ||
        p->censor_spread < 0 || p->censor_spread > (INT32_C(1) << 20) || p->mode_gate < 0 ||
        p->mode_min_weight < 0 || p->mode_min_weight > PFX_FIXED_FRAC_Q30_ONE || p->blocked_weight < 0 ||
        p->blocked_weight >= PFX_FIXED_FRAC_Q30_ONE || p->blocked_bias < 0 || p->blocked_bias > p->max_range ||
        p->product_gate < 0 || p->directional_spread > 1u) {
        return PFX_ERR_ARG;
    }
    return PFX_OK;
}

static pfx_status_t check_bounds(const pfx_len_q10_t b[4])
{
    int k;
    for (k = 0; k < 4; ++k) {
        if (b[k] < -BOUND_LIMIT || b[k] > BOUND_LIMIT) {
            return PFX_ERR_ARG;
        }
    }
    return (b[0] < b[2] && b[1] < b[3]) ? PFX_OK : PFX_ERR_ARG;
}

static pfx_status_t check_belief(const pfx_belief_t *b)
{
    if (b->count > PFX_MAX_COMPONENTS) {
        return PFX_ERR_DEGENERATE;
    }
    return pfx_mixture_check(b->comp, b->count);
}

pfx_status_t pfx_node_init(pfx_node_t *node, const pfx_params_t *params, const pfx_len_q10_t bounds[4])
{
    pfx_status_t st;
    if (node == NULL || params == NULL || bounds == NULL) {
        return PFX_ERR_ARG;
    }
    st = pfx_params_check(params);
    if (st == PFX_OK) {
        st = check_bounds(bounds);
    }
    if (st != PFX_OK) {
        return st;
    }
    memset(node, 0, sizeof(*node));
    node->params = *params;
    memcpy(node->bounds, bounds, sizeof(node->bounds));
    return PFX_OK;
}

/* ------------------------------------------------------------------------ */
/* inbox                                                                      */
/* ------------------------------------------------------------------------ */

void pfx_inbox_clear(pfx_inbox_t *inbox)
{
    if (inbox != NULL) {
        memset(inbox, 0, sizeof(*inbox));
    }
}

static pfx_status_t check_heard(const pfx_belief_t *belief, pfx_len_q10_t range, pfx_len_q10_t sigma)
{
    pfx_status_t st = check_belief(belief);
    if (st != PFX_OK) {
        return st;
    }
    if (range < 0) {
        return PFX_ERR_RANGE;
    }
    return (sigma > 0) ? PFX_OK : PFX_ERR_ARG;
}

/* Index of the heaviest component (the first among equals, as numpy argmax). */
static uint32_t heaviest(const pfx_belief_t *b)
{
    uint32_t k, best = 0u;
    for (k = 1u; k < b->count; ++k) {
        if (b->comp[k].log2w > b->comp[best].log2w) {
            best = k;
        }
    }
    return best;
}

/* Sort key of a broadcast (order_for_update): anchors (-1) first, then agents
 * by lambda_max of the heaviest component (monotone in its spread
 * sqrt(lambda_max)); a censored (empty) broadcast sorts last. */
static int32_t heard_key(const pfx_belief_t *b, uint32_t is_anchor)
{
    if (is_anchor) {
        return -1;
    }
    if (b->count == 0u) {
        return INT32_MAX;
    }
    return pfx_mixture_max_eig(&b->comp[heaviest(b)]);
}

pfx_status_t pfx_inbox_add(pfx_inbox_t *inbox, const pfx_belief_t *belief, pfx_len_q10_t range,
                           pfx_len_q10_t sigma, uint32_t is_anchor)
{
    pfx_heard_t *h;
    pfx_status_t st;
    if (inbox == NULL || belief == NULL || inbox->count > PFX_MAX_NEIGHBOURS) {
        return PFX_ERR_ARG;
    }
    st = check_heard(belief, range, sigma);
    if (st != PFX_OK) {
        return st;
    }
    if (inbox->count == PFX_MAX_NEIGHBOURS) {
        /* Full: keep the most informative PFX_MAX_NEIGHBOURS.  The least
         * informative is the largest key, the latest among equals; the new
         * broadcast displaces it only when strictly more informative, so the
         * kept set is the first PFX_MAX_NEIGHBOURS of the stable update order. */
        int32_t key = heard_key(belief, is_anchor);
        int32_t worst_key = heard_key(&inbox->heard[0].belief, inbox->heard[0].is_anchor);
        uint32_t i, worst = 0u;
        for (i = 1u; i < inbox->count; ++i) {
            int32_t k = heard_key(&inbox->heard[i].belief, inbox->heard[i].is_anchor);
            if (k >= worst_key) {
                worst_key = k;
                worst = i;
            }
        }
        if (key >= worst_key) {
            return PFX_ERR_FULL; /* not kept: every kept broadcast is at least as informative */
        }
        memmove(&inbox->heard[worst], &inbox->heard[worst + 1u],
                (size_t)(inbox->count - 1u - worst) * sizeof(inbox->heard[0]));
        inbox->count -= 1u;
    }
    h = &inbox->heard[inbox->count];
    memset(h, 0, sizeof(*h));
    h->belief.count = belief->count;
    memcpy(h->belief.comp, belief->comp, (size_t)belief->count * sizeof(belief->comp[0]));
    h->range = range;
    h->sigma = sigma;
    h->is_anchor = is_anchor ? 1u : 0u;
    inbox->count += 1u;
    return PFX_OK;
}

/* ------------------------------------------------------------------------ */
/* update                                                                     */
/* ------------------------------------------------------------------------ */

/* Sort key of order_for_update: anchors (-1) first, then agents by
 * lambda_max of the heaviest component (monotone in the reference's spread
 * sqrt(lambda_max)); insertion sort: ties keep arrival order. */
static void order_inbox(const pfx_inbox_t *inbox, pfx_workspace_t *ws)
{
    uint32_t i, j;
    for (i = 0u; i < inbox->count; ++i) {
        const pfx_heard_t *h = &inbox->heard[i];
        int32_t key = heard_key(&h->belief, h->is_anchor);
        ws->order_key[i] = key;
        j = i;
        while (j > 0u && ws->order_key[ws->order[j - 1u]] > key) {
            ws->order[j] = ws->order[j - 1u];
            --j;
        }
        ws->order[j] = (uint8_t)i;
    }
}

static pfx_status_t check_update_inputs(const pfx_node_t *node, const pfx_inbox_t *inbox)
{
    uint32_t k;
    pfx_status_t st = pfx_params_check(&node->params);
    if (st == PFX_OK) {
        st = check_bounds(node->bounds);
    }
    if (st != PFX_OK) {
        return st;
    }
    st = check_belief(&node->prior);
    if (st != PFX_OK) {
        return st;
    }
    if (inbox->count > PFX_MAX_NEIGHBOURS) {
        return PFX_ERR_ARG;
    }
    for (k = 0u; k < inbox->count; ++k) {
        const pfx_heard_t *h = &inbox->heard[k];
        st = check_heard(&h->belief, h->range, h->sigma);
        if (st != PFX_OK) {
            return st;
        }
        if (h->range > node->params.max_range) {
            return PFX_ERR_RANGE;
        }
    }
    return PFX_OK;
}

/* The belief a message's rings are made of (reference message_belief): a
 * neighbour whose belief reads off as one mode (pfx_mixture_point_estimate)
 * counts as that mode, one component; otherwise every component is a ring. */
static const pfx_belief_t *message_belief(const pfx_belief_t *b, const pfx_params_t *p, pfx_workspace_t *ws)
{
    pfx_estimate_t e;
    pfx_component_t *m = &ws->message.comp[0];
    if (b->count <= 1u ||
        pfx_mixture_point_estimate(b->comp, b->count, p->mode_gate, p->mode_min_weight, &e) != PFX_OK ||
        e.mode_count != 1u) {
        return b;
    }
    ws->message.count = 1u;
    m->log2w = 0;
    m->x = e.x;
    m->y = e.y;
    m->pxx = e.pxx;
    m->pxy = e.pxy;
    m->pyy = e.pyy;
    return &ws->message;
}

pfx_status_t pfx_node_update(pfx_node_t *node, const pfx_inbox_t *inbox, pfx_workspace_t *ws)
{
    const pfx_params_t *p;
    uint32_t i, n;
    int have_work;
    pfx_status_t st;
    if (node == NULL || inbox == NULL || ws == NULL) {
        return PFX_ERR_ARG;
    }
    st = check_update_inputs(node, inbox);
    if (st != PFX_OK) {
        return st;
    }
    p = &node->params;
    order_inbox(inbox, ws);
    have_work = node->prior.count > 0u;
    ws->work_count = node->prior.count;
    memcpy(ws->work, node->prior.comp, (size_t)node->prior.count * sizeof(ws->work[0]));

    for (i = 0u; i < inbox->count; ++i) {
        const pfx_heard_t *h = &inbox->heard[ws->order[i]];
        if (h->belief.count == 0u) {
            continue;
        }
        st = pfx_range_rings(message_belief(&h->belief, p, ws), h->range, h->sigma, p, ws->range.ring,
                             &ws->range.ring_count);
        if (st != PFX_OK) {
            return st;
        }
        if (!have_work) {
            /* The flat prior times the first message: the whole ring, kept whole. */
            st = pfx_range_first_ring(ws->range.ring, ws->range.ring_count, node->bounds, p, ws->cand, &n);
            if (st != PFX_OK) {
                return st;
            }
            if (n > 0u) {
                memcpy(ws->work, ws->cand, (size_t)n * sizeof(ws->work[0]));
                ws->work_count = n;
                (void)pfx_mixture_normalise(ws->work, n);
                have_work = 1;
            }
            continue;
        }
        st = pfx_range_multiply(ws->work, ws->work_count, ws->range.ring, ws->range.ring_count, p, ws->cand,
                                &ws->cand_count, &ws->range);
        if (st != PFX_OK) {
            return st;
        }
        n = ws->cand_count;
        if (n == 0u) {
            continue; /* nothing of weight: the message is not used */
        }
        st = pfx_mixture_reduce(ws->cand, &n, p->working_cap, p->prune_log2_ratio, p->merge_gate, &ws->mix);
        if (st != PFX_OK) {
            return st;
        }
        if (n > 0u) {
            memcpy(ws->work, ws->cand, (size_t)n * sizeof(ws->work[0]));
            ws->work_count = n;
        }
    }
    if (have_work) {
        n = ws->work_count;
        st = pfx_mixture_reduce(ws->work, &n, p->max_components, p->prune_log2_ratio, p->merge_gate, &ws->mix);
        if (st != PFX_OK) {
            return st;
        }
        ws->work_count = n;
    } else {
        ws->work_count = 0u;
    }
    /* Success: only now is the node written. */
    memset(&node->belief, 0, sizeof(node->belief));
    node->belief.count = ws->work_count;
    memcpy(node->belief.comp, ws->work, (size_t)ws->work_count * sizeof(ws->work[0]));
    return PFX_OK;
}

/* ------------------------------------------------------------------------ */
/* broadcast, prediction, estimate                                            */
/* ------------------------------------------------------------------------ */

/* Scaling: covariance Q20 * inflation Q16 >> 16, rounded, saturated; the
 * stored covariance keeps det >= 0 (pfx_mixture_store_cov; a zero
 * covariance stays zero). */
pfx_status_t pfx_node_broadcast(const pfx_node_t *node, pfx_belief_t *out)
{
    uint32_t k;
    int64_t lim;
    pfx_status_t st;
    if (out != NULL) {
        memset(out, 0, sizeof(*out));
    }
    if (node == NULL || out == NULL) {
        return PFX_ERR_ARG;
    }
    st = pfx_params_check(&node->params);
    if (st == PFX_OK) {
        st = check_belief(&node->belief);
    }
    if (st != PFX_OK || node->belief.count == 0u) {
        return st;
    }
    /* Censoring: spread = sqrt(lambda_max) of the heaviest <= censor_spread,
     * compared squared (Q20, exact). */
    lim = (int64_t)node->params.censor_spread * node->params.censor_spread;
    if ((int64_t)pfx_mixture_max_eig(&node->belief.comp[heaviest(&node->belief)]) > lim) {
        return PFX_OK;
    }
    for (k = 0u; k < node->belief.count; ++k) {
        const pfx_component_t *c = &node->belief.comp[k];
        pfx_component_t *o = &out->comp[k];
        int32_t f = node->params.broadcast_inflation;
        *o = *c;
        o->pxx = pfx_fixed_mul_sat(c->pxx, f, 16u);
        o->pyy = pfx_fixed_mul_sat(c->pyy, f, 16u);
        o->pxy = pfx_fixed_mul_sat(c->pxy, f, 16u);
        if ((int64_t)o->pxy * o->pxy > (int64_t)o->pxx * o->pyy) {
            /* rounding or saturation: pull pxy back to sqrt(pxx pyy) */
            int32_t m = (int32_t)pfx_fixed_isqrt_u64((uint64_t)((int64_t)o->pxx * o->pyy));
            o->pxy = (o->pxy < 0) ? -m : m;
        }
    }
    out->count = node->belief.count;
    return PFX_OK;
}

pfx_status_t pfx_belief_point(pfx_belief_t *out, pfx_len_q10_t x, pfx_len_q10_t y)
{
    if (out == NULL) {
        return PFX_ERR_ARG;
    }
    memset(out, 0, sizeof(*out));
    out->count = 1u;
    out->comp[0].x = x;
    out->comp[0].y = y;
    return PFX_OK;
}

/* Scaling: q (Q20 per s) * dt (ms) < 2^63 exactly in uint64, divided by
 * 1000 with one rounding (64-bit divide: once per epoch, not in a loop);
 * the diagonals saturate (adding to both diagonals keeps det >= 0). */
pfx_status_t pfx_node_predict(pfx_node_t *node, uint32_t dt_ms, pfx_area_q20_t q_per_s)
{
    uint32_t k;
    int64_t grow;
    pfx_status_t st;
    if (node == NULL || q_per_s < 0) {
        return PFX_ERR_ARG;
    }
    st = check_belief(&node->belief);
    if (st != PFX_OK) {
        return st;
    }
    (void)pfx_fixed_div64_sat((int64_t)q_per_s * (int64_t)dt_ms, 1000, &grow);
    node->prior = node->belief;
    for (k = 0u; k < node->prior.count; ++k) {
        pfx_component_t *c = &node->prior.comp[k];
        c->pxx = pfx_mixture_sat32((int64_t)c->pxx + grow);
        c->pyy = pfx_mixture_sat32((int64_t)c->pyy + grow);
    }
    return PFX_OK;
}

pfx_status_t pfx_node_estimate(const pfx_node_t *node, pfx_estimate_t *out)
{
    pfx_status_t st;
    if (out != NULL) {
        memset(out, 0, sizeof(*out));
    }
    if (node == NULL || out == NULL) {
        return PFX_ERR_ARG;
    }
    st = pfx_params_check(&node->params);
    if (st == PFX_OK) {
        st = check_bounds(node->bounds);
    }
    if (st == PFX_OK) {
        st = check_belief(&node->belief);
    }
    if (st != PFX_OK) {
        return st;
    }
    if (node->belief.count == 0u) {
        /* Uniform prior over the box: centre, diag(w^2 / 12, h^2 / 12). */
        int64_t w = (int64_t)node->bounds[2] - node->bounds[0]; /* <= 2^31 */
        int64_t h = (int64_t)node->bounds[3] - node->bounds[1];
        int64_t vx, vy;
        (void)pfx_fixed_div64_sat(w * w, 12, &vx);
        (void)pfx_fixed_div64_sat(h * h, 12, &vy);
        out->x = (pfx_len_q10_t)pfx_mixture_shr_round((int64_t)node->bounds[0] + node->bounds[2], 1u);
        out->y = (pfx_len_q10_t)pfx_mixture_shr_round((int64_t)node->bounds[1] + node->bounds[3], 1u);
        out->pxx = pfx_mixture_sat32(vx);
        out->pyy = pfx_mixture_sat32(vy);
        out->mode_count = 0u;
        out->mode_weight = PFX_FIXED_FRAC_Q30_ONE;
        out->components = 0u;
        return PFX_OK;
    }
    return pfx_mixture_point_estimate(node->belief.comp, node->belief.count, node->params.mode_gate,
                                      node->params.mode_min_weight, out);
}
