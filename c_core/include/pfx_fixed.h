/*
 * pfx_fixed.h - fixed-point primitives (module "fixed"), included by peerfix.h.
 *
 * Conventions of this module
 *   - Names: pfx_fixed_<verb>[_<width>][_<variant>].  A "_sat" suffix means
 *     the result saturates to the range of its type instead of failing; a
 *     "_floor" suffix means the result is rounded toward -infinity.
 *   - Rounding, unless the name says _floor: round to nearest, ties toward
 *     +infinity (add half an LSB, then floor).  So 2.5 -> 3, -2.5 -> -2.
 *   - A Q value with f fractional bits stands for raw / 2^f.  Generic
 *     primitives take the raw integer plus the shift; the types below name
 *     the formats that carry a meaning of their own.
 *   - Every shift count is an unsigned int and every count is defined: counts
 *     past the width give the mathematically correct (saturated or rounded)
 *     result, never undefined behaviour.
 *   - Functions that cannot fail return their value; functions with a domain
 *     or argument error return pfx_status_t and write the value through a
 *     pointer.
 *
 * Error bounds below are against the exact real result, in LSB of the
 * output; "measured" is the worst case of an exhaustive or dense sweep
 * (tests/core/), the other figure is the analytic bound.
 */
#ifndef PFX_FIXED_H
#define PFX_FIXED_H

#include "peerfix.h"

#ifdef __cplusplus
extern "C" {
#endif

/* PFX_CDEF_BEGIN */

/*
 * Base-2 logarithm of a dimensionless ratio (a weight, a likelihood ratio,
 * a scale factor), signed Q15.16: LSB 2^-16 bit (about 1.06e-5 in natural
 * log units), range [-32768, 32768) bits.
 */
typedef int32_t pfx_log2_q16_t;

/*
 * A dimensionless fraction in [0, 1] (e.g. a normalised mixture weight),
 * Q1.30: 1.0 is 2^30, LSB 2^-30 (about 9.3e-10), raw range [0, 2^30].
 */
typedef int32_t pfx_frac_q30_t;

/*
 * A normalised mantissa in [1, 2), Q1.30: raw range [2^30, 2^31), LSB 2^-30.
 * Paired with a power-of-two exponent or shift by the functions that return it.
 */
typedef int32_t pfx_mant_q30_t;

#define PFX_FIXED_LOG2_FRAC_BITS 16
#define PFX_FIXED_FRAC_Q30_ONE 1073741824

/* ---- leading zeros -------------------------------------------------------
 * Number of leading zero bits; clz32(0) = 32, clz64(0) = 64.  Portable
 * binary search by default (no CLZ instruction needed: Cortex-M0+);
 * -DPFX_USE_BUILTIN_CLZ selects __builtin_clz on gcc/clang, same results.
 */
unsigned pfx_fixed_clz32(uint32_t x);
unsigned pfx_fixed_clz64(uint64_t x);

/* ---- saturation and clamps -----------------------------------------------
 * No arithmetic can overflow: sums are formed in int64 (32-bit operands) or
 * checked against the limits before adding (64-bit operands).
 */
int32_t pfx_fixed_sat32(int64_t x);                           /* clamp to [INT32_MIN, INT32_MAX] */
int32_t pfx_fixed_clamp(int32_t x, int32_t lo, int32_t hi);   /* x<lo -> lo, else x>hi -> hi */
int64_t pfx_fixed_clamp64(int64_t x, int64_t lo, int64_t hi);
int32_t pfx_fixed_add_sat(int32_t a, int32_t b);
int32_t pfx_fixed_sub_sat(int32_t a, int32_t b);
int32_t pfx_fixed_neg_sat(int32_t a);                          /* -INT32_MIN -> INT32_MAX */
int32_t pfx_fixed_abs_sat(int32_t a);                          /* |INT32_MIN| -> INT32_MAX */
int64_t pfx_fixed_add64_sat(int64_t a, int64_t b);
int64_t pfx_fixed_sub64_sat(int64_t a, int64_t b);

/* ---- shifts ---------------------------------------------------------------
 * shr_floor: floor(x / 2^s), built without shifting a negative value.
 * shr_round: round(x / 2^s), ties toward +infinity; never overflows (the
 *   rounding bit is added to the floor quotient, not to x).
 * shl_sat: x * 2^s saturated to the type; no left shift of a negative value.
 * Counts past the width: shr_floor -> 0 or -1, shr_round -> 0, shl_sat ->
 * 0 or the saturated limit.
 */
int32_t pfx_fixed_shr_floor(int32_t x, unsigned s);
int32_t pfx_fixed_shr_round(int32_t x, unsigned s);
int64_t pfx_fixed_shr64_floor(int64_t x, unsigned s);
int64_t pfx_fixed_shr64_round(int64_t x, unsigned s);
int32_t pfx_fixed_shr64_round_sat32(int64_t x, unsigned s);    /* int64 accumulator -> int32 */
int32_t pfx_fixed_shl_sat(int32_t x, unsigned s);
int64_t pfx_fixed_shl64_sat(int64_t x, unsigned s);

/* ---- multiply -------------------------------------------------------------
 * mul_wide: the exact product a*b in int64 (|a*b| <= 2^62, cannot overflow).
 * mul_sat: round(a*b / 2^s), ties toward +infinity, saturated to int32.
 *   Scaling: Qa * Qb >> s gives Q(a+b-s).  Accumulator: the exact 64-bit
 *   product, one rounding; error <= 0.5 LSB.  Any s (s >= 64 gives 0).
 * mac_sat: acc + a*b in int64, saturated.  Guard bits: a full-scale product
 *   uses 62 bits, so an int64 holds the sum of two of them exactly and of
 *   2^k products of at most (62 - k) bits each; beyond that it saturates
 *   instead of wrapping.  Finish with pfx_fixed_shr64_round_sat32.
 */
int64_t pfx_fixed_mul_wide(int32_t a, int32_t b);
int32_t pfx_fixed_mul_sat(int32_t a, int32_t b, unsigned s);
int64_t pfx_fixed_mac_sat(int64_t acc, int32_t a, int32_t b);

/* ---- divide ---------------------------------------------------------------
 * div_sat: *out = round(a * 2^s / b), ties toward +infinity, s in 0..32.
 *   Scaling: Qa / Qb with s gives Q(a-b+s).  Exact: a*2^s is formed in 64
 *   bits (|a*2^s| <= 2^63), quotient and remainder give the rounding;
 *   error <= 0.5 LSB.  32-bit divide when a*2^s fits in 32 bits, else a
 *   64-bit divide (a library call on Cortex-M).
 *   PFX_ERR_RANGE: quotient outside int32, *out saturated.
 *   PFX_ERR_DOMAIN: b == 0, *out = INT32_MAX, INT32_MIN or 0 by sign of a.
 *   PFX_ERR_ARG: s > 32 (*out = 0) or out == NULL.
 * div64_sat: *out = round(n / d) in int64, same rules (the only overflow is
 *   INT64_MIN / -1).  Always a 64-bit divide unless both fit in 32 bits.
 */
pfx_status_t pfx_fixed_div_sat(int32_t a, int32_t b, unsigned s, int32_t *out);
pfx_status_t pfx_fixed_div64_sat(int64_t n, int64_t d, int64_t *out);

/*
 * recip: 1/d = *mant / 2^*shift, with *mant = round(2^*shift / d) in
 *   [2^30, 2^31) and *shift in [30, 62].  No divide: a 128-entry seed table,
 *   two Newton steps (32x32->64 multiplies) and an exact correction step
 *   with the remainder, so the mantissa is correctly rounded: error <= 0.5
 *   LSB of *mant (relative error <= 2^-31); exhaustively checked over every
 *   normalised d.  Powers of two are exact.
 *   Use: x / d ~ pfx_fixed_mul_sat(x, mant, shift), error <= 0.75 LSB for
 *   any int32 x (0.5 final rounding + |x| * 0.5 * 2^-shift, shift >= 32
 *   whenever d is not a power of two).
 *   PFX_ERR_DOMAIN: d == 0 (*mant = 0, *shift = 0).  PFX_ERR_ARG: NULL.
 */
pfx_status_t pfx_fixed_recip(uint32_t d, pfx_mant_q30_t *mant, unsigned *shift);

/* ---- square roots -----------------------------------------------------------
 * isqrt: floor(sqrt(x)), exact.  u32: bit by bit (16 steps of shifts, adds
 *   and compares; no multiply, no divide).  u64: a fitted seed, two Newton
 *   steps on 32x32 -> 64 multiplies and one exact remainder test.
 * isqrt_round: round(sqrt(x)) exactly (an integer's square root is never
 *   exactly half-way), from the remainder of the same computation.
 *   isqrt_round_u64 can be 2^32, hence uint64_t.
 * sqrt_q: *out = round(sqrt(x / 2^frac_in) * 2^frac_out), exact, for
 *   0 <= 2*frac_out - frac_in <= 32 (Q2n -> Qn is frac_in = 2n, frac_out = n;
 *   Qf -> Qf needs f <= 32).  PFX_ERR_ARG outside that (*out = 0).  The
 *   result always fits: x * 2^k <= 2^64 - 2^32 rounds to at most 2^32 - 1.
 */
uint32_t pfx_fixed_isqrt_u32(uint32_t x);
uint32_t pfx_fixed_isqrt_u64(uint64_t x);
uint32_t pfx_fixed_isqrt_round_u32(uint32_t x);
uint64_t pfx_fixed_isqrt_round_u64(uint64_t x);
pfx_status_t pfx_fixed_sqrt_q(uint32_t x, unsigned frac_in, unsigned frac_out, uint32_t *out);

/* ---- log2 -------------------------------------------------------------------
 * log2_u32 / log2_u64: *out = log2(x) in Q16 for x > 0.  Integer part from
 *   the leading-zero count; fraction from a 257-entry Q24 table of
 *   log2(1 + k/256) with linear interpolation on the next 15 bits (32-bit
 *   multiply only), then rounded to Q16.  Interpolation error <= 0.18 LSB
 *   (h^2/8 * max|f''|), table and truncation < 0.02 LSB, final rounding
 *   0.5 LSB: bound 0.70 LSB of Q16.  Measured over every 32-bit mantissa:
 *   0.689 LSB (x = 2151500543).
 *   Powers of two are exact.  log2_u64 keeps the top 32 significant bits.
 *   PFX_ERR_DOMAIN: x == 0 (*out = INT32_MIN, the saturated -infinity).
 * log2_q: log2(x / 2^frac_bits) = log2_u32(x) - frac_bits * 2^16, exact
 *   subtraction; frac_bits 0..63 (else PFX_ERR_ARG, *out = INT32_MIN).
 */
pfx_status_t pfx_fixed_log2_u32(uint32_t x, pfx_log2_q16_t *out);
pfx_status_t pfx_fixed_log2_u64(uint64_t x, pfx_log2_q16_t *out);
pfx_status_t pfx_fixed_log2_q(uint32_t x, unsigned frac_bits, pfx_log2_q16_t *out);

/* ---- exp2 -------------------------------------------------------------------
 * All three start from the same mantissa: x = n + f (n = floor, f in [0, 1)
 * as 16 bits); 2^f = (1 + T[f >> 8]) * (1 + e(f & 255)) with a 256-entry Q32
 * table T and a degree-4 polynomial e, formed in Q63 (relative error
 * < 2e-10), then rounded once to the output.
 * exp2_frac_sat: round(2^x * 2^30) for x <= 0, the common case (weights from
 *   log2 weights).  Bound: 0.5 LSB rounding + < 0.25 LSB mantissa error
 *   (x in [-1, 0); smaller further down); measured over every x in [-33, 0]:
 *   0.561 LSB.  Exact at x = 0 and at integers down to -30; returns 0 once
 *   2^x < 2^-31 (x < -31; x = -31 is the tie and gives 1).  x > 0 saturates
 *   to 2^30 (1.0).
 * exp2_split: 2^x = *mant * 2^(*exponent - 30) with *mant in [2^30, 2^31),
 *   *exponent = floor(x): covers the whole Q16 range with no overflow.
 *   Bound 0.75 LSB of *mant; measured over all 65536 fractions: 0.623 LSB.
 *   PFX_ERR_ARG on NULL.
 * exp2_q_sat: round(2^x * 2^frac_bits) as int32, saturating to INT32_MAX,
 *   underflowing to 0.  Bound 0.5 LSB + 2e-10 relative (< 1 LSB); measured
 *   0.623 LSB (frac_bits 24 and 30, x in [-8, 8)).
 */
pfx_frac_q30_t pfx_fixed_exp2_frac_sat(pfx_log2_q16_t x);
pfx_status_t pfx_fixed_exp2_split(pfx_log2_q16_t x, pfx_mant_q30_t *mant, int32_t *exponent);
int32_t pfx_fixed_exp2_q_sat(pfx_log2_q16_t x, unsigned frac_bits);

/* PFX_CDEF_END */

/* Keep a helper out of line where inlining would copy it many times
 * (flash) for no gain in a cold path; no effect on any value. */
#if defined(__GNUC__)
#define PFX_NOINLINE __attribute__((noinline))
#else
#define PFX_NOINLINE
#endif

/* pfx_fixed_clz32 as an inline function, for hot loops in other modules
 * (outside the binding).  Portable binary search: five tests, no CLZ
 * instruction, no table; -DPFX_USE_BUILTIN_CLZ: the compiler's builtin. */
static inline unsigned pfx_fixed_clz32_inline(uint32_t x)
{
#if defined(PFX_USE_BUILTIN_CLZ)
    return (x == 0u) ? 32u : (unsigned)__builtin_clz((unsigned int)x);
#else
    unsigned n = 0u;
    if (x == 0u) {
        return 32u;
    }
    if ((x & UINT32_C(0xFFFF0000)) == 0u) {
        n += 16u;
        x <<= 16;
    }
    if ((x & UINT32_C(0xFF000000)) == 0u) {
        n += 8u;
        x <<= 8;
    }
    if ((x & UINT32_C(0xF0000000)) == 0u) {
        n += 4u;
        x <<= 4;
    }
    if ((x & UINT32_C(0xC0000000)) == 0u) {
        n += 2u;
        x <<= 2;
    }
    if ((x & UINT32_C(0x80000000)) == 0u) {
        n += 1u;
    }
    return n;
#endif
}

#ifdef __cplusplus
}
#endif

#endif /* PFX_FIXED_H */
