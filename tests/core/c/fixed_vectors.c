/*
 * fixed_vectors.c - runs every fixed-point primitive over a fixed vector of
 * inputs and prints, per primitive, "name count hash" where hash is a
 * 64-bit FNV-1a style fold of every result (status and value).
 *
 * tests/core/test_integer_only.py builds this with several compilers and
 * flag sets (-O0/-O2, with and without -fwrapv, portable or builtin clz,
 * UBSan) and requires identical output from all of them, and equal to the
 * same fold over peerfix.core.quantise (which generates the same inputs).
 * Input generation and iteration order must therefore stay in step with
 * tests/core/vectors.py.
 *
 * Integer-only like the core; its own conversions avoid every
 * implementation-defined case as well.
 */
#include "peerfix.h"

/* Output: stdio on the host; on the Cortex-M builds run under qemu-arm
 * (PFX_VECTORS_NO_LIBC) a write system call from arm_linux_start.c. */
#if defined(PFX_VECTORS_NO_LIBC)
void pfx_test_write(const char *s, unsigned n);
#else
#include <stdio.h>
static void pfx_test_write(const char *s, unsigned n)
{
    fwrite(s, 1u, n, stdout);
}
#endif

#define N_EDGE32 20
#define N_RAND 28
#define N32 (N_EDGE32 + N_RAND)
#define N_EDGE64 16
#define N64 (N_EDGE64 + N_RAND)
#define N_U32 (2 * 32 + 8 + N_RAND)
#define N_U64 (2 * 64 + 4 + N_RAND)

static const int32_t edge32[N_EDGE32] = {
    INT32_MIN, INT32_MIN + 1, -1073741824, -65537, -65536, -65535, -32768, -3, -2, -1,
    0, 1, 2, 3, 32768, 65535, 65536, 1073741824, INT32_MAX - 1, INT32_MAX};

static const int64_t edge64[N_EDGE64] = {
    INT64_MIN, INT64_MIN + 1, -INT64_C(4611686018427387904), -INT64_C(4294967296), INT32_MIN, -3, -1, 0,
    1, 3, INT32_MAX, INT64_C(4294967296), INT64_C(4611686018427387904), INT64_MAX - 1, INT64_MAX, 7};

static const unsigned shifts[] = {0u, 1u, 2u, 15u, 16u, 17u, 30u, 31u, 32u, 33u, 62u, 63u, 64u, 65u, 200u};
#define N_SHIFTS (sizeof shifts / sizeof shifts[0])

static const unsigned div_shifts[] = {0u, 1u, 16u, 31u, 32u, 33u};
#define N_DIV_SHIFTS (sizeof div_shifts / sizeof div_shifts[0])

static const unsigned exp2_frac_bits[] = {0u, 16u, 30u, 31u, 40u, 62u, 1000u};
#define N_EXP2_FB (sizeof exp2_frac_bits / sizeof exp2_frac_bits[0])

static int32_t v32[N32];
static int64_t v64[N64];
static uint32_t u32[N_U32];
static uint64_t u64[N_U64];

/* The generator and the fold wrap on purpose (unsigned, defined); tell
 * clang's -fsanitize=integer so the core is what it checks. */
#if defined(__clang__)
#define PFX_TEST_WRAPS __attribute__((no_sanitize("unsigned-integer-overflow")))
#else
#define PFX_TEST_WRAPS
#endif

static uint64_t lcg_state = UINT64_C(0x9E3779B97F4A7C15);

PFX_TEST_WRAPS static uint64_t lcg_next(void)
{
    lcg_state = lcg_state * UINT64_C(6364136223846793005) + UINT64_C(1442695040888963407);
    return lcg_state;
}

static int32_t to_s32(uint32_t u)
{
    return (u <= (uint32_t)INT32_MAX) ? (int32_t)u : -(int32_t)(UINT32_MAX - u) - 1;
}

static int64_t to_s64(uint64_t u)
{
    return (u <= (uint64_t)INT64_MAX) ? (int64_t)u : -(int64_t)(UINT64_MAX - u) - 1;
}

static void make_inputs(void)
{
    int i;
    int k = 0;
    for (i = 0; i < N_EDGE32; ++i) {
        v32[i] = edge32[i];
    }
    for (i = 0; i < N_RAND; ++i) {
        /* Random magnitudes: shift the raw draw right by 0..31 bits. */
        uint64_t r = lcg_next();
        v32[N_EDGE32 + i] = to_s32((uint32_t)(r >> 32) >> (unsigned)(r & 31u));
    }
    for (i = 0; i < N_EDGE64; ++i) {
        v64[i] = edge64[i];
    }
    for (i = 0; i < N_RAND; ++i) {
        uint64_t r = lcg_next();
        v64[N_EDGE64 + i] = to_s64(r >> (unsigned)(r & 63u));
    }
    for (i = 0; i < 32; ++i) {
        u32[k++] = UINT32_C(1) << i;
        u32[k++] = (UINT32_C(1) << i) - 1u;
    }
    u32[k++] = UINT32_MAX;
    u32[k++] = UINT32_MAX - 1u;
    u32[k++] = 3u;
    u32[k++] = 5u;
    u32[k++] = 0x80000001u;
    u32[k++] = 0xC0000000u;
    u32[k++] = 0xFFFE0001u; /* 65535^2 */
    u32[k++] = 0xFFFF0000u;
    for (i = 0; i < N_RAND; ++i) {
        uint64_t r = lcg_next();
        u32[k++] = (uint32_t)(r >> 32) >> (unsigned)(r & 31u);
    }
    k = 0;
    for (i = 0; i < 64; ++i) {
        u64[k++] = UINT64_C(1) << i;
        u64[k++] = (UINT64_C(1) << i) - 1u;
    }
    u64[k++] = UINT64_MAX;
    u64[k++] = UINT64_MAX - 1u;
    u64[k++] = UINT64_C(0xFFFFFFFE00000001); /* (2^32 - 1)^2 */
    u64[k++] = UINT64_C(0xFFFFFFFF00000000);
    for (i = 0; i < N_RAND; ++i) {
        uint64_t r = lcg_next();
        u64[k++] = lcg_next() >> (unsigned)(r & 63u);
    }
}

/* --- result fold ---------------------------------------------------------- */

static uint64_t fold_h;
static unsigned long fold_n;

static void fold_begin(void)
{
    fold_h = UINT64_C(14695981039346656037);
    fold_n = 0ul;
}

PFX_TEST_WRAPS static void fold(uint64_t v)
{
    fold_h = (fold_h ^ v) * UINT64_C(1099511628211);
    ++fold_n;
}

static void fold_s(int64_t v)
{
    fold((uint64_t)v); /* conversion to unsigned is defined: v mod 2^64 */
}

/* "name count hash\n", formatted by hand (no printf on the bare targets). */
static void fold_end(const char *name)
{
    char line[64];
    char digits[24];
    unsigned n = 0u;
    unsigned d = 0u;
    unsigned long count = fold_n;
    int i;
    while (name[n] != '\0') {
        line[n] = name[n];
        ++n;
    }
    line[n++] = ' ';
    do {
        digits[d++] = (char)('0' + (int)(count % 10ul));
        count /= 10ul;
    } while (count != 0ul);
    while (d > 0u) {
        line[n++] = digits[--d];
    }
    line[n++] = ' ';
    for (i = 60; i >= 0; i -= 4) {
        line[n++] = "0123456789abcdef"[(fold_h >> (unsigned)i) & 0xFu];
    }
    line[n++] = '\n';
    pfx_test_write(line, n);
}

/* --- the runs ------------------------------------------------------------- */

int main(void)
{
    int i;
    int j;
    unsigned k;
    make_inputs();

    fold_begin();
    for (i = 0; i < N_U32; ++i) {
        fold(pfx_fixed_clz32(u32[i]));
    }
    for (i = 0; i < N_U64; ++i) {
        fold(pfx_fixed_clz64(u64[i]));
    }
    fold_end("clz");

    fold_begin();
    for (i = 0; i < N64; ++i) {
        fold_s(pfx_fixed_sat32(v64[i]));
    }
    for (i = 0; i < N32; ++i) {
        fold_s(pfx_fixed_neg_sat(v32[i]));
        fold_s(pfx_fixed_abs_sat(v32[i]));
        for (j = 0; j < N32; ++j) {
            fold_s(pfx_fixed_add_sat(v32[i], v32[j]));
            fold_s(pfx_fixed_sub_sat(v32[i], v32[j]));
            fold_s(pfx_fixed_clamp(v32[i], -1000, v32[j]));
        }
    }
    for (i = 0; i < N64; ++i) {
        for (j = 0; j < N64; ++j) {
            fold_s(pfx_fixed_add64_sat(v64[i], v64[j]));
            fold_s(pfx_fixed_sub64_sat(v64[i], v64[j]));
            fold_s(pfx_fixed_clamp64(v64[i], -1000, v64[j]));
        }
    }
    fold_end("saturate");

    fold_begin();
    for (i = 0; i < N32; ++i) {
        for (k = 0u; k < N_SHIFTS; ++k) {
            fold_s(pfx_fixed_shr_floor(v32[i], shifts[k]));
            fold_s(pfx_fixed_shr_round(v32[i], shifts[k]));
            fold_s(pfx_fixed_shl_sat(v32[i], shifts[k]));
        }
    }
    for (i = 0; i < N64; ++i) {
        for (k = 0u; k < N_SHIFTS; ++k) {
            fold_s(pfx_fixed_shr64_floor(v64[i], shifts[k]));
            fold_s(pfx_fixed_shr64_round(v64[i], shifts[k]));
            fold_s(pfx_fixed_shr64_round_sat32(v64[i], shifts[k]));
            fold_s(pfx_fixed_shl64_sat(v64[i], shifts[k]));
        }
    }
    fold_end("shift");

    fold_begin();
    for (i = 0; i < N32; ++i) {
        for (j = 0; j < N32; ++j) {
            fold_s(pfx_fixed_mul_wide(v32[i], v32[j]));
            fold_s(pfx_fixed_mac_sat(v64[i % N64], v32[i], v32[j]));
            for (k = 0u; k < N_SHIFTS; ++k) {
                fold_s(pfx_fixed_mul_sat(v32[i], v32[j], shifts[k]));
            }
        }
    }
    fold_end("multiply");

    fold_begin();
    for (i = 0; i < N32; ++i) {
        for (j = 0; j < N32; ++j) {
            for (k = 0u; k < N_DIV_SHIFTS; ++k) {
                int32_t q;
                pfx_status_t st = pfx_fixed_div_sat(v32[i], v32[j], div_shifts[k], &q);
                fold((uint64_t)st);
                fold_s(q);
            }
        }
    }
    for (i = 0; i < N64; ++i) {
        for (j = 0; j < N64; ++j) {
            int64_t q;
            pfx_status_t st = pfx_fixed_div64_sat(v64[i], v64[j], &q);
            fold((uint64_t)st);
            fold_s(q);
        }
    }
    for (i = 0; i < N_U32; ++i) {
        pfx_mant_q30_t m;
        unsigned s;
        pfx_status_t st = pfx_fixed_recip(u32[i], &m, &s);
        fold((uint64_t)st);
        fold_s(m);
        fold(s);
    }
    fold_end("divide");

    fold_begin();
    for (i = 0; i < N_U32; ++i) {
        fold(pfx_fixed_isqrt_u32(u32[i]));
        fold(pfx_fixed_isqrt_round_u32(u32[i]));
        for (k = 0u; k < 34u; k += 3u) {
            uint32_t r;
            pfx_status_t st = pfx_fixed_sqrt_q(u32[i], k, (k + 1u) / 2u + (k % 5u), &r);
            fold((uint64_t)st);
            fold(r);
        }
    }
    for (i = 0; i < N_U64; ++i) {
        fold(pfx_fixed_isqrt_u64(u64[i]));
        fold(pfx_fixed_isqrt_round_u64(u64[i]));
    }
    fold_end("sqrt");

    fold_begin();
    for (i = 0; i < N_U32; ++i) {
        pfx_log2_q16_t v;
        pfx_status_t st = pfx_fixed_log2_u32(u32[i], &v);
        fold((uint64_t)st);
        fold_s(v);
        for (k = 0u; k < 70u; k += 16u) {
            st = pfx_fixed_log2_q(u32[i], k, &v);
            fold((uint64_t)st);
            fold_s(v);
        }
    }
    for (i = 0; i < N_U64; ++i) {
        pfx_log2_q16_t v;
        pfx_status_t st = pfx_fixed_log2_u64(u64[i], &v);
        fold((uint64_t)st);
        fold_s(v);
    }
    fold_end("log2");

    fold_begin();
    for (i = 0; i < N32; ++i) {
        pfx_mant_q30_t m;
        int32_t e;
        pfx_status_t st = pfx_fixed_exp2_split(v32[i], &m, &e);
        fold((uint64_t)st);
        fold_s(m);
        fold_s(e);
        fold_s(pfx_fixed_exp2_frac_sat(v32[i]));
        for (k = 0u; k < N_EXP2_FB; ++k) {
            fold_s(pfx_fixed_exp2_q_sat(v32[i], exp2_frac_bits[k]));
        }
    }
    for (i = -45 * 65536; i <= 45 * 65536; i += 257) {
        pfx_mant_q30_t m;
        int32_t e;
        pfx_fixed_exp2_split(i, &m, &e);
        fold_s(m);
        fold_s(e);
        fold_s(pfx_fixed_exp2_frac_sat(i));
        fold_s(pfx_fixed_exp2_q_sat(i, 16u));
    }
    fold_end("exp2");
    return 0;
}
