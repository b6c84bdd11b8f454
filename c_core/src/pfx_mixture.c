/*
 * pfx_mixture.c - Gaussian-mixture algebra.  See pfx_mixture.h for the
 * formats; each function says its scaling, overflow and rounding.
 *
 * Mirrors python/peerfix/reference/mixture.py.  Portability notes (as in
 * pfx_fixed.c): negative values are never shifted (floor and rounding
 * shifts go through pfx_fixed_shr64_*), magnitudes are taken through
 * unsigned arithmetic, and every product is bounded in a comment or formed
 * by pfx_mixture_mul64 (128-bit exact, saturating).
 */
#include <string.h>

#include "peerfix.h"

#define ONE_Q30 (INT64_C(1) << 30)

/* BEGIN GENERATED SEEDS by tools/gen_direction_table.py: do not edit */
/* round(2^15 / sqrt((65 + 2 i) / 256)), i = 0..95: 1/sqrt(M) seeds, Q15, M in [1/4, 1). */
static const uint16_t k_rsqrt_seed_q15[96] = {
    65030u, 64052u, 63117u, 62222u, 61363u, 60540u, 59748u, 58987u, 58254u, 57548u, 56867u, 56210u,
    55574u, 54960u, 54366u, 53791u, 53233u, 52693u, 52169u, 51660u, 51165u, 50685u, 50218u, 49763u,
    49321u, 48890u, 48470u, 48061u, 47663u, 47273u, 46894u, 46523u, 46161u, 45807u, 45462u, 45124u,
    44793u, 44470u, 44153u, 43843u, 43540u, 43243u, 42951u, 42666u, 42386u, 42112u, 41843u, 41579u,
    41320u, 41065u, 40816u, 40571u, 40330u, 40093u, 39861u, 39632u, 39408u, 39187u, 38970u, 38756u,
    38546u, 38340u, 38136u, 37936u, 37739u, 37545u, 37354u, 37166u, 36980u, 36798u, 36618u, 36441u,
    36266u, 36093u, 35924u, 35756u, 35591u, 35428u, 35267u, 35109u, 34953u, 34798u, 34646u, 34496u,
    34347u, 34201u, 34056u, 33913u, 33772u, 33633u, 33496u, 33360u, 33225u, 33093u, 32962u, 32832u
};
/* END GENERATED SEEDS */
#define ONE_Q40 (INT64_C(1) << 40)
#define OFFSET_LIMIT (INT64_C(1) << 30)

/* ------------------------------------------------------------------------ */
/* 128-bit unsigned helpers                                                   */
/* ------------------------------------------------------------------------ */

typedef pfx_u128_t u128_t;

static uint64_t mag64(int64_t v)
{
    return (v < 0) ? (uint64_t)(-(v + 1)) + 1u : (uint64_t)v;
}

/* The helpers below never wrap and never shift a set bit out (clean under
 * clang's -fsanitize=integer): carries and borrows are found by comparison,
 * shifted words are masked first. */

/* Exact a * b (pfx_mixture_u128_mul): inline where the struct would
 * otherwise go through memory (hot callers), u128_mul out of line for the others. */
static inline u128_t u128_mul_inline(uint64_t a, uint64_t b)
{
    return pfx_mixture_u128_mul(a, b);
}

static u128_t u128_mul(uint64_t a, uint64_t b)
{
    return u128_mul_inline(a, b);
}

/* Exact a * b for a 32-bit a: two 32x32 -> 64 products; the upper partial
 * sum a * b1 + carry is at most (2^32 - 1) * 2^32 < 2^64. */
static inline u128_t u128_mul_u32(uint32_t a, uint64_t b)
{
    const uint64_t m32 = UINT64_C(0xFFFFFFFF);
    uint64_t lo = (uint64_t)a * (uint32_t)(b & m32);
    uint64_t up = (uint64_t)a * (uint32_t)(b >> 32) + (lo >> 32);
    u128_t r;
    r.lo = ((up & m32) << 32) | (lo & m32);
    r.hi = up >> 32;
    return r;
}

/* Sums stay below 2^128 wherever they are used (bounds at the call). */
static u128_t u128_add(u128_t a, u128_t b)
{
    u128_t r;
    if (b.lo > UINT64_MAX - a.lo) {
        r.lo = b.lo - (UINT64_MAX - a.lo) - 1u;
        r.hi = a.hi + b.hi + 1u;
    } else {
        r.lo = a.lo + b.lo;
        r.hi = a.hi + b.hi;
    }
    return r;
}

/* a - b for a >= b. */
static u128_t u128_sub(u128_t a, u128_t b)
{
    u128_t r;
    if (a.lo < b.lo) {
        r.lo = (UINT64_MAX - b.lo) + a.lo + 1u;
        r.hi = a.hi - b.hi - 1u;
    } else {
        r.lo = a.lo - b.lo;
        r.hi = a.hi - b.hi;
    }
    return r;
}

static int u128_cmp(u128_t a, u128_t b)
{
    if (a.hi != b.hi) {
        return (a.hi < b.hi) ? -1 : 1;
    }
    if (a.lo != b.lo) {
        return (a.lo < b.lo) ? -1 : 1;
    }
    return 0;
}

static u128_t u128_shr(u128_t a, unsigned s)
{
    u128_t r;
    if (s == 0u) {
        return a;
    }
    if (s >= 128u) {
        r.hi = 0u;
        r.lo = 0u;
    } else if (s >= 64u) {
        r.lo = a.hi >> (s - 64u);
        r.hi = 0u;
    } else {
        r.lo = (a.lo >> s) | ((a.hi & ((UINT64_C(1) << s) - 1u)) << (64u - s));
        r.hi = a.hi >> s;
    }
    return r;
}

/* a * 2^s for s < 64 (callers keep the result below 2^128). */
static u128_t u128_shl(u128_t a, unsigned s)
{
    u128_t r;
    if (s == 0u) {
        return a;
    }
    r.hi = ((a.hi & (UINT64_MAX >> s)) << s) | (a.lo >> (64u - s));
    r.lo = (a.lo & (UINT64_MAX >> s)) << s;
    return r;
}

static u128_t u128_pow2(unsigned s)
{
    u128_t r;
    r.hi = (s >= 64u) ? (UINT64_C(1) << (s - 64u)) : 0u;
    r.lo = (s >= 64u) ? 0u : (UINT64_C(1) << s);
    return r;
}

/* ------------------------------------------------------------------------ */
/* wide arithmetic                                                            */
/* ------------------------------------------------------------------------ */

/* v in int32: the high word is the sign extension of the low word (a
 * test on the words, cheaper than two 64-bit compares). */
static int fits32(int64_t v)
{
    uint64_t u = (uint64_t)v;
    return (uint32_t)(u >> 32) == 0u - ((uint32_t)(u & UINT64_C(0xFFFFFFFF)) >> 31);
}

/*
 * round(a * b / 2^s) for int64 a and int32 b, saturated: two 32x32 -> 64
 * products of the magnitudes, P = |a| |b| = H 2^32 + L (H < 2^62 + 2^32,
 * L < 2^32), and the sign applied last.  Ties toward +infinity: the
 * magnitude gets the bias 2^(s-1), or 2^(s-1) - 1 when the product is
 * negative.  s <= 32: with the bias added to L (carry into H),
 * round = H 2^(32-s) + L / 2^s, at least 2^63 exactly when H >= 2^(31+s)
 * (saturated; a negative 2^63 is INT64_MIN either way).  32 < s < 96: only
 * the carry of L plus the bias's low word reaches bit s, the result is
 * below 2^62.  s >= 96: |a b| < 2^94 rounds to 0.
 */
static int64_t mul64x32(int64_t a, int32_t b, unsigned s)
{
    const uint64_t m32 = UINT64_C(0xFFFFFFFF);
    int negative = (a < 0) != (b < 0);
    uint64_t ma = mag64(a);
    uint32_t mb = (b < 0) ? (uint32_t)(-(b + 1)) + 1u : (uint32_t)b;
    uint64_t lo = (uint64_t)(uint32_t)(ma & m32) * mb;
    uint64_t h = (uint64_t)(uint32_t)(ma >> 32) * mb + (lo >> 32); /* < 2^62 + 2^32 */
    uint32_t l = (uint32_t)(lo & m32), hh, hl;
    uint64_t q;
    if (s == 0u) {
        if (h > (uint64_t)INT32_MAX) {
            return negative ? INT64_MIN : INT64_MAX;
        }
        q = (h << 32) | l;
    } else if (s <= 32u) {
        /* 32-bit words: no variable 64-bit shift */
        uint64_t t = (uint64_t)l + ((UINT32_C(1) << (s - 1u)) - (negative ? 1u : 0u)); /* < 2^33 */
        h += t >> 32;
        l = (uint32_t)(t & m32);
        if (s == 32u) {
            q = h;
        } else {
            hh = (uint32_t)(h >> 32);
            hl = (uint32_t)(h & m32);
            if ((hh >> (s - 1u)) != 0u) { /* h >= 2^(31+s) */
                return negative ? INT64_MIN : INT64_MAX;
            }
            q = ((uint64_t)((hh << (32u - s)) | (hl >> s)) << 32) |
                (((hl & (UINT32_MAX >> (32u - s))) << (32u - s)) | (l >> s));
        }
    } else if (s < 96u) {
        /* k = s - 32: floor((h' + 2^(k-1) [- 1]) / 2^k), h' = h plus the
         * carry of the low word (l + 2^32 - 1 carries iff l != 0, negative
         * only), as floor((floor(h'' / 2^(k-1)) + 1) / 2) with h'' = h' [- 1]. */
        unsigned k = s - 32u;
        if (negative) {
            h += (l != 0u) ? 1u : 0u;
            if (h == 0u) {
                return 0;
            }
            h -= 1u;
        }
        q = ((h >> (k - 1u)) + 1u) >> 1;
    } else {
        return 0;
    }
    return negative ? -(int64_t)q : (int64_t)q;
}

/* Both factors beyond int32: four 32x32 products (out of line, so that the
 * dispatch below stays a leaf with tail calls). */
PFX_NOINLINE static int64_t mul64x64(int64_t a, int64_t b, unsigned s)
{
    u128_t p;
    int negative;
    negative = (a < 0) != (b < 0); /* neither is 0 here */
    p = u128_mul_inline(mag64(a), mag64(b));
    if (s >= 128u) {
        return 0; /* |a b| / 2^128 < 1/4 */
    }
    if (s > 0u) {
        u128_t bias = u128_pow2(s - 1u);
        if (negative) {
            bias = u128_sub(bias, u128_pow2(0u));
        }
        p = u128_shr(u128_add(p, bias), s);
    }
    if (p.hi != 0u) {
        return negative ? INT64_MIN : INT64_MAX;
    }
    if (!negative) {
        return (p.lo > (uint64_t)INT64_MAX) ? INT64_MAX : (int64_t)p.lo;
    }
    if (p.lo >= (UINT64_C(1) << 63)) {
        return INT64_MIN;
    }
    return -(int64_t)p.lo;
}

/* Scaling: Qa * Qb >> s.  Overflow: the product is exact (two 32x32
 * products when one factor fits 32 bits, else four: 128 bits, < 2^126);
 * the rounding bias (< 2^127) cannot carry out; the result saturates to
 * int64.  Rounding: once, to nearest, ties toward +infinity (a negative
 * magnitude gets 2^(s-1) - 1 as its bias). */
/* Both factors in int32: |a b| <= 2^62, one rounding (out of line like
 * mul64x64: the dispatch below then needs no stack frame of its own). */
PFX_NOINLINE static int64_t mul32x32(int32_t a, int32_t b, unsigned s)
{
    return pfx_mixture_shr_round_var((int64_t)a * b, s);
}

int64_t pfx_mixture_mul64(int64_t a, int64_t b, unsigned s)
{
    int fa = fits32(a), fb = fits32(b);
    if (fa && fb) {
        return mul32x32((int32_t)a, (int32_t)b, s);
    }
    if (fb) {
        return mul64x32(a, (int32_t)b, s);
    }
    if (fa) {
        return mul64x32(b, (int32_t)a, s);
    }
    return mul64x64(a, b, s);
}

int pfx_mixture_cmp_products(uint64_t a, uint64_t b, uint64_t c, uint64_t d)
{
    return pfx_mixture_cmp_products_inline(a, b, c, d);
}

/* x is rounded to its top 32 bits (round-half-up of the dropped part; a
 * carry to 2^32 is renormalised), so 1/x keeps a relative error below
 * 2^-32 + 2^-31 (pfx_fixed_recip is correctly rounded). */
pfx_status_t pfx_mixture_recip64(uint64_t x, pfx_recip64_t *r)
{
    unsigned k = 0u;
    uint64_t xn = x;
    pfx_mant_q30_t mant;
    unsigned shift;
    pfx_status_t st;
    if (r == NULL) {
        return PFX_ERR_ARG;
    }
    if (x == 0u) {
        r->mant = 0;
        r->shift = 0u;
        return PFX_ERR_DOMAIN;
    }
    if (x > UINT32_MAX) {
        k = 32u - pfx_mixture_clz64(x); /* 1..32: x >> k < 2^32 */
        xn = (x >> k) + ((x >> (k - 1u)) & 1u);
        if (xn > UINT32_MAX) {
            xn >>= 1;
            k += 1u;
        }
    }
    st = pfx_fixed_recip((uint32_t)xn, &mant, &shift);
    r->mant = mant;
    r->shift = shift + k;
    return st;
}

/* num * 2^frac / x = num * mant * 2^(frac - shift): one mul64 (exact
 * product, one rounding) or, when frac > shift, a saturating left shift.
 * The common case of the mixture code, a linear weight 0 <= num < 2^42
 * against the reciprocal of a weight sum (k = shift - frac in [33, 63]),
 * skips mul64's dispatch: num mant = hi 2^32 + lo (hi = (num >> 32) mant
 * < 2^41, lo < 2^63), and as the rounding bias 2^(k-1) is a multiple of
 * 2^32, floor((num mant + 2^(k-1)) / 2^k) = floor((hi + floor((lo +
 * 2^(k-1)) / 2^32)) / 2^(k-32)): mul64's value (ties toward +infinity). */
int64_t pfx_mixture_mul_recip(int64_t num, const pfx_recip64_t *r, unsigned frac)
{
    if (num >= 0 && num < (INT64_C(1) << 42) && r->mant >= 0 && r->shift >= frac + 33u && r->shift <= frac + 63u) {
        unsigned k = r->shift - frac;
        uint64_t mant = (uint64_t)(uint32_t)r->mant;
        uint64_t lo = (uint64_t)((uint64_t)num & UINT64_C(0xFFFFFFFF)) * mant;
        uint64_t hi = ((uint64_t)num >> 32) * mant;
        uint64_t t = lo + (UINT64_C(1) << (k - 1u)); /* < 2^63 + 2^62 */
        return (int64_t)((hi + (t >> 32)) >> (k - 32u));
    }
    if (r->shift >= frac) {
        return pfx_mixture_mul_var(num, r->mant, r->shift - frac);
    }
    return pfx_fixed_shl64_sat(pfx_mixture_mul_var(num, r->mant, 0u), frac - r->shift);
}

/* 2^x in Q40 for x <= 0 (Q16): mant (Q30, [1, 2)) * 2^(floor(x) + 10).
 * floor(x) = 0 only for x = 0 (2^40 exactly); otherwise the shift is a
 * right shift, rounded once.  Error <= 0.63 LSB of the mantissa scaled
 * down, plus 0.5 LSB. */
int64_t pfx_mixture_lin_q40(int64_t x)
{
    pfx_mant_q30_t mant;
    int32_t e;
    if (x >= 0) {
        return ONE_Q40;
    }
    if (x < -(INT64_C(41) << 16)) {
        return 0;
    }
    (void)pfx_fixed_exp2_split((pfx_log2_q16_t)x, &mant, &e); /* e in [-41, -1] */
    if (e + 10 >= 0) {
        return (int64_t)mant * (INT64_C(1) << (unsigned)(e + 10)); /* <= 2^31 * 2^9 */
    }
    return pfx_mixture_shr_round_var((int64_t)mant, (unsigned)(-(e + 10)));
}

/* Saturate to the Q20 range; a pxy with pxy^2 > pxx pyy - 1 (only ever off
 * by rounding, or after saturation) becomes +-floor(sqrt(pxx pyy - 1)), so
 * det >= 1 (Q40).  pxx, pyy <= 2^31 - 1: the products fit in int64. */
pfx_status_t pfx_mixture_store_cov(int64_t pxx, int64_t pxy, int64_t pyy, pfx_component_t *out)
{
    int32_t a, b, c;
    uint32_t mb;
    uint64_t ac1;
    if (pxx <= 0 || pyy <= 0) {
        return PFX_ERR_DEGENERATE;
    }
    a = (pxx > INT32_MAX) ? INT32_MAX : (int32_t)pxx;
    c = (pyy > INT32_MAX) ? INT32_MAX : (int32_t)pyy;
    b = (int32_t)pfx_mixture_clamp(pxy, -(int64_t)INT32_MAX, INT32_MAX);
    /* a, c in [1, 2^31), |b| < 2^31: 32x32 -> 64 products of the magnitudes */
    mb = (b < 0) ? (uint32_t)(-b) : (uint32_t)b;
    ac1 = (uint64_t)(uint32_t)a * (uint32_t)c - 1u;
    if ((uint64_t)mb * mb > ac1) {
        int32_t m = (int32_t)pfx_fixed_isqrt_u64(ac1); /* < 2^31 */
        b = (b < 0) ? -m : m;
    }
    out->pxx = (pfx_area_q20_t)a;
    out->pxy = (pfx_area_q20_t)b;
    out->pyy = (pfx_area_q20_t)c;
    return PFX_OK;
}

/* ------------------------------------------------------------------------ */
/* checks and eigenvalues                                                     */
/* ------------------------------------------------------------------------ */

pfx_status_t pfx_mixture_check(const pfx_component_t *c, uint32_t n)
{
    uint32_t k;
    if (c == NULL && n > 0u) {
        return PFX_ERR_ARG;
    }
    if (n > PFX_MAX_CANDIDATES) {
        return PFX_ERR_ARG;
    }
    for (k = 0u; k < n; ++k) {
        /* |int32 * int32| <= 2^62: exact in int64. */
        if (c[k].pxx < 0 || c[k].pyy < 0 ||
            (int64_t)c[k].pxx * c[k].pyy < (int64_t)c[k].pxy * c[k].pxy) {
            return PFX_ERR_DEGENERATE;
        }
    }
    return PFX_OK;
}

/* Seed (relative error < 2^-8, the middle of a 1/128-wide interval of M)
 * and three Newton steps y <- y (3 - M y^2) / 2, each three 32x32 -> 64
 * multiplies: y^2 (Q30, < 2^32 as y < 2^31), M y^2 (Q30, ~2^30),
 * y (3 - M y^2) / 2 (Q30).  The error is squared by each step; after three
 * only the truncations remain: about 2^-29 relative.  (y < 2^31 and
 * M y^2 < 3 * 2^30 at every step: checked over every m >> 32, so the 32-bit
 * words give the values of the 64-bit forms.) */
uint64_t pfx_mixture_rsqrt_q30(uint64_t m)
{
    uint32_t m32 = (uint32_t)(m >> 32); /* M in Q32, [2^30, 2^32) */
    uint32_t y, t, u;
    unsigned it;
    if (m < (UINT64_C(1) << 62)) {
        return 0u; /* outside the contract */
    }
    y = (uint32_t)k_rsqrt_seed_q15[(m32 >> 25) - 32u] << 15;
    for (it = 0u; it < 3u; ++it) {
        t = (uint32_t)(((uint64_t)y * y) >> 30);
        u = (uint32_t)(((uint64_t)m32 * t) >> 32);
        y = (uint32_t)(((uint64_t)y * ((UINT32_C(3) << 30) - u)) >> 31);
    }
    return y;
}

/* The same function as pfx_fixed_isqrt_round_u64 (seed, two Newton steps,
 * exact final step there). */
uint64_t pfx_mixture_isqrt_round(uint64_t x)
{
    return pfx_fixed_isqrt_round_u64(x);
}

/* max_eig when (a-d)^2 + 4 b^2 may need 128 bits (out of line: rare). */
PFX_NOINLINE static pfx_area_q20_t max_eig_wide(int64_t a, int64_t b, int64_t d)
{
    int64_t root;
    u128_t t = u128_add(u128_mul(mag64(a - d), mag64(a - d)), u128_shl(u128_mul(mag64(b), mag64(b)), 2u));
    if (t.hi == 0u) {
        root = (int64_t)pfx_fixed_isqrt_round_u64(t.lo); /* <= 2^32 */
    } else {
        t = u128_shr(t, 2u);
        root = 2 * (int64_t)pfx_fixed_isqrt_round_u64(t.hi == 0u ? t.lo : UINT64_MAX);
    }
    return pfx_mixture_sat32(pfx_mixture_shr_round(a + d + root, 1u));
}

/* Scaling: Q20 in, Q20 out.  t = (a-c)^2 + 4 b^2 (Q40) is exact in 128
 * bits; when it fits 64 bits sqrt(t) is rounded once (0.5 LSB), else t/4 is
 * used (|result| > 2^31 then, so it saturates anyway).  The final halving
 * (a + c + sqrt t) / 2 rounds once more: error <= 1 LSB. */
pfx_area_q20_t pfx_mixture_max_eig(const pfx_component_t *c)
{
    int64_t a, b, d;
    if (c == NULL) {
        return 0;
    }
    a = c->pxx;
    d = c->pyy;
    b = c->pxy;
    if (a - d > -(INT64_C(1) << 31) && a - d < (INT64_C(1) << 31) && b > -(INT64_C(1) << 30) &&
        b < (INT64_C(1) << 30)) {
        /* the usual case: a-d and b in int32, two 32x32 products, (a-d)^2 < 2^62,
         * 4 b^2 < 2^62 (the same t) */
        int32_t ad = (int32_t)(a - d), b32 = (int32_t)b;
        uint64_t t64 = (uint64_t)((int64_t)ad * ad) + 4u * (uint64_t)((int64_t)b32 * b32);
        int64_t v = a + d + (int64_t)pfx_fixed_isqrt_round_u64(t64); /* in [-2^32, 2^33) */
        if (v >= 0) {
            uint64_t q = ((uint64_t)v + 1u) >> 1; /* round(v / 2), ties up */
            return (q > (uint64_t)INT32_MAX) ? INT32_MAX : (pfx_area_q20_t)q;
        }
        return pfx_mixture_sat32(pfx_mixture_shr_round(v, 1u));
    }
    return max_eig_wide(a, b, d);
}

/* ------------------------------------------------------------------------ */
/* weights                                                                    */
/* ------------------------------------------------------------------------ */

static int32_t max_log2w(const pfx_component_t *c, uint32_t n)
{
    uint32_t k;
    int32_t m = c[0].log2w;
    for (k = 1u; k < n; ++k) {
        if (c[k].log2w > m) {
            m = c[k].log2w;
        }
    }
    return m;
}

/* Scaling: Q16 log2 in, Q30 terms (each <= 2^30, n <= 64: sum < 2^37).
 * log2(sum / 2^30) from pfx_fixed_log2_u64 (0.70 LSB).  Saturating. */
pfx_status_t pfx_mixture_normalise(pfx_component_t *c, uint32_t n)
{
    uint32_t k;
    int32_t m;
    uint64_t sum = 0u, last = 0u;
    pfx_log2_q16_t l2;
    int64_t lse;
    if (n == 0u) {
        return PFX_OK;
    }
    if (c == NULL || n > PFX_MAX_CANDIDATES) {
        return PFX_ERR_ARG;
    }
    m = max_log2w(c, n);
    for (k = 0u; k < n; ++k) {
        /* equal weights in a row (the arcs of a first ring) reuse the last power */
        if (k == 0u || c[k].log2w != c[k - 1u].log2w) {
            last = (uint64_t)pfx_fixed_exp2_frac_sat(pfx_mixture_sat32((int64_t)c[k].log2w - m));
        }
        sum += last;
    }
    (void)pfx_fixed_log2_u64(sum, &l2); /* sum >= 2^30 > 0 */
    lse = (int64_t)m + l2 - (INT64_C(30) << 16);
    for (k = 0u; k < n; ++k) {
        c[k].log2w = pfx_mixture_sat32((int64_t)c[k].log2w - lse);
    }
    return PFX_OK;
}

/* ------------------------------------------------------------------------ */
/* moments                                                                    */
/* ------------------------------------------------------------------------ */

/*
 * Weighted moments of the members idx[0..n) of c, with linear weights w[]
 * (indexed by component, any positive scale up to 2^46) or, when w is
 * NULL, 2^(log2w - lmax) in Q40.  Writes mean and covariance of out (not
 * its weight); *wsum_out (if given) gets the sum of the weights.
 *
 * Scaling: fractions a_k = w_k / wsum in Q30 (one reciprocal); offsets
 * from the first member's mean, Q10 clamped to +-2^30; the mean offset
 * sum a_k d_k is Q40 (sum a_k ~ 2^30: |.| <= 2^61); the covariance sums
 * a_k (P_k + e_k e_k^T) in Q50 (saturating adds), e_k in Q20.
 * Rounding: a_k, the Q20 mean offset, e e^T to Q20, the final Q50 -> Q20.
 */
static pfx_status_t moments_core(const pfx_component_t *c, const uint8_t *idx, uint32_t n, const int64_t *w,
                                 int32_t lmax, pfx_component_t *out, int64_t *wsum_out)
{
    uint32_t k;
    int64_t wsum = 0;
    int64_t ax = 0, ay = 0, mx, my;
    int64_t sxx = 0, sxy = 0, syy = 0;
    pfx_recip64_t r;
    const pfx_component_t *ref = &c[idx[0]];
    for (k = 0u; k < n; ++k) {
        wsum += (w != NULL) ? w[idx[k]] : pfx_mixture_lin_q40((int64_t)c[idx[k]].log2w - lmax);
    }
    if (wsum_out != NULL) {
        *wsum_out = wsum;
    }
    if (wsum <= 0 || pfx_mixture_recip64((uint64_t)wsum, &r) != PFX_OK) {
        return PFX_ERR_DEGENERATE;
    }
    for (k = 0u; k < n; ++k) {
        const pfx_component_t *ck = &c[idx[k]];
        int64_t wk = (w != NULL) ? w[idx[k]] : pfx_mixture_lin_q40((int64_t)ck->log2w - lmax);
        int64_t a = pfx_mixture_mul_recip(wk, &r, 30u); /* <= 2^30 (+1) */
        ax += a * pfx_mixture_offset(ref->x, ck->x);    /* <= 2^31 * 2^30 each, sum a ~ 2^30 */
        ay += a * pfx_mixture_offset(ref->y, ck->y);
    }
    mx = pfx_mixture_shr_round(ax, 20u); /* Q20 offset of the mean from ref */
    my = pfx_mixture_shr_round(ay, 20u);
    for (k = 0u; k < n; ++k) {
        const pfx_component_t *ck = &c[idx[k]];
        int64_t wk = (w != NULL) ? w[idx[k]] : pfx_mixture_lin_q40((int64_t)ck->log2w - lmax);
        int64_t a = pfx_mixture_mul_recip(wk, &r, 30u);
        int64_t ex = pfx_mixture_offset(ref->x, ck->x) * 1024 - mx; /* Q20, |.| <= 2^41 */
        int64_t ey = pfx_mixture_offset(ref->y, ck->y) * 1024 - my;
        /* a * P <= 2^31 * 2^31; the spread term saturates on its own. */
        sxx = pfx_mixture_add_sat(pfx_mixture_add_sat(sxx, a * ck->pxx),
                                  pfx_mixture_mul(a, pfx_mixture_mul(ex, ex, 20u), 0u));
        sxy = pfx_mixture_add_sat(pfx_mixture_add_sat(sxy, a * ck->pxy),
                                  pfx_mixture_mul(a, pfx_mixture_mul(ex, ey, 20u), 0u));
        syy = pfx_mixture_add_sat(pfx_mixture_add_sat(syy, a * ck->pyy),
                                  pfx_mixture_mul(a, pfx_mixture_mul(ey, ey, 20u), 0u));
    }
    out->x = pfx_mixture_sat32((int64_t)ref->x + pfx_mixture_shr_round(mx, 10u));
    out->y = pfx_mixture_sat32((int64_t)ref->y + pfx_mixture_shr_round(my, 10u));
    return pfx_mixture_store_cov(pfx_mixture_shr_round(sxx, 30u), pfx_mixture_shr_round(sxy, 30u),
                                 pfx_mixture_shr_round(syy, 30u), out);
}

/* log2 of a Q40 linear weight relative to lmax, back to an absolute Q16 log2 weight. */
static int32_t log2_of_q40(int64_t w, int32_t lmax)
{
    pfx_log2_q16_t l2;
    if (w <= 0) {
        return INT32_MIN;
    }
    (void)pfx_fixed_log2_u64((uint64_t)w, &l2);
    return pfx_mixture_sat32((int64_t)lmax + l2 - (INT64_C(40) << 16));
}

pfx_status_t pfx_mixture_moments(const pfx_component_t *c, uint32_t n, pfx_component_t *out)
{
    uint8_t idx[PFX_MAX_CANDIDATES];
    uint32_t k;
    int32_t lmax;
    int64_t wsum;
    pfx_status_t st;
    if (c == NULL || out == NULL || n > PFX_MAX_CANDIDATES) {
        return PFX_ERR_ARG;
    }
    if (n == 0u) {
        return PFX_ERR_EMPTY;
    }
    for (k = 0u; k < n; ++k) {
        idx[k] = (uint8_t)k;
    }
    lmax = max_log2w(c, n);
    st = moments_core(c, idx, n, NULL, lmax, out, &wsum);
    out->log2w = log2_of_q40(wsum, lmax);
    return st;
}

/* ------------------------------------------------------------------------ */
/* pruning and the keep-heaviest stream                                       */
/* ------------------------------------------------------------------------ */

pfx_status_t pfx_mixture_prune(pfx_component_t *c, uint32_t *n, pfx_log2_q16_t log2_ratio)
{
    uint32_t k, kept = 0u;
    int64_t floor_;
    if (c == NULL || n == NULL || *n > PFX_MAX_CANDIDATES) {
        return PFX_ERR_ARG;
    }
    if (*n == 0u) {
        return PFX_OK;
    }
    floor_ = (int64_t)max_log2w(c, *n) + log2_ratio;
    for (k = 0u; k < *n; ++k) {
        if ((int64_t)c[k].log2w >= floor_) {
            if (kept != k) {
                c[kept] = c[k];
            }
            ++kept;
        }
    }
    *n = kept;
    return PFX_OK;
}

pfx_status_t pfx_mixture_stream_push(pfx_component_t *buf, uint32_t *count, uint32_t cap, const pfx_component_t *c)
{
    uint32_t k, light;
    if (buf == NULL || count == NULL || c == NULL || cap > PFX_MAX_CANDIDATES || *count > cap) {
        return PFX_ERR_ARG;
    }
    if (*count < cap) {
        buf[(*count)++] = *c;
        return PFX_OK;
    }
    if (cap == 0u) {
        return PFX_OK;
    }
    light = 0u;
    for (k = 1u; k < cap; ++k) {
        if (buf[k].log2w <= buf[light].log2w) {
            light = k; /* the latest among equally light ones */
        }
    }
    if (c->log2w <= buf[light].log2w) {
        return PFX_OK; /* lighter, or a tie that the earlier one wins */
    }
    memmove(&buf[light], &buf[light + 1u], (size_t)(cap - 1u - light) * sizeof(buf[0]));
    buf[cap - 1u] = *c;
    return PFX_OK;
}

/* ------------------------------------------------------------------------ */
/* Gaussian product                                                           */
/* ------------------------------------------------------------------------ */

/*
 * Scaling (raw integers; S = Pa + Pb in Q20):
 *   det = Sa Sc - Sb^2, Q40, exact in uint64 (Sa, Sc, |Sb| < 2^32);
 *   S^-1 = adj(S) * 2^50 / det in Q30 [1/m^2] (one reciprocal);
 *   K = Pa S^-1 in Q30 (Q20 * Q30 >> 20); mean offset K d in Q20
 *   (Q30 * Q20 >> 30); P = K Pb in Q30 (Q30 * Q20 >> 20), off-diagonal
 *   ((K Pb)_xy + (K Pb)_yx) / 2, rounded once to Q20;
 *   q = d^T S^-1 d in Q16 (v = S^-1 d in Q30 [1/m], d.v >> 34);
 *   log2 z = -log2(2 pi) - log2(det)/2 - q / (2 ln 2), Q16.
 * Overflow: every int64 x int64 product goes through mul64 (saturating);
 * the sums of two saturate.  Realistic inputs stay far from saturation.
 * Rounding: one per mul64; the Q16 weight is within ~2 LSB of exact for
 * the given Q10/Q20 inputs.
 */
/* round(a b / 2^s) + round(c d / 2^s), saturated: the pair of products of
 * pfx_mixture_product_local, out of line (one copy of the inline multiply
 * instead of one per product; the same values). */
PFX_NOINLINE static int64_t dot2(int64_t a, int64_t b, int64_t c, int64_t d, unsigned s)
{
    return pfx_mixture_add_sat(pfx_mixture_mul(a, b, s), pfx_mixture_mul(c, d, s));
}

pfx_status_t pfx_mixture_product_local(const pfx_component_t *a, int64_t dx, int64_t dy, int32_t bxx, int32_t bxy,
                                       int32_t byy, int64_t extra_log2w, pfx_component_t *out)
{
    int64_t sa = (int64_t)a->pxx + bxx, sb = (int64_t)a->pxy + bxy, sc = (int64_t)a->pyy + byy;
    uint64_t ac, bb, det;
    pfx_recip64_t rd;
    int64_t ixx, ixy, iyy;
    int64_t kxx, kxy, kyx, kyy;
    int64_t mx, my, qxx, qxy, qyx, qyy, vx, vy, q, z;
    pfx_log2_q16_t l2det;
    pfx_component_t res;
    pfx_status_t st;

    if (sa <= 0 || sc <= 0) {
        return PFX_ERR_DEGENERATE;
    }
    ac = (uint64_t)sa * (uint64_t)sc; /* < 2^64 */
    bb = mag64(sb) * mag64(sb);       /* < 2^64 */
    if (ac <= bb) {
        return PFX_ERR_DEGENERATE;
    }
    det = ac - bb;
    (void)pfx_mixture_recip64(det, &rd);
    ixx = pfx_mixture_mul_recip(sc, &rd, 50u);
    ixy = pfx_mixture_mul_recip(-sb, &rd, 50u);
    iyy = pfx_mixture_mul_recip(sa, &rd, 50u);

    kxx = dot2(a->pxx, ixx, a->pxy, ixy, 20u);
    kxy = dot2(a->pxx, ixy, a->pxy, iyy, 20u);
    kyx = dot2(a->pxy, ixx, a->pyy, ixy, 20u);
    kyy = dot2(a->pxy, ixy, a->pyy, iyy, 20u);

    mx = dot2(kxx, dx, kxy, dy, 30u);
    my = dot2(kyx, dx, kyy, dy, 30u);

    qxx = dot2(kxx, bxx, kxy, bxy, 20u);
    qxy = dot2(kxx, bxy, kxy, byy, 20u);
    qyx = dot2(kyx, bxx, kyy, bxy, 20u);
    qyy = dot2(kyx, bxy, kyy, byy, 20u);
    st = pfx_mixture_store_cov(pfx_mixture_shr_round(qxx, 10u),
                               pfx_mixture_shr_round(pfx_fixed_add64_sat(qxy, qyx), 11u),
                               pfx_mixture_shr_round(qyy, 10u), &res);
    if (st != PFX_OK) {
        return st;
    }

    vx = dot2(ixx, dx, ixy, dy, 20u);
    vy = dot2(ixy, dx, iyy, dy, 20u);
    q = dot2(dx, vx, dy, vy, 34u);
    if (q < 0) {
        q = 0; /* only by rounding: S^-1 is positive definite */
    }
    (void)pfx_fixed_log2_u64(det, &l2det);
    z = -(int64_t)PFX_LOG2_2PI_Q16 - pfx_mixture_shr_round((int64_t)l2det - (INT64_C(40) << 16), 1u) -
        pfx_mixture_mul(q, PFX_INV_2LN2_Q30, 30u);

    res.x = pfx_mixture_sat32((int64_t)a->x + pfx_mixture_shr_round(mx, 10u));
    res.y = pfx_mixture_sat32((int64_t)a->y + pfx_mixture_shr_round(my, 10u));
    res.log2w = pfx_mixture_sat32(pfx_fixed_add64_sat(pfx_fixed_add64_sat((int64_t)a->log2w, extra_log2w), z));
    *out = res;
    return PFX_OK;
}

pfx_status_t pfx_mixture_product(const pfx_component_t *a, const pfx_component_t *b, pfx_component_t *out)
{
    if (a == NULL || b == NULL || out == NULL) {
        return PFX_ERR_ARG;
    }
    return pfx_mixture_product_local(a, pfx_mixture_offset(a->x, b->x) * 1024, pfx_mixture_offset(a->y, b->y) * 1024,
                                     b->pxx, b->pxy, b->pyy, b->log2w, out);
}

/* ------------------------------------------------------------------------ */
/* merging                                                                    */
/* ------------------------------------------------------------------------ */

pfx_status_t pfx_mixture_merge(const pfx_component_t *a, const pfx_component_t *b, pfx_component_t *out)
{
    pfx_component_t pair[2];
    const uint8_t idx[2] = {0u, 1u};
    int32_t lmax;
    int64_t wsum;
    pfx_status_t st;
    if (a == NULL || b == NULL || out == NULL) {
        return PFX_ERR_ARG;
    }
    pair[0] = *a;
    pair[1] = *b;
    lmax = max_log2w(pair, 2u);
    st = moments_core(pair, idx, 2u, NULL, lmax, out, &wsum);
    if (st == PFX_OK) {
        out->log2w = log2_of_q40(wsum, lmax);
    }
    return st;
}

/* |d| for d = pfx_mixture_offset(a, b) (<= 2^30), formed from a and b in
 * 32-bit arithmetic (b - a mod 2^32 is d whenever d is not clamped), so
 * that the compiler keeps the products of it 32x32 -> 64. */
static inline uint32_t offset_mag32(int32_t a, int32_t b, int64_t d)
{
    uint32_t u = (uint32_t)b - (uint32_t)a;
    if (d == OFFSET_LIMIT || d == -OFFSET_LIMIT) {
        return (uint32_t)OFFSET_LIMIT;
    }
    return (d < 0) ? 0u - u : u;
}

/*
 * Mahalanobis gate, division-free and exact: with S = Pa + Pb (Q20, int64,
 * entries < 2^32) and d = mu_b - mu_a (Q10, clamped to +-2^30),
 *   d^T S^-1 d <= g  <=>  (Sc dx^2 - 2 Sb dx dy + Sa dy^2) * 2^16 <= g * det
 * (Q40 * 2^16 against Q16 * Q40).  Left side < 2^96 * 2^16, right < 2^95:
 * 128 bits.  A quick test first: q >= |d|^2 / trace(S), so |d|^2 > g tr(S)
 * (in 64 bits, rounded up) rejects without the 128-bit work.
 */
int pfx_mixture_within_gate(const pfx_component_t *a, const pfx_component_t *b, pfx_ratio_q16_t gate)
{
    int64_t sa, sb, sc, dx, dy;
    uint32_t sa32, sb32, sc32, msb, mdx, mdy;
    uint64_t ac, bb, det, dx2, dy2, dd, lim, dxy;
    u128_t lhs, cross, rhs;
    if (a == NULL || b == NULL || gate < 0) {
        return 0;
    }
    sa = (int64_t)a->pxx + b->pxx;
    sb = (int64_t)a->pxy + b->pxy;
    sc = (int64_t)a->pyy + b->pyy;
    if (sa < 0 || sc < 0) {
        return 0;
    }
    /* The same sums mod 2^32, formed in 32 bits so that the products below
     * are single 32x32 -> 64 multiplies: sa, sc are in [0, 2^32) (equal to
     * sa32, sc32), |sb| <= 2^32 is msb except for |sb| = 2^32 (msb = 0: bb
     * wraps to 0 exactly as mag64(sb)^2 does); |dx|, |dy| <= 2^30. */
    sa32 = (uint32_t)a->pxx + (uint32_t)b->pxx;
    sb32 = (uint32_t)a->pxy + (uint32_t)b->pxy;
    sc32 = (uint32_t)a->pyy + (uint32_t)b->pyy;
    dx = pfx_mixture_offset(a->x, b->x);
    dy = pfx_mixture_offset(a->y, b->y);
    mdx = offset_mag32(a->x, b->x, dx);
    mdy = offset_mag32(a->y, b->y, dy);
    dx2 = (uint64_t)mdx * mdx;
    dy2 = (uint64_t)mdy * mdy;
    dd = dx2 + dy2; /* <= 2^61 */
    /* The quick test before the determinant: most pairs a gate merge meets
     * are far apart, and both tests answer "not within" alike. */
    lim = (((uint64_t)(uint32_t)gate * sa32 + (uint64_t)(uint32_t)gate * sc32) >> 16) + 1u; /* each < 2^63 */
    if (dd > lim) {
        return 0;
    }
    msb = (sb < 0) ? 0u - sb32 : sb32;
    ac = (uint64_t)sa32 * sc32;
    bb = (uint64_t)msb * msb;
    if (ac <= bb) {
        return 0; /* singular: the reference's inverse is inf/NaN, never within */
    }
    det = ac - bb;
    lhs = u128_add(u128_mul_u32(sc32, dx2), u128_mul_u32(sa32, dy2));
    dxy = (uint64_t)mdx * mdy; /* <= 2^60 */
    cross = (sb < -(int64_t)UINT32_MAX) ? u128_mul(2u * mag64(sb), dxy) : u128_mul_u32(msb, 2u * dxy);
    if (sb != 0 && dx != 0 && dy != 0 && ((sb < 0) + (dx < 0) + (dy < 0)) % 2 == 0) {
        /* sb dx dy > 0: the cross term is subtracted (exactly >= 0 for PSD S) */
        if (u128_cmp(cross, lhs) > 0) {
            lhs.hi = 0u;
            lhs.lo = 0u;
        } else {
            lhs = u128_sub(lhs, cross);
        }
    } else {
        lhs = u128_add(lhs, cross);
    }
    rhs = u128_mul_u32((uint32_t)gate, det);
    return u128_cmp(u128_shl(lhs, 16u), rhs) <= 0;
}

/* ------------------------------------------------------------------------ */
/* reductions                                                                 */
/* ------------------------------------------------------------------------ */

/* Heaviest first, stable (insertion sort: equal weights keep index order). */
static void order_heaviest(const pfx_component_t *c, uint32_t n, uint8_t *order)
{
    uint32_t i, j;
    for (i = 0u; i < n; ++i) {
        uint8_t cur = (uint8_t)i;
        j = i;
        while (j > 0u && c[order[j - 1u]].log2w < c[cur].log2w) {
            order[j] = order[j - 1u];
            --j;
        }
        order[j] = cur;
    }
}

/* w[k] = 2^(log2w_k - lmax) in Q40 (pfx_mixture_lin_q40) for k < n; equal
 * weights in a row (the arcs of a first ring) reuse the last value. */
static void lin_weights(const pfx_component_t *c, uint32_t n, int32_t lmax, int64_t *w)
{
    uint32_t k;
    for (k = 0u; k < n; ++k) {
        w[k] = (k > 0u && c[k].log2w == c[k - 1u].log2w) ? w[k - 1u]
                                                         : pfx_mixture_lin_q40((int64_t)c[k].log2w - lmax);
    }
}

pfx_status_t pfx_mixture_gate_merge(pfx_component_t *c, uint32_t *n, pfx_ratio_q16_t gate, pfx_mixture_scratch_t *s)
{
    uint32_t i, k, nseeds = 0u, nout = 0u;
    int32_t lmax;
    if (c == NULL || n == NULL || s == NULL || *n > PFX_MAX_CANDIDATES) {
        return PFX_ERR_ARG;
    }
    if (*n <= 1u || gate <= 0) {
        return PFX_OK;
    }
    order_heaviest(c, *n, s->order);
    for (i = 0u; i < *n; ++i) {
        uint8_t k8 = s->order[i];
        uint32_t si;
        for (si = 0u; si < nseeds; ++si) {
            if (pfx_mixture_within_gate(&c[k8], &c[s->seeds[si]], gate)) {
                break;
            }
        }
        if (si < nseeds) {
            s->group[k8] = s->seeds[si];
        } else {
            s->seeds[nseeds++] = k8;
            s->group[k8] = k8;
        }
    }
    if (nseeds == *n) {
        return PFX_OK;
    }
    /* Linear weights once per component, not once per pass of moments_core
     * over each group: the same values (moments_core's own formula). */
    lmax = max_log2w(c, *n);
    lin_weights(c, *n, lmax, s->weight);
    /* Groups in the index order of their seeds (the reference's sorted(seeds)),
     * members in index order. */
    for (k = 0u; k < *n; ++k) {
        uint32_t m = 0u, j;
        int64_t wsum;
        if (s->group[k] != k) {
            continue;
        }
        for (j = 0u; j < *n; ++j) {
            if (s->group[j] == k) {
                s->members[m++] = (uint8_t)j;
            }
        }
        if (m == 1u) {
            s->tmp[nout++] = c[k]; /* a lone seed stays as it is */
            continue;
        }
        if (moments_core(c, s->members, m, s->weight, lmax, &s->tmp[nout], &wsum) != PFX_OK) {
            continue; /* only a saturated, degenerate merge: drop the group */
        }
        s->tmp[nout].log2w = log2_of_q40(wsum, lmax);
        ++nout;
    }
    memcpy(c, s->tmp, (size_t)nout * sizeof(c[0]));
    *n = nout;
    return PFX_OK;
}

/* Upper-triangle index of pair (i, j), i < j < PFX_MAX_CANDIDATES. */
static uint32_t pair_index(uint32_t i, uint32_t j)
{
    return i * PFX_MAX_CANDIDATES - (i * (i + 1u)) / 2u + (j - i - 1u);
}

/* Monotone packing of a cost v (Q48) into 31 bits: exponent (bit length,
 * 1..63) above the 24 bits that follow the leading one (truncated), so
 * that packed order is value order with a relative resolution of 2^-24.
 * v <= 0 packs to 0 (Runnalls' cost is >= 0; only rounding goes below). */
static uint32_t cost_pack(int64_t v)
{
    unsigned e;
    uint64_t top;
    if (v <= 0) {
        return 0u;
    }
    e = 64u - pfx_mixture_clz64((uint64_t)v); /* 1..63 */
    top = ((uint64_t)v << (64u - e)) >> 39;   /* 25 bits, leading one at bit 24 */
    return ((uint32_t)e << 24) | (uint32_t)(top & UINT64_C(0xFFFFFF));
}

/* log2 of det P in Q16 from the raw Q40 determinant (clamped to >= 1). */
static int32_t logdet_of(const pfx_component_t *c)
{
    int64_t det = (int64_t)c->pxx * c->pyy - (int64_t)c->pxy * c->pxy; /* each <= 2^62 */
    pfx_log2_q16_t l2;
    (void)pfx_fixed_log2_u64((uint64_t)(det < 1 ? 1 : det), &l2);
    return l2;
}

/* w l / 2^8 rounded (pfx_mixture_mul(w, l, 8u)) for a Runnalls weight w
 * (Q40 of a total 2^40: at most 2^41 for a pair) and a log2 determinant l
 * (logdet_of: log2 of a 64-bit value >= 1, so 0 <= l < 2^22 in Q16): there
 * w l < 2^63 is one 64-bit product and the rounding is mul64's (ties toward
 * +infinity), without its 64 x 32 dispatch.  Anything else: mul64. */
static int64_t weighted_logdet(int64_t w, int32_t l)
{
    if (w >= 0 && w <= (INT64_C(1) << 41) && l >= 0 && l < (INT32_C(1) << 22)) {
        return pfx_mixture_shr_round(w * l, 8u);
    }
    return pfx_mixture_mul(w, l, 8u);
}

/* B' = (w_i + w_j) log2|P_ij| - w_i log2|P_i| - w_j log2|P_j| in Q48
 * (Q40 weights normalised to a total of 2^40, Q16 logs, each term >> 8:
 * |w log2det| <= 2^41 * 2^22 fits).  Twice Runnalls' B in bits; the
 * factor does not change the argmin. */
/*
 * Covariance of the moment-preserving merge of two components, for the cost
 * only (the merge itself goes through moments_core): with fractions
 * a = w_i / (w_i + w_j), 1 - a (Q30, one reciprocal) and d = mu_j - mu_i,
 * P = a_i P_i + a_j P_j + a_i a_j d d^T (the spread form summed out).
 * Scaling: a P in Q50 (<= 2^61 each), rounded once to Q20; a_i a_j in Q30;
 * d d^T in Q20 (exact, <= 2^60), times a_i a_j >> 30 (one rounding, mul64
 * when it leaves 32 bits); stored through pfx_mixture_store_cov.
 */
static pfx_status_t pair_merge_cov(const pfx_component_t *ci, const pfx_component_t *cj, int64_t wi, int64_t wj,
                                   pfx_component_t *m)
{
    pfx_recip64_t r;
    int64_t ai, aj, aij, dx, dy;
    if (wi + wj <= 0 || pfx_mixture_recip64((uint64_t)(wi + wj), &r) != PFX_OK) {
        return PFX_ERR_DEGENERATE;
    }
    ai = pfx_mixture_mul_recip(wi, &r, 30u);
    aj = pfx_mixture_mul_recip(wj, &r, 30u);
    aij = pfx_mixture_shr_round(ai * aj, 30u); /* <= 2^61 before the shift */
    dx = pfx_mixture_offset(ci->x, cj->x);
    dy = pfx_mixture_offset(ci->y, cj->y);
    return pfx_mixture_store_cov(
        pfx_mixture_add_sat(pfx_mixture_shr_round(ai * ci->pxx + aj * cj->pxx, 30u), pfx_mixture_mul(aij, dx * dx, 30u)),
        pfx_mixture_add_sat(pfx_mixture_shr_round(ai * ci->pxy + aj * cj->pxy, 30u), pfx_mixture_mul(aij, dx * dy, 30u)),
        pfx_mixture_add_sat(pfx_mixture_shr_round(ai * ci->pyy + aj * cj->pyy, 30u), pfx_mixture_mul(aij, dy * dy, 30u)),
        m);
}

static uint32_t pair_cost(const pfx_component_t *c, const pfx_mixture_scratch_t *s, uint32_t i, uint32_t j)
{
    pfx_component_t m;
    int64_t b;
    if (pair_merge_cov(&c[i], &c[j], s->weight[i], s->weight[j], &m) != PFX_OK) {
        return UINT32_MAX - 1u; /* never chosen before a real pair */
    }
    b = weighted_logdet(s->weight[i] + s->weight[j], logdet_of(&m));
    b = pfx_fixed_sub64_sat(b, weighted_logdet(s->weight[i], s->logdet[i]));
    b = pfx_fixed_sub64_sat(b, weighted_logdet(s->weight[j], s->logdet[j]));
    return cost_pack(b);
}

/* Scaling: linear weights Q40, normalised to a total of 2^40 through one
 * reciprocal (merged weights are exact sums); costs as in pair_cost, packed
 * (monotone, 2^-24 relative resolution: near-equal costs may tie, and a tie
 * goes to the first pair in row-major order).  Merges through moments_core
 * (see there); merged means are stored in Q10 before they meet the next
 * pair.  Output log2 weights from log2 of the Q40 weights (0.70 LSB), then
 * normalised. */
pfx_status_t pfx_mixture_runnalls(pfx_component_t *c, uint32_t *n, uint32_t cap, pfx_mixture_scratch_t *s)
{
    uint32_t i, j, k, nn, step, out;
    int32_t lmax;
    int64_t wsum = 0;
    pfx_recip64_t r;
    if (c == NULL || n == NULL || s == NULL || *n > PFX_MAX_CANDIDATES) {
        return PFX_ERR_ARG;
    }
    nn = *n;
    if (nn <= cap) {
        return PFX_OK;
    }
    if (cap == 0u) {
        return PFX_ERR_ARG;
    }
    /* Weights normalised to a total of 2^40 (the reference normalises to 1). */
    lmax = max_log2w(c, nn);
    lin_weights(c, nn, lmax, s->weight);
    for (k = 0u; k < nn; ++k) {
        wsum += s->weight[k];
    }
    (void)pfx_mixture_recip64((uint64_t)wsum, &r); /* wsum >= 2^40 */
    for (k = 0u; k < nn; ++k) {
        s->weight[k] = pfx_mixture_mul_recip(s->weight[k], &r, 40u);
        if (s->weight[k] < 1) {
            s->weight[k] = 1; /* below 2^-40 of the total: kept as the smallest weight */
        }
        s->logdet[k] = logdet_of(&c[k]);
        s->alive[k] = 1u;
    }
    for (i = 0u; i + 1u < nn; ++i) {
        for (j = i + 1u; j < nn; ++j) {
            s->cost[pair_index(i, j)] = pair_cost(c, s, i, j);
        }
    }
    for (step = 0u; step < nn - cap; ++step) {
        uint32_t bi = 0u, bj = 0u, best = UINT32_MAX;
        uint8_t idx[2];
        pfx_component_t m;
        for (i = 0u; i + 1u < nn; ++i) {
            if (!s->alive[i]) {
                continue;
            }
            for (j = i + 1u; j < nn; ++j) {
                uint32_t v;
                if (!s->alive[j]) {
                    continue;
                }
                v = s->cost[pair_index(i, j)];
                if (v < best) { /* strict: the first pair in row-major order wins ties */
                    best = v;
                    bi = i;
                    bj = j;
                }
            }
        }
        if (best == UINT32_MAX) {
            break;
        }
        idx[0] = (uint8_t)bi;
        idx[1] = (uint8_t)bj;
        if (moments_core(c, idx, 2u, s->weight, 0, &m, NULL) == PFX_OK) {
            c[bi].x = m.x;
            c[bi].y = m.y;
            c[bi].pxx = m.pxx;
            c[bi].pxy = m.pxy;
            c[bi].pyy = m.pyy;
        }
        s->weight[bi] = pfx_fixed_add64_sat(s->weight[bi], s->weight[bj]);
        s->logdet[bi] = logdet_of(&c[bi]);
        s->alive[bj] = 0u;
        for (k = 0u; k < nn; ++k) {
            if (!s->alive[k] || k == bi) {
                continue;
            }
            if (k < bi) {
                s->cost[pair_index(k, bi)] = pair_cost(c, s, k, bi);
            } else {
                s->cost[pair_index(bi, k)] = pair_cost(c, s, bi, k);
            }
        }
    }
    out = 0u;
    for (k = 0u; k < nn; ++k) {
        if (s->alive[k]) {
            c[out] = c[k];
            c[out].log2w = log2_of_q40(s->weight[k], 0);
            ++out;
        }
    }
    *n = out;
    return pfx_mixture_normalise(c, out);
}

pfx_status_t pfx_mixture_reduce(pfx_component_t *c, uint32_t *n, uint32_t cap, pfx_log2_q16_t log2_ratio,
                                pfx_ratio_q16_t gate, pfx_mixture_scratch_t *s)
{
    pfx_status_t st;
    if (c == NULL || n == NULL || s == NULL || *n > PFX_MAX_CANDIDATES || cap == 0u) {
        return PFX_ERR_ARG;
    }
    st = pfx_mixture_prune(c, n, log2_ratio);
    if (st == PFX_OK && *n > 1u) {
        st = pfx_mixture_gate_merge(c, n, gate, s);
    }
    if (st == PFX_OK && *n > cap) {
        return pfx_mixture_runnalls(c, n, cap, s);
    }
    if (st != PFX_OK) {
        return st;
    }
    return pfx_mixture_normalise(c, *n);
}

/* ------------------------------------------------------------------------ */
/* modes and the point estimate                                               */
/* ------------------------------------------------------------------------ */

/* Scaling: linear weights Q40 relative to the heaviest (mode sums <= 8 *
 * 2^40); mode shares w_mode / w_total in Q30 through one reciprocal
 * (2^-30 relative), compared with min_weight (Q30) and reported as
 * mode_weight; the gate test is exact (pfx_mixture_within_gate); moments
 * as in moments_core.  Stack: seven arrays of PFX_MAX_COMPONENTS. */
pfx_status_t pfx_mixture_point_estimate(const pfx_component_t *c, uint32_t n, pfx_ratio_q16_t gate,
                                        pfx_frac_q30_t min_weight, pfx_estimate_t *out)
{
    uint8_t order[PFX_MAX_COMPONENTS];
    uint8_t mode_of[PFX_MAX_COMPONENTS];
    uint8_t seed[PFX_MAX_COMPONENTS];
    uint8_t rank[PFX_MAX_COMPONENTS];
    uint8_t members[PFX_MAX_COMPONENTS];
    int64_t mode_w[PFX_MAX_COMPONENTS];
    int64_t w[PFX_MAX_COMPONENTS];
    int64_t wsum = 0, lim;
    uint32_t i, j, k, nmodes = 0u, found = 0u, m = 0u;
    int32_t lmax;
    pfx_recip64_t r;
    pfx_component_t mom;
    pfx_status_t st;
    if (out == NULL) {
        return PFX_ERR_ARG;
    }
    memset(out, 0, sizeof(*out));
    if (c == NULL || n > PFX_MAX_COMPONENTS) {
        return PFX_ERR_ARG;
    }
    if (n == 0u) {
        return PFX_ERR_EMPTY;
    }
    lmax = max_log2w(c, n);
    for (k = 0u; k < n; ++k) {
        w[k] = pfx_mixture_lin_q40((int64_t)c[k].log2w - lmax);
        wsum += w[k];
    }
    order_heaviest(c, n, order);
    for (i = 0u; i < n; ++i) {
        uint8_t k8 = order[i];
        for (j = 0u; j < nmodes; ++j) {
            if (pfx_mixture_within_gate(&c[k8], &c[seed[j]], gate)) {
                break;
            }
        }
        if (j == nmodes) {
            seed[nmodes] = k8;
            mode_w[nmodes] = 0;
            ++nmodes;
        }
        mode_of[k8] = (uint8_t)j;
        mode_w[j] += w[k8];
    }
    /* Modes heaviest first, stable. */
    for (i = 0u; i < nmodes; ++i) {
        uint8_t cur = (uint8_t)i;
        j = i;
        while (j > 0u && mode_w[rank[j - 1u]] < mode_w[cur]) {
            rank[j] = rank[j - 1u];
            --j;
        }
        rank[j] = cur;
    }
    /* Modes with at least min_weight of the total: w_mode * 2^30 >= min_weight * wsum. */
    (void)pfx_mixture_recip64((uint64_t)wsum, &r);
    lim = min_weight;
    for (i = 0u; i < nmodes; ++i) {
        if (pfx_mixture_mul_recip(mode_w[rank[i]], &r, 30u) >= lim) {
            ++found;
        }
    }
    /* The reported mode: the heaviest (it is the first of the kept modes, or
     * the only one when none reaches min_weight); its moments, whether the
     * belief has one mode or several. */
    for (k = 0u; k < n; ++k) {
        if (mode_of[order[k]] == rank[0]) {
            members[m++] = order[k];
        }
    }
    st = moments_core(c, members, m, w, 0, &mom, NULL);
    out->mode_weight = pfx_mixture_sat32(pfx_mixture_mul_recip(mode_w[rank[0]], &r, 30u));
    out->mode_count = (found > 0u) ? found : 1u;
    out->x = mom.x;
    out->y = mom.y;
    out->pxx = mom.pxx;
    out->pxy = mom.pxy;
    out->pyy = mom.pyy;
    out->components = n;
    return st;
}
