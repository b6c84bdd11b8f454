/*
 * pfx_mixture.h - Gaussian-mixture algebra (module "mixture"), included by peerfix.h.
 *
 * Mirrors python/peerfix/reference/mixture.py step by step: log-sum-exp
 * normalising, moments, pruning, the keep-heaviest candidate buffer, the
 * one-pass gate merge, Runnalls' reduction, the Gaussian product, modes and
 * the point estimate.
 *
 * Representation
 *   - Means: pfx_len_q10_t (Q21.10 m).  Covariances: pfx_area_q20_t
 *     (Q11.20 m^2), pxy stored once (symmetric by construction).
 *   - Weights: pfx_log2_q16_t, base-2 log (the float twin's natural log
 *     weight times 1/ln 2).  Linear weights inside a step are int64 Q40
 *     relative to the heaviest component (2^40 = the heaviest), from
 *     pfx_fixed_exp2_split; fractions of a total are Q30.
 *   - Every step works in the local frame of a component mean: offsets are
 *     int64 (Q10 or Q20), clamped to +-2^30 Q10 (+-1 048 576 m) so that no
 *     product can overflow; realistic sites never come near the clamp.
 *   - Intermediates of the 2x2 algebra are int64 in Q30 (m^2, gains) with
 *     one rounding to the stored format at the end; products of two int64
 *     go through pfx_mixture_mul64 (exact 128-bit product, one rounding,
 *     saturating), divisions through one reciprocal per divisor
 *     (pfx_fixed_recip on the top 32 bits: relative error <= 2^-30).
 *   - Covariances that leave an update are checked: diagonals > 0 and
 *     det >= 1 (Q40 LSB); an off-diagonal that rounding pushed past
 *     sqrt(pxx pyy) is pulled back to it; a non-positive diagonal makes the
 *     candidate degenerate (PFX_ERR_DEGENERATE: the caller drops it).
 *     Entries beyond the Q20 range saturate (2048 m^2).
 *
 * Rounding: to nearest, ties toward +infinity (the house rule), unless a
 * comment says otherwise.
 */
#ifndef PFX_MIXTURE_H
#define PFX_MIXTURE_H

#include "peerfix.h"

#ifdef __cplusplus
extern "C" {
#endif

/* PFX_CDEF_BEGIN */

/* ---- compile-time bounds ---- */
#define PFX_MAX_COMPONENTS 8      /* K bound of a belief (run-time K <= this) */
#define PFX_MAX_WORKING 16        /* working mixture bound between neighbours */
#define PFX_MAX_CANDIDATES 64     /* products of one neighbour step; also the first ring's arcs */
#define PFX_MAX_NEIGHBOURS 16     /* broadcasts one update can use */
#define PFX_MAX_BROAD_ARCS 16     /* arcs of one broad product */
#define PFX_RING_DIRECTIONS 256   /* the arc direction table */
#define PFX_RUNNALLS_PAIRS 2016   /* PFX_MAX_CANDIDATES * (PFX_MAX_CANDIDATES - 1) / 2 */

/* ---- types with meaning ---- */
/* A coordinate or length in metres, Q21.10: LSB 2^-10 m (~0.98 mm), range +-2 097 152 m. */
typedef int32_t pfx_len_q10_t;
/* An area in m^2 (variance, covariance), Q11.20: LSB 2^-20 m^2 (~9.5e-7 m^2), range +-2048 m^2. */
typedef int32_t pfx_area_q20_t;
/* A dimensionless ratio >= 0 (inflation, sigma counts, sagitta ratio, Mahalanobis gates), Q15.16. */
typedef int32_t pfx_ratio_q16_t;

/* One Gaussian component: log2 weight, mean, covariance (symmetric: pxy once). 24 bytes. */
typedef struct {
    pfx_log2_q16_t log2w;
    pfx_len_q10_t x, y;
    pfx_area_q20_t pxx, pxy, pyy;
} pfx_component_t;

/* A belief or a broadcast: count = 0 means none (prior / censored). */
typedef struct {
    uint32_t count;
    pfx_component_t comp[PFX_MAX_COMPONENTS];
} pfx_belief_t;

/* The point estimate a user acts on. */
typedef struct {
    pfx_len_q10_t x, y;
    pfx_area_q20_t pxx, pxy, pyy;
    uint32_t mode_count;                /* 0 = prior only */
    pfx_frac_q30_t mode_weight;
    uint32_t components;
} pfx_estimate_t;

/* Scratch of the reductions (gate merge, Runnalls); lives in pfx_workspace_t. */
typedef struct {
    uint32_t cost[PFX_RUNNALLS_PAIRS];        /* Runnalls costs, packed monotone (see pfx_mixture.c), upper triangle */
    int64_t weight[PFX_MAX_CANDIDATES];       /* linear weights, Q40 */
    int32_t logdet[PFX_MAX_CANDIDATES];       /* log2 det P (raw Q40 determinant), Q16 */
    uint8_t order[PFX_MAX_CANDIDATES];        /* heaviest-first order */
    uint8_t group[PFX_MAX_CANDIDATES];        /* gate merge: seed of each component */
    uint8_t seeds[PFX_MAX_CANDIDATES];        /* gate merge: seeds in creation order */
    uint8_t members[PFX_MAX_CANDIDATES];      /* gate merge: members of one group */
    uint8_t alive[PFX_MAX_CANDIDATES];        /* Runnalls: still in the mixture */
    pfx_component_t tmp[PFX_MAX_CANDIDATES];  /* gate merge output */
} pfx_mixture_scratch_t;

/*
 * Wide arithmetic used across the core (exported for the tests).
 * mul64: round(a * b / 2^s) for any int64 a, b and s <= 127, ties toward
 *   +infinity, saturated to int64.  Scaling: Qa * Qb >> s.  Exact: the
 *   128-bit product is formed from four 32x32 partial products (one SMULL
 *   when both operands fit in 32 bits), rounded once.
 * cmp_products: sign of a*b - c*d for unsigned 64-bit operands (exact, 128-bit).
 */
int64_t pfx_mixture_mul64(int64_t a, int64_t b, unsigned s);
int pfx_mixture_cmp_products(uint64_t a, uint64_t b, uint64_t c, uint64_t d);

/* PFX_OK when every covariance of c[0..n) is positive semi-definite (pxx >= 0,
 * pyy >= 0, pxx*pyy >= pxy^2 in int64), else PFX_ERR_DEGENERATE; n > PFX_MAX_CANDIDATES: PFX_ERR_ARG. */
pfx_status_t pfx_mixture_check(const pfx_component_t *c, uint32_t n);

/* Largest eigenvalue 0.5(a+c) + sqrt(0.25(a-c)^2 + b^2), Q20, saturated to
 * INT32_MAX.  Exact 128-bit radicand, one rounded square root and one rounded
 * halving: error <= 1 LSB.  0 for a NULL pointer. */
pfx_area_q20_t pfx_mixture_max_eig(const pfx_component_t *c);

/* log-sum-exp normalising in log2: l -= max + log2(sum 2^(l - max)).
 * exp2 terms in Q30 (<= 0.57 LSB each), log2 of the sum 0.70 LSB: the
 * normalised weights are within 1 LSB (Q16) of exact.  n = 0 is a no-op. */
pfx_status_t pfx_mixture_normalise(pfx_component_t *c, uint32_t n);

/* Mean and covariance of the whole mixture (moment matching); out->log2w is
 * the log-sum-exp of the weights.  PFX_ERR_EMPTY for n = 0. */
pfx_status_t pfx_mixture_moments(const pfx_component_t *c, uint32_t n, pfx_component_t *out);

/* Drop components more than -log2_ratio below the heaviest (keeps order). */
pfx_status_t pfx_mixture_prune(pfx_component_t *c, uint32_t *n, pfx_log2_q16_t log2_ratio);

/* Keep-heaviest stream: append c while *count < cap; when full, c replaces
 * the lightest (the latest-arrived among equally light ones) if it is
 * strictly heavier, and goes to the end: the buffer always holds the cap
 * heaviest so far (earlier wins ties) in arrival order. */
pfx_status_t pfx_mixture_stream_push(pfx_component_t *buf, uint32_t *count, uint32_t cap, const pfx_component_t *c);

/* N(x; a) N(x; b) = z N(x; out): Kalman form (gain K = Pa (Pa + Pb)^-1,
 * P = K Pb, symmetrised), out->log2w = a->log2w + b->log2w + log2 z with
 * log z = log N(mu_b; mu_a, Pa + Pb).  PFX_ERR_DEGENERATE when Pa + Pb is
 * singular or the product is not positive definite (drop it). */
pfx_status_t pfx_mixture_product(const pfx_component_t *a, const pfx_component_t *b, pfx_component_t *out);

/* Moment-preserving merge of two components (Runnalls 2007). */
pfx_status_t pfx_mixture_merge(const pfx_component_t *a, const pfx_component_t *b, pfx_component_t *out);

/* 1 when (mu_a - mu_b)^T (Pa + Pb)^-1 (mu_a - mu_b) <= gate (Q16), exactly
 * (division-free 128-bit comparison); 0 when Pa + Pb is singular. */
int pfx_mixture_within_gate(const pfx_component_t *a, const pfx_component_t *b, pfx_ratio_q16_t gate);

/* One-pass fold of near-duplicates (reference gate_merge); gate <= 0: no-op. */
pfx_status_t pfx_mixture_gate_merge(pfx_component_t *c, uint32_t *n, pfx_ratio_q16_t gate, pfx_mixture_scratch_t *s);

/* Greedy Runnalls reduction to at most cap components (reference
 * runnalls_reduce): ties of the argmin go to the first pair in row-major
 * order; the merged component takes the place of i, j is removed; the
 * result is normalised.  n <= cap: unchanged. */
pfx_status_t pfx_mixture_runnalls(pfx_component_t *c, uint32_t *n, uint32_t cap, pfx_mixture_scratch_t *s);

/* reference reduce_to without the hard cap (the stream buffer is the hard
 * cap): prune, gate merge (always: a unimodal mixture folds to one component),
 * Runnalls when still n > cap, normalise. */
pfx_status_t pfx_mixture_reduce(pfx_component_t *c, uint32_t *n, uint32_t cap, pfx_log2_q16_t log2_ratio,
                                pfx_ratio_q16_t gate, pfx_mixture_scratch_t *s);

/* reference point_estimate for n <= PFX_MAX_COMPONENTS (no scratch needed):
 * modes heaviest first within the gate, modes below min_weight dropped (the
 * heaviest is kept when none reaches it); the reported mode is the
 * heaviest: its moments and weight, mode_count the modes kept.
 * out->components = n.  PFX_ERR_EMPTY for n = 0, PFX_ERR_ARG for
 * n > PFX_MAX_COMPONENTS. */
pfx_status_t pfx_mixture_point_estimate(const pfx_component_t *c, uint32_t n, pfx_ratio_q16_t gate,
                                        pfx_frac_q30_t min_weight, pfx_estimate_t *out);

/* PFX_CDEF_END */

/* ---- internal helpers shared by the core's modules (not part of the binding) ---- */

/* 1/x ~ mant / 2^shift for a 64-bit x > 0: x rounded to its top 32 bits,
 * then pfx_fixed_recip; relative error <= 2^-30.  shift <= 94. */
typedef struct {
    int32_t mant;
    uint32_t shift;
} pfx_recip64_t;

pfx_status_t pfx_mixture_recip64(uint64_t x, pfx_recip64_t *r);
/* round(num * 2^frac / x) from x's reciprocal (relative error <= 2^-30 + 0.5 LSB), saturated. */
int64_t pfx_mixture_mul_recip(int64_t num, const pfx_recip64_t *r, unsigned frac);
/* 2^x * 2^40 for a log2 weight x <= 0 (Q16): int64 Q40, 0 below 2^-40. */
int64_t pfx_mixture_lin_q40(int64_t x);
/* round(sqrt(x)) exactly, for any 64-bit x (= pfx_fixed_isqrt_round_u64). */
uint64_t pfx_mixture_isqrt_round(uint64_t x);
/* y = 2^30 / sqrt(m / 2^64) (Q30, about 2^-29 relative) for m in [2^62, 2^64). */
uint64_t pfx_mixture_rsqrt_q30(uint64_t m);

/* ---- inline arithmetic of the hot loops (same rules as pfx_fixed) ---- */

/* Leading zeros of 64 bits, inlined for the hot loops (pfx_fixed_clz32_inline). */
static inline unsigned pfx_mixture_clz64(uint64_t x)
{
    uint32_t hi = (uint32_t)(x >> 32);
    return (hi != 0u) ? pfx_fixed_clz32_inline(hi) : 32u + pfx_fixed_clz32_inline((uint32_t)x);
}

/* floor(x / 2^s), any s: pfx_fixed_shr64_floor, inlined.  With m all ones
 * for x < 0, x ^ m is x or -x - 1 (>= 0, as unsigned: no conversion of a
 * negative value), so one logical shift serves both signs:
 * floor(x / 2^s) = -floor((-x - 1) / 2^s) - 1 for x < 0. */
static inline int64_t pfx_mixture_shr_floor(int64_t x, unsigned s)
{
    uint64_t m = (x < 0) ? UINT64_MAX : 0u;
    uint64_t t;
    if (s > 63u) {
        return (x < 0) ? -1 : 0;
    }
    t = ((uint64_t)x ^ m) >> s; /* < 2^63 */
    return (x < 0) ? -(int64_t)t - 1 : (int64_t)t;
}

/* round(x / 2^s), ties toward +infinity, any s: pfx_fixed_shr64_round,
 * inlined; the form for a shift known at compile time (branch-free there).
 * u = x + 2^63 (the sign bit flipped: exact, unsigned), v = u + 2^(s-1) the
 * rounding bias; floor(v / 2^s) - 2^(63-s) = round(x / 2^s) as 2^(63-s) is
 * an integer (both terms fit int64 for 1 <= s <= 63).  v wraps exactly when
 * x >= 2^63 - 2^(s-1), where x / 2^s rounds to 2^(63-s). */
static inline int64_t pfx_mixture_shr_round(int64_t x, unsigned s)
{
    uint64_t u, v;
    if (s == 0u) {
        return x;
    }
    if (s > 63u) {
        return 0;
    }
#if defined(PFX_VARIANT_TIES_DOWN)
    /* Test-only variant (see pfx_fixed_shr_round): ties toward -infinity. */
    if (((uint64_t)x & ((UINT64_C(1) << s) - 1u)) == (UINT64_C(1) << (s - 1u))) {
        return pfx_mixture_shr_floor(x, s);
    }
#endif
    u = (uint64_t)x ^ (UINT64_C(1) << 63);
    v = u + (UINT64_C(1) << (s - 1u));
    if (v < u) {
        return (int64_t)(UINT64_C(1) << (63u - s));
    }
    return (int64_t)(v >> s) - (int64_t)(UINT64_C(1) << (63u - s));
}

/* The same value for a shift known only at run time: one variable shift,
 * t = floor(x / 2^(s-1)); floor(x / 2^s) = floor(t / 2) and the half-LSB
 * bit s-1 of x is t's lowest bit, so the result is floor(t / 2) + (t & 1)
 * (no overflow: floor(t / 2) + 1 <= 2^62). */
static inline int64_t pfx_mixture_shr_round_var(int64_t x, unsigned s)
{
    int64_t t;
    if (s == 0u) {
        return x;
    }
    if (s > 63u) {
        return 0;
    }
    t = pfx_mixture_shr_floor(x, s - 1u);
    return pfx_mixture_shr_floor(t, 1u) + (int64_t)((uint64_t)t & 1u);
}

/* a + b saturated to int64: pfx_fixed_add64_sat, inlined (the limits are
 * tested before the add, so the add itself never overflows). */
static inline int64_t pfx_mixture_add_sat(int64_t a, int64_t b)
{
    if (b > 0 && a > INT64_MAX - b) {
        return INT64_MAX;
    }
    if (b < 0 && a < INT64_MIN - b) {
        return INT64_MIN;
    }
    return a + b;
}

/* x clamped to [lo, hi]: pfx_fixed_clamp64, inlined. */
static inline int64_t pfx_mixture_clamp(int64_t x, int64_t lo, int64_t hi)
{
    return (x < lo) ? lo : ((x > hi) ? hi : x);
}

/* pfx_mixture_shr_round(x, s) for |x| <= 2^62 (products of two int32):
 * x + 2^(s-1) cannot overflow there, so the carry test goes; shifts known
 * at compile time fold the range tests away. */
static inline int64_t pfx_mixture_round_small(int64_t x, unsigned s)
{
#if defined(PFX_VARIANT_TIES_DOWN)
    return pfx_mixture_shr_round(x, s); /* the test-only rounding variant */
#else
    uint64_t u;
    if (s == 0u || s > 62u) {
        return pfx_mixture_shr_round(x, s);
    }
    u = (uint64_t)(x + (INT64_C(1) << (s - 1u))) ^ (UINT64_C(1) << 63);
    return (int64_t)(u >> s) - (int64_t)(UINT64_C(1) << (63u - s));
#endif
}

/* pfx_mixture_shr_round_var(x, s) for |x| <= 2^62: floor((x + 2^(s-1)) /
 * 2^s) with one variable shift (floor through x ^ m, m all ones for x < 0). */
static inline int64_t pfx_mixture_round_var_small(int64_t x, unsigned s)
{
    uint64_t m;
    int64_t y;
    if (s == 0u || s > 62u) {
        return pfx_mixture_shr_round_var(x, s);
    }
    y = x + (INT64_C(1) << (s - 1u));
    m = (y < 0) ? UINT64_MAX : 0u;
    return (int64_t)((((uint64_t)y ^ m) >> s) ^ m);
}

/* An unsigned 128-bit value, and the exact product of two 64-bit values
 * from four 32x32 -> 64 products (mid < 3 * 2^32 cannot wrap); inline for
 * the hot exact comparisons of pfx_mixture.c and pfx_range.c. */
typedef struct {
    uint64_t hi;
    uint64_t lo;
} pfx_u128_t;

static inline pfx_u128_t pfx_mixture_u128_mul(uint64_t a, uint64_t b)
{
    const uint64_t m32 = UINT64_C(0xFFFFFFFF);
    uint64_t a0 = a & m32, a1 = a >> 32, b0 = b & m32, b1 = b >> 32;
    uint64_t p00 = a0 * b0, p01 = a0 * b1, p10 = a1 * b0, p11 = a1 * b1;
    uint64_t mid = (p00 >> 32) + (p01 & m32) + (p10 & m32);
    pfx_u128_t r;
    r.lo = ((mid & m32) << 32) | (p00 & m32);
    r.hi = p11 + (p01 >> 32) + (p10 >> 32) + (mid >> 32);
    return r;
}

/* pfx_mixture_cmp_products, inline: sign of a b - c d, exact.  Factors
 * that all fit 32 bits (the usual ranges and offsets of a tag) take two
 * 32 x 32 -> 64 products; any others the 128-bit ones. */
static inline int pfx_mixture_cmp_products_inline(uint64_t a, uint64_t b, uint64_t c, uint64_t d)
{
    pfx_u128_t x, y;
    if (((a | b | c | d) >> 32) == 0u) {
        uint64_t p = (uint64_t)(uint32_t)a * (uint32_t)b, q = (uint64_t)(uint32_t)c * (uint32_t)d;
        return (p < q) ? -1 : ((p > q) ? 1 : 0);
    }
    x = pfx_mixture_u128_mul(a, b);
    y = pfx_mixture_u128_mul(c, d);
    if (x.hi != y.hi) {
        return (x.hi < y.hi) ? -1 : 1;
    }
    return (x.lo < y.lo) ? -1 : ((x.lo > y.lo) ? 1 : 0);
}

/* v in int32 (then a product of two such is one 32x32 -> 64 multiply). */
static inline int pfx_mixture_in_int32(int64_t v)
{
    return v >= INT32_MIN && v <= INT32_MAX;
}

/* round(a * b / 2^s) for int32 operands: |a b| <= 2^62, one rounding. */
static inline int64_t pfx_mixture_mul32(int32_t a, int32_t b, unsigned s)
{
    return pfx_mixture_round_small((int64_t)a * b, s);
}

/* pfx_mixture_mul64 with the one-multiply case inlined (both operands in int32). */
static inline int64_t pfx_mixture_mul(int64_t a, int64_t b, unsigned s)
{
    if (pfx_mixture_in_int32(a) && pfx_mixture_in_int32(b)) {
        return pfx_mixture_mul32((int32_t)a, (int32_t)b, s);
    }
    return pfx_mixture_mul64(a, b, s);
}

/* pfx_mixture_mul for a shift known only at run time. */
static inline int64_t pfx_mixture_mul_var(int64_t a, int64_t b, unsigned s)
{
    if (pfx_mixture_in_int32(a) && pfx_mixture_in_int32(b)) {
        return pfx_mixture_round_var_small((int64_t)(int32_t)a * (int32_t)b, s);
    }
    return pfx_mixture_mul64(a, b, s);
}

/* pfx_mixture_mul_recip with its common case inlined, for hot loops: num
 * in int32 and no left shift, one 32x32 multiply and one rounding shift;
 * anything else goes to the out-of-line function (the same value). */
static inline int64_t pfx_mixture_mul_recip_inline(int64_t num, const pfx_recip64_t *r, unsigned frac)
{
    if (r->shift >= frac && pfx_mixture_in_int32(num)) {
        return pfx_mixture_round_var_small((int64_t)(int32_t)num * r->mant, r->shift - frac);
    }
    return pfx_mixture_mul_recip(num, r, frac);
}

static inline int32_t pfx_mixture_sat32(int64_t x)
{
    return (x > INT32_MAX) ? INT32_MAX : ((x < INT32_MIN) ? INT32_MIN : (int32_t)x);
}

/* b - a for two coordinates, clamped to +-2^30 (the local-frame bound). */
static inline int64_t pfx_mixture_offset(int32_t a, int32_t b)
{
    int64_t d = (int64_t)b - (int64_t)a;
    const int64_t lim = INT64_C(1) << 30;
    return (d > lim) ? lim : ((d < -lim) ? -lim : d);
}
/* Store an int64 Q20 covariance: saturate to int32, pull pxy back to keep
 * det >= 1; PFX_ERR_DEGENERATE if a diagonal is <= 0 (out untouched then). */
pfx_status_t pfx_mixture_store_cov(int64_t pxx, int64_t pxy, int64_t pyy, pfx_component_t *out);
/* The Gaussian product with b given by its mean offset from a (Q20) and its
 * covariance; out->log2w = a->log2w + extra_log2w + log2 z. */
pfx_status_t pfx_mixture_product_local(const pfx_component_t *a, int64_t dx_q20, int64_t dy_q20, int32_t bxx,
                                       int32_t bxy, int32_t byy, int64_t extra_log2w, pfx_component_t *out);

/* ---- generated constants (tools/gen_direction_table.py) ---- */
/* BEGIN GENERATED CONSTANTS by tools/gen_direction_table.py: do not edit */
#define PFX_PI_Q29 (1686629713) /* round(pi * 2^29) */
#define PFX_LOG2_2PI_Q16 (173768) /* round(log2(2 pi) * 2^16) */
#define PFX_INV_2LN2_Q30 (774541002) /* round(1 / (2 ln 2) * 2^30) */
#define PFX_LOG2_1E9_Q16 (-1959353) /* round(log2(1e-9) * 2^16) */
/* END GENERATED CONSTANTS */

#ifdef __cplusplus
}
#endif

#endif /* PFX_MIXTURE_H */
