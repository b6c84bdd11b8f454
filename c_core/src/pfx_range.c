/*
 * pfx_range.c - range update: ring messages and their products with a
 * belief.  See pfx_range.h for the representation; each function says its
 * scaling, overflow and rounding.
 *
 * Mirrors python/peerfix/reference/ranging.py.
 */
#include <string.h>

#include "peerfix.h"

#define ONE_Q30 (INT64_C(1) << 30)
#define RADIUS_LIMIT (INT32_C(1) << 30)

/* BEGIN GENERATED TABLE by tools/gen_direction_table.py: do not edit */
/* round(cos(2 pi k / 256) * 2^30), k = 0..255 (Q30). */
static const int32_t k_cos_q30[256] = {
    1073741824, 1073418433, 1072448455, 1070832474, 1068571464, 1065666786,
    1062120190, 1057933813, 1053110176, 1047652185, 1041563127, 1034846671,
    1027506862, 1019548121, 1010975242, 1001793390, 992008094, 981625251,
    970651112, 959092290, 946955747, 934248793, 920979082, 907154608,
    892783698, 877875009, 862437520, 846480531, 830013654, 813046808,
    795590213, 777654384, 759250125, 740388522, 721080937, 701339000,
    681174602, 660599890, 639627258, 618269338, 596538995, 574449320,
    552013618, 529245404, 506158392, 482766489, 459083786, 435124548,
    410903207, 386434353, 361732726, 336813204, 311690799, 286380643,
    260897982, 235258165, 209476638, 183568930, 157550647, 131437462,
    105245103, 78989349, 52686014, 26350943, 0, -26350943,
    -52686014, -78989349, -105245103, -131437462, -157550647, -183568930,
    -209476638, -235258165, -260897982, -286380643, -311690799, -336813204,
    -361732726, -386434353, -410903207, -435124548, -459083786, -482766489,
    -506158392, -529245404, -552013618, -574449320, -596538995, -618269338,
    -639627258, -660599890, -681174602, -701339000, -721080937, -740388522,
    -759250125, -777654384, -795590213, -813046808, -830013654, -846480531,
    -862437520, -877875009, -892783698, -907154608, -920979082, -934248793,
    -946955747, -959092290, -970651112, -981625251, -992008094, -1001793390,
    -1010975242, -1019548121, -1027506862, -1034846671, -1041563127, -1047652185,
    -1053110176, -1057933813, -1062120190, -1065666786, -1068571464, -1070832474,
    -1072448455, -1073418433, -1073741824, -1073418433, -1072448455, -1070832474,
    -1068571464, -1065666786, -1062120190, -1057933813, -1053110176, -1047652185,
    -1041563127, -1034846671, -1027506862, -1019548121, -1010975242, -1001793390,
    -992008094, -981625251, -970651112, -959092290, -946955747, -934248793,
    -920979082, -907154608, -892783698, -877875009, -862437520, -846480531,
    -830013654, -813046808, -795590213, -777654384, -759250125, -740388522,
    -721080937, -701339000, -681174602, -660599890, -639627258, -618269338,
    -596538995, -574449320, -552013618, -529245404, -506158392, -482766489,
    -459083786, -435124548, -410903207, -386434353, -361732726, -336813204,
    -311690799, -286380643, -260897982, -235258165, -209476638, -183568930,
    -157550647, -131437462, -105245103, -78989349, -52686014, -26350943,
    0, 26350943, 52686014, 78989349, 105245103, 131437462,
    157550647, 183568930, 209476638, 235258165, 260897982, 286380643,
    311690799, 336813204, 361732726, 386434353, 410903207, 435124548,
    459083786, 482766489, 506158392, 529245404, 552013618, 574449320,
    596538995, 618269338, 639627258, 660599890, 681174602, 701339000,
    721080937, 740388522, 759250125, 777654384, 795590213, 813046808,
    830013654, 846480531, 862437520, 877875009, 892783698, 907154608,
    920979082, 934248793, 946955747, 959092290, 970651112, 981625251,
    992008094, 1001793390, 1010975242, 1019548121, 1027506862, 1034846671,
    1041563127, 1047652185, 1053110176, 1057933813, 1062120190, 1065666786,
    1068571464, 1070832474, 1072448455, 1073418433
};
/* END GENERATED TABLE */

/* ------------------------------------------------------------------------ */
/* directions and unit vectors                                                */
/* ------------------------------------------------------------------------ */

static int32_t dir_cos(uint32_t k)
{
    return k_cos_q30[k & (PFX_RING_DIRECTIONS - 1u)];
}

static int32_t dir_sin(uint32_t k)
{
    return k_cos_q30[(k + 3u * PFX_RING_DIRECTIONS / 4u) & (PFX_RING_DIRECTIONS - 1u)];
}

void pfx_range_direction(uint32_t k, int32_t *ux, int32_t *uy)
{
    if (ux != NULL) {
        *ux = dir_cos(k);
    }
    if (uy != NULL) {
        *uy = dir_sin(k);
    }
}

static uint64_t mag64(int64_t v)
{
    return (v < 0) ? (uint64_t)(-(v + 1)) + 1u : (uint64_t)v;
}

/*
 * Unit vector of (dx, dy) in Q30 and its length in the unit of d.
 * Scaling: d is brought to 30 significant bits (exact left shift, or one
 * rounding right shift): n2 = dx'^2 + dy'^2 in [2^58, 2^61].  n2 is shifted
 * by an even z (2 or 4) to m in [2^62, 2^64), M = m / 2^64 in [1/4, 1), and
 * y = 1/sqrt(M) (Q30, about 2^-29 relative) from pfx_mixture_rsqrt_q30.  Then
 * u = d' y 2^(z/2 - 32) and rho' = d'.u (no square root, no divide).
 * rho is rho' shifted back (rounded; saturated for |d| near 2^63).
 * d = 0: u = 0, rho = 0.
 */
static void unit_vector(int64_t dx, int64_t dy, int32_t *ux, int32_t *uy, int64_t *rho)
{
    uint64_t m = mag64(dx) > mag64(dy) ? mag64(dx) : mag64(dy);
    unsigned b, z;
    int64_t nx, ny, r;
    uint64_t n2, y;
    if (m == 0u) {
        *ux = 0;
        *uy = 0;
        *rho = 0;
        return;
    }
    b = 64u - pfx_mixture_clz64(m);
    if (b > 62u) {
        nx = pfx_mixture_shr_round_var(dx, b - 30u);
        ny = pfx_mixture_shr_round_var(dy, b - 30u);
    } else if (b > 30u) {
        nx = pfx_mixture_round_var_small(dx, b - 30u); /* |d| < 2^62 */
        ny = pfx_mixture_round_var_small(dy, b - 30u);
    } else {
        nx = (int32_t)dx * (INT32_C(1) << (30u - b)); /* |nx| < 2^30: in int32 */
        ny = (int32_t)dy * (INT32_C(1) << (30u - b));
    }
    n2 = (uint64_t)((int64_t)(int32_t)nx * (int32_t)nx + (int64_t)(int32_t)ny * (int32_t)ny); /* [2^58, 2^61] */
    z = (n2 >= (UINT64_C(1) << 60)) ? 2u : 4u; /* the even shift to [2^62, 2^64): clz64(n2) & ~1 */
    y = pfx_mixture_rsqrt_q30(n2 << z); /* [2^62, 2^64): no bit is lost */
    /* 1/sqrt(n2) = y 2^(z/2 - 32) / 2^30: u = d' y / 2^31 (z = 2) or / 2^30 (z = 4); |nx y| <= 2^61
     * (int32 products when y < 2^31, its usual range; the same values either way) */
    if (y <= (uint64_t)INT32_MAX) {
        int64_t px = (int64_t)(int32_t)nx * (int32_t)y, py = (int64_t)(int32_t)ny * (int32_t)y;
        if (z == 2u) {
            *ux = pfx_mixture_sat32(pfx_mixture_round_small(px, 31u));
            *uy = pfx_mixture_sat32(pfx_mixture_round_small(py, 31u));
        } else {
            *ux = pfx_mixture_sat32(pfx_mixture_round_small(px, 30u));
            *uy = pfx_mixture_sat32(pfx_mixture_round_small(py, 30u));
        }
    } else if (z == 2u) {
        *ux = pfx_mixture_sat32(pfx_mixture_shr_round(nx * (int64_t)y, 31u));
        *uy = pfx_mixture_sat32(pfx_mixture_shr_round(ny * (int64_t)y, 31u));
    } else {
        *ux = pfx_mixture_sat32(pfx_mixture_shr_round(nx * (int64_t)y, 30u));
        *uy = pfx_mixture_sat32(pfx_mixture_shr_round(ny * (int64_t)y, 30u));
    }
    r = pfx_mixture_round_small((int64_t)(int32_t)nx * *ux + (int64_t)(int32_t)ny * *uy, 30u); /* rho' in the unit of nx */
    *rho = (b > 30u) ? pfx_fixed_shl64_sat(r, b - 30u) : pfx_mixture_round_var_small(r, 30u - b); /* |r| <= 2^31 */
}

/* ------------------------------------------------------------------------ */
/* rings                                                                      */
/* ------------------------------------------------------------------------ */

/* Scaling: sigma Q10 -> sigma^2 Q20 exactly (int64); var saturates to Q20. */
pfx_status_t pfx_range_rings(const pfx_belief_t *neighbour, pfx_len_q10_t range, pfx_len_q10_t sigma,
                             const pfx_params_t *p, pfx_ring_t *rings, uint32_t *n)
{
    uint32_t k, nb;
    int64_t s2;
    pfx_log2_q16_t los = 0, nlos = 0;
    int robust;
    if (neighbour == NULL || p == NULL || rings == NULL || n == NULL) {
        return PFX_ERR_ARG;
    }
    *n = 0u;
    nb = neighbour->count;
    if (nb > PFX_MAX_COMPONENTS || pfx_mixture_check(neighbour->comp, nb) != PFX_OK) {
        return PFX_ERR_DEGENERATE;
    }
    if (sigma <= 0) {
        return PFX_ERR_ARG;
    }
    if (range < 0) {
        return PFX_ERR_RANGE;
    }
    robust = p->blocked_weight > 0 && p->blocked_weight < PFX_FIXED_FRAC_Q30_ONE;
    if (robust) {
        (void)pfx_fixed_log2_q((uint32_t)(PFX_FIXED_FRAC_Q30_ONE - p->blocked_weight), 30u, &los);
        (void)pfx_fixed_log2_q((uint32_t)p->blocked_weight, 30u, &nlos);
    }
    s2 = (int64_t)sigma * sigma;
    for (k = 0u; k < nb; ++k) {
        const pfx_component_t *c = &neighbour->comp[k];
        pfx_ring_t *g = &rings[k];
        g->log2w = pfx_fixed_add_sat(c->log2w, los);
        g->cx = c->x;
        g->cy = c->y;
        g->radius = range;
        g->var_bound = pfx_mixture_sat32(s2 + pfx_mixture_max_eig(c));
        if (p->directional_spread != 0u) {
            g->var = pfx_mixture_sat32(s2);
            g->nxx = c->pxx;
            g->nxy = c->pxy;
            g->nyy = c->pyy;
        } else {
            g->var = g->var_bound;
            g->nxx = g->nxy = g->nyy = 0;
        }
        if (robust) {
            int64_t bias = p->blocked_bias > 0 ? p->blocked_bias : 0;
            int64_t b2 = pfx_mixture_mul(bias, bias, 0u);
            pfx_ring_t *h = &rings[nb + k];
            *h = *g; /* the same centre and N */
            h->log2w = pfx_fixed_add_sat(c->log2w, nlos);
            h->radius = (pfx_len_q10_t)(((int64_t)range - bias > 0) ? (int64_t)range - bias : 0);
            h->var = pfx_mixture_sat32((int64_t)g->var + b2);
            h->var_bound = pfx_mixture_sat32((int64_t)g->var_bound + b2);
        }
    }
    *n = robust ? 2u * nb : nb;
    return PFX_OK;
}

/* Scaling: circumference * stride / 256 < spacing  <=>
 * pi_q29 * r * stride < spacing * 2^36 (Q29 * Q10 against Q10 * 2^29 * 128),
 * exact integers through mul64 (saturating for absurd radii). */
uint32_t pfx_range_stride(pfx_len_q10_t radius, pfx_len_q10_t spacing, uint32_t max_arcs_full)
{
    uint32_t stride = 1u;
    int64_t lhs = (radius > 0) ? (int64_t)PFX_PI_Q29 * radius : 0; /* < 2^62 */
    int64_t rhs = pfx_mixture_mul(spacing, INT64_C(1) << 36, 0u);
    while (stride < PFX_RING_DIRECTIONS &&
           (pfx_mixture_mul(lhs, stride, 0u) < rhs || PFX_RING_DIRECTIONS / stride > max_arcs_full)) {
        stride <<= 1;
    }
    return stride;
}

/* ------------------------------------------------------------------------ */
/* arcs                                                                       */
/* ------------------------------------------------------------------------ */

typedef struct {
    int32_t t2;      /* tangential variance, Q20, >= var */
    int32_t log_len; /* log2 of the arc spacing in m, Q16 */
    int64_t radial;  /* distance of the arc centres from the ring centre, Q20 */
} arc_shape_t;

/* Spacing 2 pi r stride / 256 = pi_q29 r stride >> 26 in Q20 (exact int64
 * product, one rounding); tangential std ratio * spacing (Q20), t2 its
 * square (Q20, rounded once), floored at var, saturated; log2 of the
 * spacing from pfx_fixed_log2_u64 (0.70 LSB), log2(1e-9) for a zero radius
 * (the reference's floor).  The arc centres sit at max(r - t2 / (2r), 0)
 * (a straight arc's mass then lies on the ring): t2 * 2^10 / (2r) in Q20
 * through one reciprocal (relative error <= 2^-30). */
static void arc_shape(pfx_len_q10_t r, pfx_area_q20_t var, uint32_t stride, const pfx_params_t *p, arc_shape_t *a)
{
    int64_t sp = pfx_mixture_mul((int64_t)PFX_PI_Q29 * (r > 0 ? r : 0), stride, 26u);
    int64_t sd = pfx_mixture_mul(sp, p->arc_tangential_ratio, 30u);
    int64_t t2 = pfx_mixture_mul(sd, sd, 20u);
    pfx_log2_q16_t l2;
    if (t2 < var) {
        t2 = var;
    }
    a->t2 = pfx_mixture_sat32(t2);
    if (sp > 0) {
        (void)pfx_fixed_log2_u64((uint64_t)sp, &l2);
        a->log_len = l2 - (INT32_C(20) << 16);
    } else {
        a->log_len = PFX_LOG2_1E9_Q16;
    }
    a->radial = 0;
    if (r > 0) {
        pfx_recip64_t rr;
        int64_t inward;
        (void)pfx_mixture_recip64(2u * (uint64_t)r, &rr);
        inward = pfx_mixture_mul_recip(a->t2, &rr, 10u);
        a->radial = (int64_t)r * 1024 - inward;
        if (a->radial < 0) {
            a->radial = 0;
        }
    }
}

/* var u u^T + t2 v v^T (v the tangent) + N (the ring centre's covariance):
 * pxx = var c^2 + t2 s^2 + nxx, pyy = var s^2 + t2 c^2 + nyy,
 * pxy = (var - t2) c s + nxy.  Squares in Q30 (rounded), each sum <= 2^62,
 * one rounding to Q20, then N added (int64, store_cov saturates). */
static pfx_status_t arc_cov(const pfx_ring_t *g, int32_t t2, uint32_t k, pfx_component_t *out)
{
    int32_t var = g->var;
    int32_t c = dir_cos(k), s = dir_sin(k);
    int32_t c2 = (int32_t)pfx_mixture_mul32(c, c, 30u); /* [0, 2^30] */
    int32_t s2 = (int32_t)pfx_mixture_mul32(s, s, 30u);
    int32_t cs = (int32_t)pfx_mixture_mul32(c, s, 30u); /* |.| <= 2^29 */
    return pfx_mixture_store_cov(pfx_mixture_round_small((int64_t)var * c2 + (int64_t)t2 * s2, 30u) + g->nxx,
                                 pfx_mixture_round_small(((int64_t)var - t2) * cs, 30u) + g->nxy,
                                 pfx_mixture_round_small((int64_t)var * s2 + (int64_t)t2 * c2, 30u) + g->nyy, out);
}

/* Q20 * Q30 -> Q10, rounded once (mul64: radial may exceed 2^31). */
static int64_t along(int64_t radial_q20, int32_t u)
{
    return pfx_mixture_mul(radial_q20, u, 40u);
}

pfx_status_t pfx_range_first_ring(const pfx_ring_t *rings, uint32_t n, const pfx_len_q10_t bounds[4],
                                  const pfx_params_t *p, pfx_component_t *out, uint32_t *n_out)
{
    uint32_t k, dir, m = 0u, per_ring;
    uint64_t area;
    pfx_log2_q16_t log_area;
    if (n_out != NULL) {
        *n_out = 0u;
    }
    if (rings == NULL || bounds == NULL || p == NULL || out == NULL || n_out == NULL || n > PFX_MAX_RINGS) {
        return PFX_ERR_ARG;
    }
    if (bounds[0] >= bounds[2] || bounds[1] >= bounds[3]) {
        return PFX_ERR_ARG;
    }
    /* (xmax - xmin)(ymax - ymin): Q10 * Q10 = Q20, each factor < 2^32. */
    area = (uint64_t)((int64_t)bounds[2] - bounds[0]) * (uint64_t)((int64_t)bounds[3] - bounds[1]);
    (void)pfx_fixed_log2_u64(area, &log_area);
    log_area -= INT32_C(20) << 16;
    per_ring = p->candidate_cap / (n > 0u ? n : 1u);
    if (per_ring < 1u) {
        per_ring = 1u;
    }
    for (k = 0u; k < n; ++k) {
        const pfx_ring_t *g = &rings[k];
        uint32_t stride = pfx_range_stride(g->radius, p->ring_arc_spacing, per_ring);
        arc_shape_t a;
        int64_t logw;
        uint32_t kept[PFX_RING_DIRECTIONS / 64u] = {0u, 0u, 0u, 0u}; /* arcs kept in the first half */
        uint32_t twin = m; /* out index of the next kept first-half arc */
        arc_shape(g->radius, g->var, stride, p, &a);
        logw = (int64_t)g->log2w + a.log_len - log_area;
        for (dir = 0u; dir < PFX_RING_DIRECTIONS; dir += stride) {
            int64_t x = (int64_t)g->cx + along(a.radial, dir_cos(dir));
            int64_t y = (int64_t)g->cy + along(a.radial, dir_sin(dir));
            uint32_t half = dir & (PFX_RING_DIRECTIONS / 2u - 1u);
            int twin_kept = dir >= PFX_RING_DIRECTIONS / 2u && ((kept[half >> 5] >> (half & 31u)) & 1u) != 0u;
            pfx_component_t *o;
            if (x < bounds[0] || x > bounds[2] || y < bounds[1] || y > bounds[3] || m >= PFX_MAX_CANDIDATES) {
                twin += (uint32_t)twin_kept;
                continue;
            }
            o = &out[m];
            if (twin_kept) {
                /* direction dir - 128: the table is odd, cos(k + 128) = -cos k (the same for sin), so
                 * arc_cov's squares and product, and so the covariance, are those of that arc */
                o->pxx = out[twin].pxx;
                o->pxy = out[twin].pxy;
                o->pyy = out[twin].pyy;
                ++twin;
            } else if (arc_cov(g, a.t2, dir, o) != PFX_OK) {
                continue;
            }
            if (dir < PFX_RING_DIRECTIONS / 2u) {
                kept[dir >> 5] |= UINT32_C(1) << (dir & 31u);
            }
            o->x = (pfx_len_q10_t)x; /* inside the box: in range */
            o->y = (pfx_len_q10_t)y;
            o->log2w = pfx_mixture_sat32(logw);
            ++m;
        }
    }
    *n_out = m;
    return PFX_OK;
}

/* ------------------------------------------------------------------------ */
/* compact or broad                                                           */
/* ------------------------------------------------------------------------ */

/*
 * The first linearisation of a compact pair: h = (mean - centre) / rho and
 * rho, from unit_vector on the Q20 offset D = (mean - centre) * 2^10 (h in
 * Q30, rho in Q20).  The compact/broad test needs h too, so a neighbour step
 * computes it once per pair.  unit_vector normalises its input to 30
 * significant bits exactly (a left shift, or for offsets of 2^30 LSB a
 * rounding that the scaled offset repeats bit for bit), so h is the same
 * from the Q10 or the Q20 offset.
 */
typedef struct {
    int32_t hx, hy;
    int64_t rho;
    int32_t dx, dy; /* the Q10 offset centre - mean (pfx_mixture_offset: |.| <= 2^30) */
} lin_t;

/* The first linearisation from the offsets d = centre - mean (Q10, pfx_mixture_offset). */
static void lin_at(int64_t dx, int64_t dy, lin_t *l)
{
    l->dx = (int32_t)dx;
    l->dy = (int32_t)dy;
    unit_vector(dx * 1024, dy * 1024, &l->hx, &l->hy, &l->rho);
}

static void first_lin(const pfx_component_t *c, const pfx_ring_t *g, lin_t *l)
{
    lin_at(pfx_mixture_offset(g->cx, c->x), pfx_mixture_offset(g->cy, c->y), l);
}

/* near centre: rho^2 <= 4 lambda_max (Q20, exact squares). */
static int near_centre(const pfx_component_t *c, int64_t lam, const pfx_ring_t *g)
{
    int64_t dx = pfx_mixture_offset(g->cx, c->x);
    int64_t dy = pfx_mixture_offset(g->cy, c->y);
    return dx * dx + dy * dy <= 4 * lam; /* <= 2^61; lam <= 2^32 */
}

/*
 * sagitta test 2 sigma_t^2 / r > ratio sqrt(var)  <=>
 *   2 sigma_t^2 > ratio * sqrt(var) * r, with sigma_t^2 = t^T P t in Q30
 *   (t = (-uy, ux) the unit tangent, Q30).  The right side depends on the
 *   ring only (bend_limit, once per ring): sqrt(var) = sd in Q20 (exactly
 *   rounded), ratio (Q16) * sd (Q20) <= 2^57, times r >> 16 -> Q30.
 */
static int64_t bend_limit(const pfx_ring_t *g, uint32_t sd, const pfx_params_t *p)
{
    return pfx_mixture_mul((int64_t)p->broad_sagitta_ratio * sd, g->radius > 0 ? g->radius : 0, 16u);
}

static int bends(const pfx_component_t *c, const lin_t *l, int64_t limit)
{
    int32_t tx = -l->hy, ty = l->hx; /* |h| <= 2^30: no overflow */
    int64_t ptx = pfx_mixture_mul32(c->pxx, tx, 20u) + pfx_mixture_mul32(c->pxy, ty, 20u); /* Q30, <= 2^42 each */
    int64_t pty = pfx_mixture_mul32(c->pxy, tx, 20u) + pfx_mixture_mul32(c->pyy, ty, 20u);
    int64_t st2 = pfx_mixture_mul(tx, ptx, 30u) + pfx_mixture_mul(ty, pty, 30u);
    return 2 * st2 > limit;
}

/* round(sqrt(var_bound)) in Q20 (var_bound Q20 shifted by 20, < 2^51): the
 * value of pfx_fixed_sqrt_q(var_bound, 20, 20), from the faster exact
 * pfx_mixture_isqrt_round. */
static uint32_t ring_sd(const pfx_ring_t *g)
{
    return (uint32_t)pfx_mixture_isqrt_round((uint64_t)(g->var_bound > 0 ? g->var_bound : 0) << 20);
}

int pfx_range_is_broad(const pfx_component_t *c, const pfx_ring_t *g, const pfx_params_t *p)
{
    lin_t l;
    if (c == NULL || g == NULL || p == NULL) {
        return 0;
    }
    if (near_centre(c, pfx_mixture_max_eig(c), g)) {
        return 1;
    }
    first_lin(c, g, &l);
    return bends(c, &l, bend_limit(g, ring_sd(g), p));
}

/*
 * pfx_mixture_mul(a, b, sh) for 33 <= sh <= 63 with a in int32 and any b,
 * without the general 64x64 product: b = bh 2^32 + bl (bh = floor(b / 2^32)
 * in int32, 0 <= bl < 2^32), T = a bh (|T| <= 2^62), U = a bl (|U| < 2^63).
 * round(a b / 2^sh) = floor((T 2^32 + U + 2^(sh-1)) / 2^sh), and as
 * 2^(sh-1) is a multiple of 2^32 and U = floor(U / 2^32) 2^32 + (U mod 2^32)
 * that is floor((T + floor(U / 2^32) + 2^(sh-33)) / 2^(sh-32)) exactly
 * (ties toward +infinity, as mul64; |result| < 2^61: no saturation).
 */
static inline int64_t mul_i32_wide(int64_t a, int64_t b, unsigned sh)
{
    int64_t bh, t, u;
    if (a < INT32_MIN || a > INT32_MAX || (b >= INT32_MIN && b <= INT32_MAX)) {
        return pfx_mixture_mul(a, b, sh);
    }
    bh = pfx_mixture_shr_floor(b, 32u);
    t = (int64_t)(int32_t)a * (int32_t)bh;
    u = (int64_t)(int32_t)a * (int64_t)(uint32_t)((uint64_t)b & UINT64_C(0xFFFFFFFF));
    return pfx_mixture_shr_floor(t + pfx_mixture_shr_floor(u, 32u) + (INT64_C(1) << (sh - 33u)), sh - 32u);
}

/* q = innov^2 / s in Q16 from innov (Q20) and s's reciprocal: innov * (innov / s in Q40) >> 34. */
static int64_t innovation_q(int64_t innov, const pfx_recip64_t *rs)
{
    return mul_i32_wide(innov, pfx_mixture_mul_recip_inline(innov, rs, 40u), 34u);
}

/* log2 N(innov; 0, s) in Q16 from innov (Q20), s (Q30) and q = innov^2 / s
 * (Q16): -(log2(2 pi) + log2 s) / 2 - q / (2 ln 2). */
static int64_t innovation_log2lik(int64_t s, int64_t q)
{
    pfx_log2_q16_t l2s;
    (void)pfx_fixed_log2_u64((uint64_t)s, &l2s);
    return -pfx_mixture_shr_round((int64_t)PFX_LOG2_2PI_Q16 + l2s - (INT64_C(30) << 16), 1u) -
           pfx_mixture_mul(q, PFX_INV_2LN2_Q30, 30u);
}

/* The pair lies certainly below the prune floor: the product is not formed. */
#define COMPACT_BELOW_FLOOR PFX_ERR_EMPTY

/*
 * Iterated extended Kalman update (reference compact_update).  Local frame:
 * e = x - mean in Q20; D = (mean - centre) * 2^10 + e (Q20, int64).
 * Per iteration: h, rho from unit_vector (Q30, Q20; the first from `first`
 * when given); predicted = rho - h.e (Q20); ph = P h (Q30 m^2);
 * s = h.ph + var (Q30); gain g = ph / s (Q30, one reciprocal of s);
 * e = g (r - predicted) (Q20).
 * Posterior P - ph g^T in Q30 (off-diagonal averaged), rounded once to Q20.
 * log2 N(innov; 0, s) = -(log2(2 pi) + log2 s) / 2 - innov^2 / (2 s ln 2),
 * innov^2 / s = q from v = innov / s (Q30, same reciprocal), Q16.
 *
 * Gate (gate > 0, Q16): when q of the first linearisation exceeds it, the
 * pair is not relinearised: the result is the one-step update (what one
 * iteration gives).
 * Converged (reference step_tol_m): the loop stops when an iteration moves
 * e by at most tol (Q20), |step|^2 <= tol^2, or when the step is short
 * against the ring, |step|^2 <= 2 rho tol (Q40; rho of that iteration's
 * linearisation): relinearising after a step of length d moves the predicted
 * range by about its sagitta d^2 / (2 rho), so the next step would be at most
 * about tol.  Exact integer tests (each component is checked against 2^30
 * first, so the squares are at most 2^61).  tol = 0 stops only at a fixed
 * point, where every further iteration would repeat the last one bit for bit.
 * Floor: a product whose log2 weight (c + g + the likelihood, saturated to
 * int32 as stored) is below `floor` is not formed (COMPACT_BELOW_FLOOR);
 * INT64_MIN never drops.  The weight is known before the posterior, so a
 * dropped pair costs no covariance work.
 */
static pfx_status_t compact_core(const pfx_component_t *c, const pfx_ring_t *g, uint32_t iterations,
                                 pfx_ratio_q16_t gate, int32_t tol, const lin_t *first, int64_t floor,
                                 pfx_component_t *out)
{
    int64_t bx, by, ex = 0, ey = 0, rho, pred = 0, phx = 0, phy = 0, s = 0, gx = 0, gy = 0, innov = 0, q = -1;
    int64_t qxx, qxy, qyy, log2w, lim;
    int32_t hx, hy;
    uint32_t it;
    pfx_recip64_t rs;
    pfx_component_t res;
    pfx_status_t st;
    if (iterations < 1u) {
        iterations = 1u;
    }
    if (iterations > 8u) {
        iterations = 8u;
    }
    lim = (tol > 0) ? (INT64_C(1) << 30) : 0; /* the steps' squares then fit; tol = 0: fixed point only */
    if (first != NULL) {
        bx = (int64_t)first->dx * 1024; /* Q20, |.| <= 2^40 */
        by = (int64_t)first->dy * 1024;
    } else {
        bx = pfx_mixture_offset(g->cx, c->x) * 1024;
        by = pfx_mixture_offset(g->cy, c->y) * 1024;
    }
    for (it = 0u; it < iterations; ++it) {
        int64_t nx, ny, sx, sy;
        if (it == 0u && first != NULL) {
            hx = first->hx; /* unit_vector(bx, by): e = 0 */
            hy = first->hy;
            rho = first->rho;
        } else {
            unit_vector(bx + ex, by + ey, &hx, &hy, &rho);
        }
        /* e = 0 at the first linearisation: pred = rho there */
        pred = (it == 0u) ? rho : rho - pfx_mixture_add_sat(pfx_mixture_mul(hx, ex, 30u), pfx_mixture_mul(hy, ey, 30u));
        phx = pfx_mixture_mul32(c->pxx, hx, 20u) + pfx_mixture_mul32(c->pxy, hy, 20u); /* <= 2^42 */
        phy = pfx_mixture_mul32(c->pxy, hx, 20u) + pfx_mixture_mul32(c->pyy, hy, 20u);
        s = pfx_mixture_mul(hx, phx, 30u) + pfx_mixture_mul(hy, phy, 30u) + (int64_t)g->var * 1024;
        if ((g->nxx | g->nyy) != 0) { /* N != 0 (PSD: zero diagonal, zero N): h^T N h (Q30), as h^T P h */
            int64_t nhx = pfx_mixture_mul32(g->nxx, hx, 20u) + pfx_mixture_mul32(g->nxy, hy, 20u);
            int64_t nhy = pfx_mixture_mul32(g->nxy, hx, 20u) + pfx_mixture_mul32(g->nyy, hy, 20u);
            s += pfx_mixture_mul(hx, nhx, 30u) + pfx_mixture_mul(hy, nhy, 30u);
        }
        if (s <= 0 || pfx_mixture_recip64((uint64_t)s, &rs) != PFX_OK) {
            return PFX_ERR_DEGENERATE;
        }
        innov = (int64_t)g->radius * 1024 - pred;
        if (it == 0u && gate > 0) {
            q = innovation_q(innov, &rs);
            if (q > gate) {
                iterations = 1u; /* gated: the one-step update */
            }
        }
        gx = pfx_mixture_mul_recip_inline(phx, &rs, 30u);
        gy = pfx_mixture_mul_recip_inline(phy, &rs, 30u);
        /* clamped to +-2^50 (2^30 m): only absurd inputs reach it, and D stays in range */
        nx = pfx_mixture_clamp(pfx_mixture_mul(gx, innov, 30u), -(INT64_C(1) << 50), INT64_C(1) << 50);
        ny = pfx_mixture_clamp(pfx_mixture_mul(gy, innov, 30u), -(INT64_C(1) << 50), INT64_C(1) << 50);
        sx = nx - ex; /* |.| <= 2^51 */
        sy = ny - ey;
        ex = nx;
        ey = ny;
        if (sx >= -lim && sx <= lim && sy >= -lim && sy <= lim) {
            int64_t step2 = sx * sx + sy * sy; /* Q40, <= 2^61 */
            if (step2 <= (int64_t)tol * tol || step2 <= pfx_mixture_mul(2 * (int64_t)tol, rho, 0u)) {
                break; /* converged: the next step would be at most tol */
            }
        }
        if (it + 1u < iterations) {
            q = -1; /* a later linearisation follows: recomputed below */
        }
    }
    if (q < 0) {
        q = innovation_q(innov, &rs); /* q >= 0 from the first linearisation is the same value */
    }
    log2w = pfx_mixture_add_sat((int64_t)c->log2w + g->log2w, innovation_log2lik(s, q));
    log2w = pfx_mixture_sat32(log2w);
    if (log2w < floor) {
        return COMPACT_BELOW_FLOOR;
    }
    qxx = (int64_t)c->pxx * 1024 - pfx_mixture_mul(phx, gx, 30u);
    qyy = (int64_t)c->pyy * 1024 - pfx_mixture_mul(phy, gy, 30u);
    qxy = (int64_t)c->pxy * 1024 -
          pfx_mixture_shr_round(pfx_mixture_add_sat(pfx_mixture_mul(phx, gy, 30u), pfx_mixture_mul(phy, gx, 30u)), 1u);
    st = pfx_mixture_store_cov(pfx_mixture_shr_round(qxx, 10u), pfx_mixture_shr_round(qxy, 10u),
                               pfx_mixture_shr_round(qyy, 10u), &res);
    if (st != PFX_OK) {
        return st;
    }
    res.x = pfx_mixture_sat32((int64_t)c->x + pfx_mixture_shr_round(ex, 10u));
    res.y = pfx_mixture_sat32((int64_t)c->y + pfx_mixture_shr_round(ey, 10u));
    res.log2w = (int32_t)log2w;
    *out = res;
    return PFX_OK;
}

pfx_status_t pfx_range_compact(const pfx_component_t *c, const pfx_ring_t *g, uint32_t iterations,
                               pfx_component_t *out)
{
    if (c == NULL || g == NULL || out == NULL) {
        return PFX_ERR_ARG;
    }
    return compact_core(c, g, iterations, 0, 0, NULL, INT64_MIN, out);
}

/* u_k . d in Q40 (Q30 table * Q10 offset, |d| <= 2^30: each <= 2^60). */
static int64_t dir_dot(uint32_t k, int64_t dx, int64_t dy)
{
    return (int64_t)dir_cos(k) * dx + (int64_t)dir_sin(k) * dy;
}

/*
 * The window (reference broad_update): ring points within reach =
 * W sqrt(lambda_max) of the mean.  With d = mean - centre, rho = |d|:
 *   c_min > 1            <=>  num > 0 and num^2 > 4 r^2 rho^2  (exact, 128-bit)
 *   cos_k >= c_min       <=>  u_k . d >= num / (2 r)            (Q40)
 * where num = r^2 + rho^2 - reach^2 (Q20; reach^2 = W^2 lambda, Q32 * Q20
 * >> 32).  num / (2r) is rounded once to Q40 (1e-12 m).  Arc means are
 * offsets from the component in Q20 (no rounding to 1 mm).
 */
static pfx_status_t broad_core(const pfx_component_t *c, int32_t lam, const pfx_ring_t *g, const pfx_params_t *p,
                               pfx_component_t *out, uint32_t *n_out)
{
    int64_t dx, dy, rho2, reach2, thr = 0, base;
    int64_t r;
    uint32_t mask[PFX_RING_DIRECTIONS / 32u];
    uint32_t stride, k, count, m = 0u, best = 0u;
    int all_pass;
    arc_shape_t a;
    *n_out = 0u;
    dx = pfx_mixture_offset(g->cx, c->x);
    dy = pfx_mixture_offset(g->cy, c->y);
    rho2 = dx * dx + dy * dy;
    reach2 = pfx_mixture_mul((int64_t)p->broad_window_sigmas * p->broad_window_sigmas, lam, 32u);
    r = g->radius < 0 ? 0 : (g->radius > RADIUS_LIMIT ? RADIUS_LIMIT : g->radius);
    all_pass = (rho2 == 0 || r == 0);
    if (!all_pass) {
        int64_t num = r * r + rho2 - reach2; /* r^2 <= 2^60, rho2 <= 2^61 */
        pfx_recip64_t rr;
        if (num > 0 && pfx_mixture_cmp_products((uint64_t)num, (uint64_t)num, (uint64_t)(4 * r * r),
                                                (uint64_t)rho2) > 0) {
            return PFX_OK; /* the ring misses the window */
        }
        (void)pfx_mixture_recip64((uint64_t)(2 * r), &rr);
        thr = pfx_mixture_mul_recip(num, &rr, 30u);
    }
    stride = pfx_range_stride((pfx_len_q10_t)r, p->ring_arc_spacing, PFX_RING_DIRECTIONS);
    memset(mask, 0, sizeof(mask));
    for (k = 0u; k < PFX_RING_DIRECTIONS; k += stride) {
        if (all_pass || dir_dot(k, dx, dy) >= thr) {
            mask[k >> 5] |= UINT32_C(1) << (k & 31u);
        }
    }
    for (;;) {
        count = 0u;
        for (k = 0u; k < PFX_RING_DIRECTIONS; k += stride) {
            count += (mask[k >> 5] >> (k & 31u)) & 1u;
        }
        if (count <= p->broad_max_arcs || stride >= PFX_RING_DIRECTIONS) {
            break;
        }
        stride <<= 1;
    }
    if (count == 0u) {
        /* Window narrower than the table: the nearest direction (first maximum). */
        int64_t top = dir_dot(0u, dx, dy);
        for (k = stride; k < PFX_RING_DIRECTIONS; k += stride) {
            int64_t v = dir_dot(k, dx, dy);
            if (v > top) {
                top = v;
                best = k;
            }
        }
        mask[best >> 5] |= UINT32_C(1) << (best & 31u);
    }
    arc_shape((pfx_len_q10_t)r, g->var, stride, p, &a);
    base = (int64_t)g->log2w + a.log_len;
    for (k = 0u; k < PFX_RING_DIRECTIONS && m < PFX_MAX_BROAD_ARCS; k += stride) {
        pfx_component_t arc;
        int64_t ax, ay;
        if (((mask[k >> 5] >> (k & 31u)) & 1u) == 0u) {
            continue;
        }
        if (arc_cov(g, a.t2, k, &arc) != PFX_OK) {
            continue;
        }
        /* arc centre - component mean, Q20: (centre - mean) * 2^10 + radial u (Q20 * Q30 >> 30) */
        ax = -dx * 1024 + pfx_mixture_mul(a.radial, dir_cos(k), 30u);
        ay = -dy * 1024 + pfx_mixture_mul(a.radial, dir_sin(k), 30u);
        if (pfx_mixture_product_local(c, ax, ay, arc.pxx, arc.pxy, arc.pyy, base, &out[m]) == PFX_OK) {
            ++m;
        }
    }
    *n_out = m;
    return PFX_OK;
}

pfx_status_t pfx_range_broad(const pfx_component_t *c, const pfx_ring_t *g, const pfx_params_t *p,
                             pfx_component_t *out, uint32_t *n_out)
{
    if (n_out != NULL) {
        *n_out = 0u;
    }
    if (c == NULL || g == NULL || p == NULL || out == NULL || n_out == NULL) {
        return PFX_ERR_ARG;
    }
    return broad_core(c, pfx_mixture_max_eig(c), g, p, out, n_out);
}

/*
 * The ring gate (reference ring_gate): the ring passes more than sqrt(gate)
 * upper-bound sigmas from the component mean, (rho - r)^2 > gate (var_bound +
 * lambda_max), with rho = |mean - centre| (rho2 = rho^2, Q20, <= 2^61).
 * No square root: with A = gate (var_bound + lambda) (Q20) and num = r^2 + rho^2 - A,
 *   (rho - r)^2 > A  <=>  num > 2 r rho  <=>  num > 0 and num^2 > 4 r^2 rho^2
 * (exact, pfx_mixture_cmp_products_inline).  r <= 2^24 (Q10), lambda <=
 * 2^32, A < 2^63: no overflow.  gate = 0: off.
 */
static int ring_far(int64_t rho2, int64_t lam, const pfx_ring_t *g, pfx_ratio_q16_t gate)
{
    int64_t r, r2, a, num;
    if (gate <= 0) {
        return 0;
    }
    r = g->radius < 0 ? 0 : g->radius;
    r2 = (int64_t)(int32_t)r * (int32_t)r;
    a = pfx_mixture_mul(gate, (int64_t)g->var_bound + (lam > 0 ? lam : 0), 16u);
    num = r2 + rho2 - a;
    return num > 0 && pfx_mixture_cmp_products_inline((uint64_t)num, (uint64_t)num, (uint64_t)r2 * 4u, (uint64_t)rho2) > 0;
}

/*
 * lambda_max of a work component, computed only when a test needs it.
 * For a positive semi-definite c inside pfx_mixture_max_eig's 64-bit case
 * (root = round(sqrt((a-d)^2 + 4 b^2)) exactly, |a-d| <= root <= a+d as
 * b^2 <= a d) its result lies in [max(a, d), a + d]: the ring gate and the
 * near-centre test are monotone in lambda, so a test that these bounds
 * decide gets the same answer as with the exact value (which is then never
 * computed unless the pair is broad).  Anything else: exact at once.
 */
typedef struct {
    int64_t lo, hi; /* lo == hi: the exact value (also when a bound is met: a d = 0 gives lambda = max(a, d)) */
} lam_bounds_t;

static void lam_init(const pfx_component_t *c, lam_bounds_t *lb)
{
    int64_t a = c->pxx, d = c->pyy, b = c->pxy;
    if (a >= 0 && d >= 0 && a - d > -(INT64_C(1) << 31) && a - d < (INT64_C(1) << 31) && b > -(INT64_C(1) << 30) &&
        b < (INT64_C(1) << 30) && b * b <= a * d) {
        lb->lo = (a > d) ? a : d;
        lb->hi = a + d;
        return;
    }
    lb->lo = lb->hi = pfx_mixture_max_eig(c);
}

static int32_t lam_exact(const pfx_component_t *c, lam_bounds_t *lb)
{
    if (lb->lo != lb->hi) {
        lb->lo = lb->hi = pfx_mixture_max_eig(c);
    }
    return (int32_t)lb->lo;
}

/* ring_far and near_centre with lambda from its bounds (rho2 = |mean - centre|^2, Q20). */
static int ring_far_lazy(const pfx_component_t *c, lam_bounds_t *lb, int64_t rho2, const pfx_ring_t *g,
                         pfx_ratio_q16_t gate)
{
    if (ring_far(rho2, lb->hi, g, gate)) {
        return 1; /* far even with the largest lambda */
    }
    if (lb->lo == lb->hi || !ring_far(rho2, lb->lo, g, gate)) {
        return 0; /* not far even with the smallest (or gate off) */
    }
    return ring_far(rho2, lam_exact(c, lb), g, gate);
}

static int near_centre_lazy(const pfx_component_t *c, lam_bounds_t *lb, int64_t rho2)
{
    if (rho2 <= 4 * lb->lo) {
        return 1;
    }
    if (rho2 > 4 * lb->hi) {
        return 0;
    }
    return rho2 <= 4 * (int64_t)lam_exact(c, lb); /* near_centre */
}

/* Stream one product into the keep-heaviest buffer unless it is below the
 * floor; raise the floor with it.  best (int64) is the heaviest log2 weight
 * streamed so far (INT64_MIN: none), floor = best + prune_log2_ratio. */
typedef struct {
    int64_t best;
    int64_t floor;
} stream_floor_t;

static void push_product(pfx_component_t *cand, uint32_t *n_cand, const pfx_params_t *p, stream_floor_t *f,
                         const pfx_component_t *prod)
{
    if ((int64_t)prod->log2w < f->floor) {
        return; /* certainly pruned: below the floor of the heaviest so far */
    }
    (void)pfx_mixture_stream_push(cand, n_cand, p->candidate_cap, prod);
    if ((int64_t)prod->log2w > f->best) {
        f->best = prod->log2w;
        f->floor = f->best + p->prune_log2_ratio; /* >= -2^31 - 24 * 2^16: no overflow */
    }
}

/*
 * Products that pruning would drop are not streamed.  Pruning keeps
 * log2w >= max + prune_log2_ratio, with max the heaviest of all products
 * (always in the buffer); the heaviest streamed so far is at most that max,
 * so a product below its floor is pruned whatever comes later, and leaving
 * it out changes neither the max nor which products the buffer keeps above
 * the final floor, nor their order.  After pfx_mixture_prune the buffer is
 * the same as with every product streamed.
 */
pfx_status_t pfx_range_multiply(const pfx_component_t *work, uint32_t n, const pfx_ring_t *rings, uint32_t nr,
                                const pfx_params_t *p, pfx_component_t *cand, uint32_t *n_cand,
                                pfx_range_scratch_t *s)
{
    uint32_t b, q, k;
    stream_floor_t f;
    if (n_cand != NULL) {
        *n_cand = 0u;
    }
    if (work == NULL || rings == NULL || p == NULL || cand == NULL || n_cand == NULL || s == NULL ||
        n > PFX_MAX_CANDIDATES || nr > PFX_MAX_RINGS || p->candidate_cap > PFX_MAX_CANDIDATES) {
        return PFX_ERR_ARG;
    }
    f.best = INT64_MIN;
    f.floor = INT64_MIN;
    for (q = 0u; q < nr; ++q) {
        s->bend_limit[q] = bend_limit(&rings[q], ring_sd(&rings[q]), p);
    }
    for (b = 0u; b < n; ++b) {
        const pfx_component_t *c = &work[b];
        lam_bounds_t lb;
        lam_init(c, &lb);
        for (q = 0u; q < nr; ++q) {
            const pfx_ring_t *g = &rings[q];
            lin_t l;
            int broad;
            int64_t dx = pfx_mixture_offset(g->cx, c->x);
            int64_t dy = pfx_mixture_offset(g->cy, c->y);
            int64_t rho2 = (int64_t)(int32_t)dx * (int32_t)dx + (int64_t)(int32_t)dy * (int32_t)dy; /* <= 2^61 */
            if (ring_far_lazy(c, &lb, rho2, g, p->product_gate)) {
                continue; /* nothing of weight: the ring passes far from the component */
            }
            broad = near_centre_lazy(c, &lb, rho2);
            if (!broad) {
                lin_at(dx, dy, &l); /* first_lin, with the offsets at hand */
                broad = bends(c, &l, s->bend_limit[q]);
            }
            if (broad) {
                uint32_t na = 0u;
                (void)broad_core(c, lam_exact(c, &lb), g, p, s->arcs, &na);
                for (k = 0u; k < na; ++k) {
                    push_product(cand, n_cand, p, &f, &s->arcs[k]);
                }
            } else {
                pfx_component_t prod;
                if (compact_core(c, g, p->iekf_iterations, p->product_gate, PFX_IEKF_STEP_TOL_Q20, &l, f.floor,
                                 &prod) == PFX_OK) {
                    push_product(cand, n_cand, p, &f, &prod);
                }
            }
        }
    }
    return PFX_OK;
}
