/*
 * pfx_fixed.c - fixed-point primitives.  See pfx_fixed.h for the contract of
 * each function (scaling, overflow, rounding, error bound).
 *
 * Portability notes that apply throughout:
 *   - Signed values are never shifted right while negative and never
 *     shifted left at all; floor shifts go through unsigned magnitudes.
 *   - Conversions to a signed type only ever carry values in its range;
 *     magnitudes are taken as (unsigned)(-(v + 1)) + 1, defined for every
 *     v, INT32_MIN included.
 *   - Narrow unsigned values (uint16_t table entries) are widened to
 *     uint32_t before any shift or multiply, so integer promotion to int
 *     can never produce a signed overflow.
 *
 * The tables and polynomial constants are generated from their defining
 * formulas by peerfix.core.quantise (log2_table, exp2_table, exp2_poly,
 * recip_seed_table); tests/core checks that the arrays here equal those.
 * One table is fitted instead, k_rsqrt_line_q30 (square-root seeds): only its
 * error bound matters, and tests/core checks that bound.
 */
#include "peerfix.h"

/* ------------------------------------------------------------------------ */
/* tables                                                                     */
/* ------------------------------------------------------------------------ */

/* round(log2(1 + k/64) * 2^24), k = 0..65 (Q24; entry 64 is 2^24, entry 65 lies past
 * [1, 2) and serves the second difference of the last interval). */
static const uint32_t k_log2_table_q24[66] = {
    0u, 375270u, 744810u, 1108793u, 1467383u, 1820738u, 2169009u, 2512340u,
    2850868u, 3184728u, 3514044u, 3838941u, 4159533u, 4475935u, 4788255u, 5096595u,
    5401057u, 5701737u, 5998727u, 6292118u, 6581994u, 6868440u, 7151536u, 7431359u,
    7707984u, 7981483u, 8251926u, 8519380u, 8783912u, 9045584u, 9304457u, 9560591u,
    9814042u, 10064867u, 10313120u, 10558852u, 10802114u, 11042956u, 11281425u, 11517568u,
    11751428u, 11983051u, 12212479u, 12439752u, 12664911u, 12887994u, 13109041u, 13328087u,
    13545168u, 13760320u, 13973576u, 14184969u, 14394532u, 14602297u, 14808293u, 15012551u,
    15215099u, 15415967u, 15615181u, 15812769u, 16008758u, 16203172u, 16396036u, 16587377u,
    16777216u, 16965578u
};
/* round((2^(k/64) - 1) * 2^32), k = 0..63 (Q32 fraction above 1). */
static const uint32_t k_exp2_table_q32[64] = {
    0x00000000u, 0x02C9A3E7u, 0x059B0D31u, 0x08745187u, 0x0B5586D0u, 0x0E3EC32Du,
    0x11301D01u, 0x1429AAEBu, 0x172B83C8u, 0x1A35BEB7u, 0x1D487317u, 0x2063B886u,
    0x2387A6E7u, 0x26B4565Eu, 0x29E9DF52u, 0x2D285A6Eu, 0x306FE0A3u, 0x33C08B26u,
    0x371A7374u, 0x3A7DB34Eu, 0x3DEA64C1u, 0x4160A21Fu, 0x44E08606u, 0x486A2B5Cu,
    0x4BFDAD53u, 0x4F9B276Au, 0x5342B56Au, 0x56F4736Bu, 0x5AB07DD5u, 0x5E76F15Bu,
    0x6247EB04u, 0x66238825u, 0x6A09E668u, 0x6DFB23C6u, 0x71F75E8Fu, 0x75FEB564u,
    0x7A11473Fu, 0x7E2F336Du, 0x82589995u, 0x868D99B4u, 0x8ACE5423u, 0x8F1AE991u,
    0x93737B0Du, 0x97D829FEu, 0x9C49182Au, 0xA0C667B6u, 0xA5503B24u, 0xA9E6B558u,
    0xAE89F996u, 0xB33A2B85u, 0xB7F76F30u, 0xBCC1E905u, 0xC199BDD8u, 0xC67F12E5u,
    0xCB720DCFu, 0xD072D4A0u, 0xD5818DD0u, 0xDA9E603Eu, 0xDFC97338u, 0xE502EE79u,
    0xEA4AFA2Au, 0xEFA1BEE6u, 0xF50765B7u, 0xFA7C181Au
};
/* round(2^15 / ((128.5 + i) / 256)), i = 0..127: 1/D seeds at the middle of
 * each of 128 intervals of D in [0.5, 1), Q15 (all < 2^16). */
static const uint16_t k_recip_seed_q15[128] = {
    65281u, 64777u, 64281u, 63792u, 63310u, 62836u, 62369u, 61909u, 61455u, 61008u,
    60568u, 60133u, 59705u, 59283u, 58867u, 58457u, 58053u, 57654u, 57260u, 56872u,
    56489u, 56111u, 55738u, 55370u, 55007u, 54649u, 54295u, 53946u, 53601u, 53261u,
    52925u, 52593u, 52265u, 51942u, 51622u, 51306u, 50995u, 50686u, 50382u, 50081u,
    49784u, 49490u, 49200u, 48913u, 48630u, 48349u, 48072u, 47798u, 47528u, 47260u,
    46995u, 46733u, 46474u, 46218u, 45965u, 45714u, 45467u, 45222u, 44979u, 44739u,
    44502u, 44267u, 44035u, 43805u, 43577u, 43352u, 43129u, 42908u, 42690u, 42474u,
    42260u, 42048u, 41838u, 41631u, 41425u, 41222u, 41020u, 40820u, 40623u, 40427u,
    40233u, 40041u, 39851u, 39662u, 39476u, 39291u, 39108u, 38926u, 38746u, 38568u,
    38392u, 38217u, 38044u, 37872u, 37702u, 37533u, 37366u, 37200u, 37036u, 36873u,
    36712u, 36552u, 36393u, 36236u, 36080u, 35926u, 35772u, 35620u, 35470u, 35320u,
    35172u, 35026u, 34880u, 34735u, 34592u, 34450u, 34309u, 34169u, 34031u, 33893u,
    33757u, 33622u, 33487u, 33354u, 33222u, 33091u, 32961u, 32832u
};
/* e(t) = 2^x - 1 = x (C1 + x (C2 + x (C3 + x (C4 + x C5)))) for x = t / 2^16,
 * t in 0..1023, with C_n = ln2^n / n! in Q32 (rounded); the x^6 term is
 * < 2^-46 and left out. */
#define PFX_EXP2_C1 UINT32_C(2977044472)
#define PFX_EXP2_C2 UINT32_C(1031764991)
#define PFX_EXP2_C3 UINT32_C(238388332)
#define PFX_EXP2_C4 UINT32_C(41309550)
#define PFX_EXP2_C5 UINT32_C(5726720)

/* ------------------------------------------------------------------------ */
/* internal helpers                                                           */
/* ------------------------------------------------------------------------ */

/* |v| as unsigned, exact for INT32_MIN (2^31): -(v + 1) is in range for
 * every v, and no unsigned arithmetic wraps either (clean under clang's
 * -fsanitize=integer as well). */
static uint32_t mag32(int32_t v)
{
    return (v < 0) ? (uint32_t)(-(v + 1)) + 1u : (uint32_t)v;
}

static uint64_t mag64(int64_t v)
{
    return (v < 0) ? (uint64_t)(-(v + 1)) + 1u : (uint64_t)v;
}

/* -m as int32 for a magnitude m <= 2^31. */
static int32_t neg_from_mag32(uint32_t m)
{
    return (m == UINT32_C(0x80000000)) ? INT32_MIN : -(int32_t)m;
}

/* -m as int64 for a magnitude m <= 2^63. */
static int64_t neg_from_mag64(uint64_t m)
{
    return (m == (UINT64_C(1) << 63)) ? INT64_MIN : -(int64_t)m;
}

/* round(m / 2^s) for unsigned m, ties up, any s; never overflows because the
 * rounding bit is added to the quotient, not to m. */
static uint64_t round_shift_u64(uint64_t m, unsigned s)
{
    if (s == 0u) {
        return m;
    }
    if (s > 64u) {
        return 0u;
    }
    if (s == 64u) {
        return m >> 63;
    }
    return (m >> s) + ((m >> (s - 1u)) & 1u);
}

/* ------------------------------------------------------------------------ */
/* leading zeros                                                              */
/* ------------------------------------------------------------------------ */

#if defined(PFX_USE_BUILTIN_CLZ)
#if !defined(__GNUC__)
#error "PFX_USE_BUILTIN_CLZ needs gcc or clang (__builtin_clz)"
#endif
/* The builtins take unsigned int / unsigned long long: check their widths. */
typedef char pfx_clz_width_check[(sizeof(unsigned int) == 4u && sizeof(unsigned long long) == 8u) ? 1 : -1];
#endif

unsigned pfx_fixed_clz32(uint32_t x)
{
    return pfx_fixed_clz32_inline(x);
}

unsigned pfx_fixed_clz64(uint64_t x)
{
#if defined(PFX_USE_BUILTIN_CLZ)
    return (x == 0u) ? 64u : (unsigned)__builtin_clzll((unsigned long long)x);
#else
    uint32_t hi = (uint32_t)(x >> 32);
    if (hi != 0u) {
        return pfx_fixed_clz32(hi);
    }
    return 32u + pfx_fixed_clz32((uint32_t)x);
#endif
}

/* ------------------------------------------------------------------------ */
/* saturation and clamps                                                      */
/* ------------------------------------------------------------------------ */

int32_t pfx_fixed_sat32(int64_t x)
{
    if (x > INT32_MAX) {
        return INT32_MAX;
    }
    if (x < INT32_MIN) {
        return INT32_MIN;
    }
    return (int32_t)x;
}

int32_t pfx_fixed_clamp(int32_t x, int32_t lo, int32_t hi)
{
    if (x < lo) {
        return lo;
    }
    if (x > hi) {
        return hi;
    }
    return x;
}

int64_t pfx_fixed_clamp64(int64_t x, int64_t lo, int64_t hi)
{
    if (x < lo) {
        return lo;
    }
    if (x > hi) {
        return hi;
    }
    return x;
}

/* Scaling: none.  Overflow: the sum is formed in int64 (cannot overflow),
 * then saturated.  Rounding: exact. */
int32_t pfx_fixed_add_sat(int32_t a, int32_t b)
{
    return pfx_fixed_sat32((int64_t)a + (int64_t)b);
}

int32_t pfx_fixed_sub_sat(int32_t a, int32_t b)
{
    return pfx_fixed_sat32((int64_t)a - (int64_t)b);
}

int32_t pfx_fixed_neg_sat(int32_t a)
{
    return (a == INT32_MIN) ? INT32_MAX : -a;
}

int32_t pfx_fixed_abs_sat(int32_t a)
{
    return (a < 0) ? pfx_fixed_neg_sat(a) : a;
}

/* Overflow: tested against the limits before the operation, so the
 * operation itself is only done when its result is in range. */
int64_t pfx_fixed_add64_sat(int64_t a, int64_t b)
{
    if (b > 0 && a > INT64_MAX - b) {
        return INT64_MAX;
    }
    if (b < 0 && a < INT64_MIN - b) {
        return INT64_MIN;
    }
    return a + b;
}

int64_t pfx_fixed_sub64_sat(int64_t a, int64_t b)
{
    if (b < 0 && a > INT64_MAX + b) {
        return INT64_MAX;
    }
    if (b > 0 && a < INT64_MIN + b) {
        return INT64_MIN;
    }
    return a - b;
}

/* ------------------------------------------------------------------------ */
/* shifts                                                                     */
/* ------------------------------------------------------------------------ */

/* floor(x / 2^s).  For x < 0: floor(x / 2^s) = -floor((-x - 1) / 2^s) - 1,
 * and -x - 1 = -(x + 1) is in range for every x (INT32_MIN included). */
int32_t pfx_fixed_shr_floor(int32_t x, unsigned s)
{
    uint32_t q;
    if (s > 31u) {
        return (x < 0) ? -1 : 0;
    }
    if (x >= 0) {
        return (int32_t)((uint32_t)x >> s);
    }
    q = (uint32_t)(-(x + 1)) >> s;
    return -(int32_t)q - 1;
}

/* round(x / 2^s), ties toward +infinity: floor(x / 2^s) plus bit s-1 of x
 * (that bit of the two's complement pattern is the half-LSB of the
 * remainder), which equals floor((x + 2^(s-1)) / 2^s) without forming
 * x + 2^(s-1).  For s >= 32, |x / 2^s| <= 1/2 and the result is 0. */
int32_t pfx_fixed_shr_round(int32_t x, unsigned s)
{
    uint32_t half;
    if (s == 0u) {
        return x;
    }
    if (s > 31u) {
        return 0;
    }
    half = ((uint32_t)x >> (s - 1u)) & 1u;
#if defined(PFX_VARIANT_TIES_DOWN)
    /* Test-only variant (never in a release build): ties round toward
     * -infinity instead of +infinity.  The release-regression tests build it
     * to prove that `peerfix baseline check` notices a one-LSB change. */
    if (half != 0u && ((uint32_t)x & ((UINT32_C(1) << (s - 1u)) - 1u)) == 0u) {
        half = 0u;
    }
#endif
    return pfx_fixed_shr_floor(x, s) + (int32_t)half;
}

int64_t pfx_fixed_shr64_floor(int64_t x, unsigned s)
{
    uint64_t q;
    if (s > 63u) {
        return (x < 0) ? -1 : 0;
    }
    if (x >= 0) {
        return (int64_t)((uint64_t)x >> s);
    }
    q = (uint64_t)(-(x + 1)) >> s;
    return -(int64_t)q - 1;
}

int64_t pfx_fixed_shr64_round(int64_t x, unsigned s)
{
    uint64_t half;
    if (s == 0u) {
        return x;
    }
    if (s > 63u) {
        return 0;
    }
    half = ((uint64_t)x >> (s - 1u)) & 1u;
    return pfx_fixed_shr64_floor(x, s) + (int64_t)half;
}

/* Accumulator to int32: one rounding, then saturation. */
int32_t pfx_fixed_shr64_round_sat32(int64_t x, unsigned s)
{
    return pfx_fixed_sat32(pfx_fixed_shr64_round(x, s));
}

/* x * 2^s, saturated: compared against INT32_MAX >> s (a shift of a positive
 * value) before multiplying, so the multiply is always in range. */
int32_t pfx_fixed_shl_sat(int32_t x, unsigned s)
{
    int32_t lim;
    if (x == 0) {
        return 0;
    }
    if (s > 30u) {
        return (x > 0) ? INT32_MAX : INT32_MIN;
    }
    lim = (int32_t)(INT32_MAX >> s);
    if (x > lim) {
        return INT32_MAX;
    }
    if (x < -lim - 1) {
        return INT32_MIN;
    }
    return x * (int32_t)(INT32_C(1) << s);
}

int64_t pfx_fixed_shl64_sat(int64_t x, unsigned s)
{
    int64_t lim;
    if (x == 0) {
        return 0;
    }
    if (s > 62u) {
        return (x > 0) ? INT64_MAX : INT64_MIN;
    }
    lim = INT64_MAX >> s;
    if (x > lim) {
        return INT64_MAX;
    }
    if (x < -lim - 1) {
        return INT64_MIN;
    }
    return x * (INT64_C(1) << s);
}

/* ------------------------------------------------------------------------ */
/* multiply                                                                   */
/* ------------------------------------------------------------------------ */

int64_t pfx_fixed_mul_wide(int32_t a, int32_t b)
{
    return (int64_t)a * (int64_t)b;
}

/* Scaling: Qa * Qb / 2^s = Q(a+b-s).  Accumulator: exact int64 product
 * (62 bits + sign).  Rounding: once, to nearest, ties up.  Saturates. */
int32_t pfx_fixed_mul_sat(int32_t a, int32_t b, unsigned s)
{
    return pfx_fixed_sat32(pfx_fixed_shr64_round(pfx_fixed_mul_wide(a, b), s));
}

/* Scaling: acc and a*b must share a Q format.  Overflow: saturates the
 * int64 sum instead of wrapping.  Rounding: exact. */
int64_t pfx_fixed_mac_sat(int64_t acc, int32_t a, int32_t b)
{
    return pfx_fixed_add64_sat(acc, pfx_fixed_mul_wide(a, b));
}

/* ------------------------------------------------------------------------ */
/* divide                                                                     */
/* ------------------------------------------------------------------------ */

/* Magnitude quotient q = n / d rounded for the sign of the true quotient.
 * Positive: q + (2r >= d); negative: the magnitude grows only when the
 * remainder is strictly above half (ties go toward +infinity). */
static uint64_t round_quotient(uint64_t q, uint64_t r, uint64_t d, int negative)
{
    /* r < d <= 2^63, so 2r < 2^64. */
    uint64_t twice_r = r << 1;
    if (negative) {
        return q + ((twice_r > d) ? 1u : 0u);
    }
    return q + ((twice_r >= d) ? 1u : 0u);
}

pfx_status_t pfx_fixed_div_sat(int32_t a, int32_t b, unsigned s, int32_t *out)
{
    uint64_t n;
    uint64_t q;
    uint64_t r;
    uint32_t d;
    int negative;

    if (out == NULL) {
        return PFX_ERR_ARG;
    }
    if (s > 32u) {
        *out = 0;
        return PFX_ERR_ARG;
    }
    if (b == 0) {
        *out = (a > 0) ? INT32_MAX : ((a < 0) ? INT32_MIN : 0);
        return PFX_ERR_DOMAIN;
    }
    n = (uint64_t)mag32(a) << s; /* <= 2^31 * 2^32 = 2^63 */
    d = mag32(b);
    negative = ((a < 0) != (b < 0));
    if (n <= UINT32_MAX) {
        /* 32-bit divide: UDIV on Cortex-M3/M4, the short helper on M0+. */
        uint32_t n32 = (uint32_t)n;
        q = n32 / d;
        r = n32 % d;
    } else {
        q = n / d;
        r = n % d;
    }
    q = round_quotient(q, r, d, negative);
    if (!negative) {
        if (q > (uint64_t)INT32_MAX) {
            *out = INT32_MAX;
            return PFX_ERR_RANGE;
        }
        *out = (int32_t)q;
        return PFX_OK;
    }
    if (q > UINT64_C(0x80000000)) {
        *out = INT32_MIN;
        return PFX_ERR_RANGE;
    }
    *out = neg_from_mag32((uint32_t)q);
    return PFX_OK;
}

pfx_status_t pfx_fixed_div64_sat(int64_t n, int64_t d, int64_t *out)
{
    uint64_t un;
    uint64_t ud;
    uint64_t q;
    uint64_t r;
    int negative;

    if (out == NULL) {
        return PFX_ERR_ARG;
    }
    if (d == 0) {
        *out = (n > 0) ? INT64_MAX : ((n < 0) ? INT64_MIN : 0);
        return PFX_ERR_DOMAIN;
    }
    un = mag64(n);
    ud = mag64(d);
    negative = ((n < 0) != (d < 0));
    if (un <= UINT32_MAX && ud <= UINT32_MAX) {
        uint32_t n32 = (uint32_t)un;
        uint32_t d32 = (uint32_t)ud;
        q = n32 / d32;
        r = n32 % d32;
    } else {
        q = un / ud;
        r = un % ud;
    }
    q = round_quotient(q, r, ud, negative);
    if (!negative) {
        if (q > (uint64_t)INT64_MAX) { /* only INT64_MIN / -1 */
            *out = INT64_MAX;
            return PFX_ERR_RANGE;
        }
        *out = (int64_t)q;
        return PFX_OK;
    }
    /* Negative magnitudes are <= 2^63 here: q <= 2^63 for d = +-1 (no
     * remainder), q <= 2^62 + 1 otherwise. */
    *out = neg_from_mag64(q);
    return PFX_OK;
}

/*
 * Reciprocal.  d = dn * 2^-c with dn = d << c in [2^31, 2^32), i.e.
 * D = dn / 2^32 in [0.5, 1); 1/d = 2^c / dn = Y * 2^(c - 62) with
 * Y = 2^62 / dn in (2^30, 2^31) for dn > 2^31.
 * Seed: y0 = 1/D at the middle of D's 1/256-wide interval, relative error
 * below 2^-8.  Two Newton steps y <- y (2 - D y) on 32x32 -> 64 products,
 * both kept at or below Y (the first by a margin of 2 LSB, the second
 * from below), leave y at most 2 LSB under Y (exhaustive over every dn);
 * the remainder 2^62 - dn*y then gives the correctly rounded 2^62 / dn,
 * the y with |2^62 - dn*y| <= dn/2 (never a tie: 2^63 has no odd factor).
 * dn*y stays at most 2^62 because y <= Y throughout.
 */
pfx_status_t pfx_fixed_recip(uint32_t d, pfx_mant_q30_t *mant, unsigned *shift)
{
    const uint64_t one_q62 = UINT64_C(1) << 62;
    unsigned c;
    uint32_t dn;
    uint32_t y;
    uint32_t t;
    uint64_t p;
    uint64_t r;
    uint32_t half;

    if (mant == NULL || shift == NULL) {
        return PFX_ERR_ARG;
    }
    if (d == 0u) {
        *mant = 0;
        *shift = 0u;
        return PFX_ERR_DOMAIN;
    }
    c = pfx_fixed_clz32(d);
    dn = d << c;
    if (dn == UINT32_C(0x80000000)) { /* power of two: exact */
        *mant = (pfx_mant_q30_t)(INT32_C(1) << 30);
        *shift = 61u - c;
        return PFX_OK;
    }
    y = (uint32_t)k_recip_seed_q15[(dn >> 24) - 128u] << 15;
    /* y (2 - D y): t = D y in Q30 (< 2^31); the truncations raise y by at
     * most 2, taken off, so y <= 2^62 / dn (the exact step never overshoots). */
    t = (uint32_t)(((uint64_t)dn * y) >> 32);
    y = (uint32_t)(((uint64_t)y * ((UINT32_C(1) << 31) - t)) >> 30) - 2u;
    /* From below: e = 2^62 - dn y in [0, 2^48) (relative error < 2^-15.9
     * after the first step), y += y e / 2^62 rounded down (e / 2^16 < 2^32):
     * y stays <= 2^62 / dn, within 2 of it. */
    p = (uint64_t)dn * y;
    y += (uint32_t)(((uint64_t)y * (uint32_t)((one_q62 - p) >> 16)) >> 46);
    /* Exact: r = 2^62 - dn y >= 0; whole steps while r >= dn, then one more
     * when r > dn / 2 (r = dn / 2 is impossible, see above). */
    p = (uint64_t)dn * y;
    r = one_q62 - p;
    while (r >= dn) {
        r -= dn;
        ++y;
    }
    half = dn >> 1;
    if (r > half) {
        ++y;
    }
    *mant = (pfx_mant_q30_t)y; /* y in (2^30, 2^31) */
    *shift = 62u - c;
    return PFX_OK;
}

/* ------------------------------------------------------------------------ */
/* square roots                                                               */
/* ------------------------------------------------------------------------ */

/* Digit-by-digit square root (base 4): after the loop, root = floor(sqrt(x))
 * and *rem = x - root^2 <= 2 * root.  Only shifts, adds and compares. */
static uint32_t isqrt32_rem(uint32_t x, uint32_t *rem)
{
    uint32_t root = 0u;
    uint32_t bit = UINT32_C(1) << 30;
    while (bit > x) {
        bit >>= 2;
    }
    while (bit != 0u) {
        if (x >= root + bit) {
            x -= root + bit;
            root = (root >> 1) + bit;
        } else {
            root >>= 1;
        }
        bit >>= 2;
    }
    *rem = x;
    return root;
}

/* Seeds of y = 2^30 / sqrt(m / 2^32) for m in [2^30, 2^32): on each eighth
 * k = m >> 29 (2..7) the line y = A - B m / 2^32 of least maximum relative
 * error (A, B in Q30; error below 2^-7 on every piece).  Only a bound on
 * the error matters: the square root below ends in an exact step. */
static const uint32_t k_rsqrt_line_q30[6][2] = {
    {2913092172u, 3128366932u}, {2448634440u, 1872026500u}, {2154714734u, 1279508901u},
    {1946840366u, 945227269u},  {1789687537u, 734956669u},  {1665441026u, 592596258u}
};

/* One Newton step y <- y (3 - M y^2) / 2 for y = 2^30 / sqrt(M) (Q30), M =
 * m / 2^32: y^2 and M y^2 in Q28 (high words of 32x32 -> 64 products),
 * then y (3 - M y^2) / 2 back in Q30.  The exact step never overshoots
 * 2^30 / sqrt(M); the truncations move y up by at most 8 (u is at most 2
 * low), and y <= 2^31 + 8 keeps every product below 2^63. */
static uint32_t rsqrt_step(uint32_t m, uint32_t y)
{
    uint32_t t = (uint32_t)(((uint64_t)y * y) >> 32);
    uint32_t u = (uint32_t)(((uint64_t)m * t) >> 32);
    return (uint32_t)(((uint64_t)y * ((UINT32_C(3) << 28) - u)) >> 29);
}

/* floor(sqrt(x)) and *rem = x - root^2 (<= 2 root), from multiplies.
 * xn = x 2^z in [2^62, 2^64) (z even), m its high word.  The seed and two
 * Newton steps give y within 2^-22 of 2^30 / sqrt(m / 2^32); 16 is taken
 * off, so y <= 2^30 / sqrt(m / 2^32) - 8 (both checked over every m).  Then
 * s = m y / 2^30 <= sqrt(xn) and e = xn - s^2 in [0, 2^44); the step
 * s += (e / 2^12) y / 2^51 (at most e / (2 sqrt(xn)), the Newton step from
 * below) leaves s in [floor(sqrt(xn)) - 1, floor(sqrt(xn))].  So
 * s / 2^(z/2) is floor(sqrt(x)) or one below it; one exact test of the
 * remainder settles which. */
static inline uint32_t isqrt64_rem(uint64_t x, uint64_t *rem)
{
    uint32_t hi = (uint32_t)(x >> 32);
    unsigned z;
    uint64_t xn, e;
    uint32_t m, y, s, r;
    const uint32_t *line;
    if (x == 0u) {
        *rem = 0u;
        return 0u;
    }
    z = ((hi != 0u) ? pfx_fixed_clz32_inline(hi) : 32u + pfx_fixed_clz32_inline((uint32_t)x)) & ~1u;
    xn = x << z;
    m = (uint32_t)(xn >> 32);
    line = k_rsqrt_line_q30[(m >> 29) - 2u];
    y = line[0] - (uint32_t)(((uint64_t)line[1] * m) >> 32);
    y = rsqrt_step(m, y);
    y = rsqrt_step(m, y) - 16u;
    s = (uint32_t)(((uint64_t)m * y) >> 30);
    e = xn - (uint64_t)s * s;
    s += (uint32_t)(((uint64_t)(uint32_t)(e >> 12) * y) >> 51);
    r = s >> (z / 2u);
    e = x - (uint64_t)r * r;
    if (e > 2u * (uint64_t)r) {
        e -= 2u * (uint64_t)r + 1u;
        ++r;
    }
    *rem = e;
    return r;
}

uint32_t pfx_fixed_isqrt_u32(uint32_t x)
{
    uint32_t rem;
    return isqrt32_rem(x, &rem);
}

/* From the rounded root (one copy of the 64-bit root): it is one above the
 * floor exactly when its square exceeds x; 2^32 only for x > (2^32 - 1)^2. */
uint32_t pfx_fixed_isqrt_u64(uint64_t x)
{
    uint64_t r = pfx_fixed_isqrt_round_u64(x);
    if (r > UINT32_MAX) {
        return UINT32_MAX;
    }
    return (uint32_t)((r * r > x) ? r - 1u : r);
}

/* (root + 1/2)^2 = root^2 + root + 1/4, so sqrt(x) is nearer root + 1
 * exactly when x - root^2 > root. */
uint32_t pfx_fixed_isqrt_round_u32(uint32_t x)
{
    uint32_t rem;
    uint32_t root = isqrt32_rem(x, &rem);
    return root + ((rem > root) ? 1u : 0u);
}

uint64_t pfx_fixed_isqrt_round_u64(uint64_t x)
{
    uint64_t rem;
    uint64_t root = isqrt64_rem(x, &rem);
    return root + ((rem > root) ? 1u : 0u);
}

/* Scaling: sqrt(x / 2^fi) * 2^fo = sqrt(x * 2^(2 fo - fi)); the product is
 * formed exactly in 64 bits (k <= 32), one exact rounding, no overflow. */
pfx_status_t pfx_fixed_sqrt_q(uint32_t x, unsigned frac_in, unsigned frac_out, uint32_t *out)
{
    int64_t k;
    uint64_t r;
    if (out == NULL) {
        return PFX_ERR_ARG;
    }
    k = 2 * (int64_t)frac_out - (int64_t)frac_in;
    if (k < 0 || k > 32) {
        *out = 0u;
        return PFX_ERR_ARG;
    }
    /* x * 2^k <= (2^32 - 1) * 2^32 = 2^64 - 2^32 < (2^32 - 1/2)^2, so the
     * rounded root is at most 2^32 - 1: it always fits. */
    r = pfx_fixed_isqrt_round_u64((uint64_t)x << (unsigned)k);
    *out = (uint32_t)r;
    return PFX_OK;
}

/* ------------------------------------------------------------------------ */
/* log2                                                                       */
/* ------------------------------------------------------------------------ */

/* log2(m / 2^31) in Q24 for m in [2^31, 2^32): interval k from the 6 bits
 * below the leading one, u the next 17 bits (Q17 within the interval), and
 * Newton's forward formula on three table entries:
 *   T[k] + u d1 + u (1 - u) d2 / 2,  d1 = T[k+1] - T[k],  d2 = 2 T[k+1] - T[k] - T[k+2]
 * (d2 > 0: log2 is concave).  d1 < 2^19 times u (Q17) is one 32 x 32 product;
 * the bow takes u in Q16 (w = u / 2): w (1 - w) < 2^30 in Q32, times d2 < 2^13
 * another.  Each term is rounded once. */
static inline uint32_t log2_frac24(uint32_t m)
{
    uint32_t k = (m >> 25) & 0x3Fu;
    uint32_t u = (m >> 8) & 0x1FFFFu;
    uint32_t t0 = k_log2_table_q24[k], t1 = k_log2_table_q24[k + 1u], t2 = k_log2_table_q24[k + 2u];
    uint64_t lin = ((uint64_t)(t1 - t0) * u + (UINT64_C(1) << 16)) >> 17;
    uint32_t w = u >> 1;
    uint64_t bow = ((uint64_t)(w * ((UINT32_C(1) << 16) - w)) * (2u * t1 - t0 - t2) + (UINT64_C(1) << 32)) >> 33;
    return t0 + (uint32_t)lin + (uint32_t)bow;
}

/* n + log2(m / 2^31) in Q16, rounded once from Q24 (may carry into n). */
static pfx_log2_q16_t log2_from_norm(uint32_t m, unsigned n)
{
    uint32_t v = ((uint32_t)n << 16) + ((log2_frac24(m) + 128u) >> 8);
    return (pfx_log2_q16_t)v; /* <= 64 * 2^16 */
}

pfx_status_t pfx_fixed_log2_u32(uint32_t x, pfx_log2_q16_t *out)
{
    unsigned c;
    if (out == NULL) {
        return PFX_ERR_ARG;
    }
    if (x == 0u) {
        *out = INT32_MIN;
        return PFX_ERR_DOMAIN;
    }
    c = pfx_fixed_clz32(x);
    *out = log2_from_norm(x << c, 31u - c);
    return PFX_OK;
}

pfx_status_t pfx_fixed_log2_u64(uint64_t x, pfx_log2_q16_t *out)
{
    unsigned c;
    if (out == NULL) {
        return PFX_ERR_ARG;
    }
    if (x == 0u) {
        *out = INT32_MIN;
        return PFX_ERR_DOMAIN;
    }
    c = pfx_fixed_clz64(x);
    *out = log2_from_norm((uint32_t)((x << c) >> 32), 63u - c);
    return PFX_OK;
}

pfx_status_t pfx_fixed_log2_q(uint32_t x, unsigned frac_bits, pfx_log2_q16_t *out)
{
    pfx_status_t st;
    pfx_log2_q16_t v;
    if (out == NULL) {
        return PFX_ERR_ARG;
    }
    if (frac_bits > 63u) {
        *out = INT32_MIN;
        return PFX_ERR_ARG;
    }
    st = pfx_fixed_log2_u32(x, &v);
    if (st != PFX_OK) {
        *out = v;
        return st;
    }
    *out = v - (int32_t)(frac_bits << 16); /* both terms < 2^22 */
    return PFX_OK;
}

/* ------------------------------------------------------------------------ */
/* exp2                                                                       */
/* ------------------------------------------------------------------------ */

/* 2^(f / 2^16) in Q63 for f in [0, 2^16):
 * (1 + h) * (1 + e) = 1 + h + e + h*e with h = T[f >> 10] (Q32) and
 * e = e(f & 1023) (Q38, < 2^31.5).  Terms in Q63: h << 31, e << 25,
 * (h * e) >> 7; every partial product fits in 64 bits and the sum is below
 * 2^64 (2^f < 2 - 2^-17).  Error against 2^f: table 2^-33, e 2^-38 (its
 * Horner truncations, rounding and series), product truncation 2^-63:
 * below 2e-10 in all. */
static uint64_t exp2_mant_q63(uint32_t f)
{
    uint64_t h = k_exp2_table_q32[f >> 10];
    uint32_t t = f & 0x3FFu;
    uint32_t e38;
    /* Horner in Q32: each step adds C_n to x times the sum so far, x s = t s / 2^16
     * (t s < 2^42, truncated); every sum stays below 2^32 (C1 + x C2 < 0.70). */
    uint32_t sum = PFX_EXP2_C5;
    sum = PFX_EXP2_C4 + (uint32_t)(((uint64_t)t * sum) >> 16);
    sum = PFX_EXP2_C3 + (uint32_t)(((uint64_t)t * sum) >> 16);
    sum = PFX_EXP2_C2 + (uint32_t)(((uint64_t)t * sum) >> 16);
    sum = PFX_EXP2_C1 + (uint32_t)(((uint64_t)t * sum) >> 16);
    e38 = (uint32_t)(((uint64_t)t * sum + (UINT64_C(1) << 9)) >> 10); /* e = x sum in Q38, < 2^31.5 */
    return (UINT64_C(1) << 63) + (h << 31) + ((uint64_t)e38 << 25) + (((uint64_t)(uint32_t)h * e38) >> 7);
}

/* round_shift_u64(m, s) for 33 <= s <= 65 from the high word alone:
 * t = floor(m / 2^(s-1)) is a 32-bit shift of it (s - 1 >= 32), and the
 * result is floor(t / 2) plus the rounding bit t & 1 (s = 65: 0). */
static uint32_t round_shift_hi(uint64_t m, unsigned s)
{
    uint32_t t;
    if (s > 64u) {
        return 0u;
    }
    t = (uint32_t)(m >> 32) >> (s - 33u);
    return (t >> 1) + (t & 1u);
}

/* Scaling: x in Q16 -> 2^x in Q30.  n = floor(x) <= 0; the Q63 mantissa is
 * shifted by 33 - n with one rounding (ties up), so no double rounding. */
pfx_frac_q30_t pfx_fixed_exp2_frac_sat(pfx_log2_q16_t x)
{
    int32_t n;
    if (x > 0) {
        return (pfx_frac_q30_t)PFX_FIXED_FRAC_Q30_ONE;
    }
    n = pfx_fixed_shr_floor(x, 16u); /* in [-32768, 0]: shift 33 - n >= 33 */
    if (n < -32) {
        return 0; /* shift > 65 */
    }
    return (pfx_frac_q30_t)round_shift_hi(exp2_mant_q63((uint32_t)x & 0xFFFFu), (unsigned)(33 - n));
}

pfx_status_t pfx_fixed_exp2_split(pfx_log2_q16_t x, pfx_mant_q30_t *mant, int32_t *exponent)
{
    int32_t n;
    uint64_t m;
    if (mant == NULL || exponent == NULL) {
        return PFX_ERR_ARG;
    }
    n = pfx_fixed_shr_floor(x, 16u); /* in [-32768, 32767] */
    m = round_shift_u64(exp2_mant_q63((uint32_t)x & 0xFFFFu), 33u);
    if (m >= (UINT64_C(1) << 31)) { /* rounding reached 2.0; cannot happen for 16-bit f */
        m = UINT64_C(1) << 30;
        n += 1;
    }
    *mant = (pfx_mant_q30_t)m;
    *exponent = n;
    return PFX_OK;
}

/* Scaling: x in Q16 -> 2^x in Q(frac_bits).  The Q63 mantissa is shifted by
 * s = 63 - floor(x) - frac_bits; s <= 32 means 2^x * 2^frac_bits >= 2^31:
 * saturate.  One rounding, ties up; very negative x underflows to 0. */
int32_t pfx_fixed_exp2_q_sat(pfx_log2_q16_t x, unsigned frac_bits)
{
    int32_t n = pfx_fixed_shr_floor(x, 16u);
    int64_t s = 63 - (int64_t)n - (int64_t)frac_bits;
    uint64_t r;
    if (s <= 32) {
        return INT32_MAX;
    }
    r = round_shift_hi(exp2_mant_q63((uint32_t)x & 0xFFFFu), (s > 65) ? 65u : (unsigned)s); /* s >= 33 */
    return (r > (uint64_t)INT32_MAX) ? INT32_MAX : (int32_t)r;
}
