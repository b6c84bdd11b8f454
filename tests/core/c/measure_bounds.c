/*
 * measure_bounds.c - exhaustive error sweeps of the approximated primitives.
 *
 * A host test program, not part of the core: it uses double (and libm's
 * log2/exp2, correctly rounded to well below 1e-6 LSB here) as the
 * reference.  Run by tests/core/test_fixed_primitives.py (slow mark) and
 * by hand: gcc -std=c99 -O2 -Ic_core/include tests/core/c/measure_bounds.c
 * c_core/src/pfx_fixed.c -lm && ./a.out [log2|exp2|recip|all]
 *
 * Prints one "name max_err_lsb worst_input" line per sweep; recip prints
 * the number of inputs whose mantissa is not the correctly rounded one
 * (must be 0).
 */
#include <math.h>
#include <stdio.h>
#include <string.h>

#include "peerfix.h"

/* Every normalised 32-bit mantissa m in [2^31, 2^32): log2_u32 of m covers
 * every fraction any uint32 or uint64 input can produce. */
static void sweep_log2(void)
{
    double worst = 0.0;
    uint32_t worst_x = 0u;
    uint64_t x;
    for (x = UINT64_C(0x80000000); x <= UINT64_C(0xFFFFFFFF); ++x) {
        pfx_log2_q16_t v;
        double err;
        pfx_fixed_log2_u32((uint32_t)x, &v);
        err = fabs((double)v / 65536.0 - log2((double)x)) * 65536.0;
        if (err > worst) {
            worst = err;
            worst_x = (uint32_t)x;
        }
    }
    printf("log2_u32 %.6f %lu\n", worst, (unsigned long)worst_x);
}

/* exp2_frac_sat over every Q16 argument in [-33, 0]; exp2_split over every
 * fraction (its mantissa does not depend on the integer part); exp2_q_sat
 * for x in [-8, 8) at several output formats. */
static void sweep_exp2(void)
{
    double worst = 0.0;
    int32_t worst_x = 0;
    int32_t x;
    unsigned fb;
    for (x = -33 * 65536; x <= 0; ++x) {
        double exact = exp2((double)x / 65536.0 + 30.0);
        double err = fabs((double)pfx_fixed_exp2_frac_sat(x) - exact);
        if (err > worst) {
            worst = err;
            worst_x = x;
        }
    }
    printf("exp2_frac_sat %.6f %ld\n", worst, (long)worst_x);

    worst = 0.0;
    for (x = 0; x < 65536; ++x) {
        pfx_mant_q30_t mant;
        int32_t e;
        double err;
        pfx_fixed_exp2_split(x, &mant, &e);
        err = fabs((double)mant - exp2((double)x / 65536.0 + 30.0));
        if (err > worst) {
            worst = err;
            worst_x = x;
        }
    }
    printf("exp2_split %.6f %ld\n", worst, (long)worst_x);

    for (fb = 0u; fb <= 30u; fb += 6u) {
        worst = 0.0;
        for (x = -8 * 65536; x < 8 * 65536; ++x) {
            double exact = exp2((double)x / 65536.0 + (double)fb);
            double err;
            if (exact >= 2147483647.0) {
                continue;
            }
            err = fabs((double)pfx_fixed_exp2_q_sat(x, fb) - exact);
            if (err > worst) {
                worst = err;
                worst_x = x;
            }
        }
        printf("exp2_q_sat_f%u %.6f %ld\n", fb, worst, (long)worst_x);
    }
}

/* recip over every normalised divisor dn in (2^31, 2^32) (every d maps to
 * one of these): the mantissa must satisfy |2^62 - dn*m| <= dn/2. */
static void sweep_recip(void)
{
    uint64_t dn;
    unsigned long bad = 0ul;
    for (dn = UINT64_C(0x80000001); dn <= UINT64_C(0xFFFFFFFF); ++dn) {
        pfx_mant_q30_t m;
        unsigned s;
        uint64_t p;
        uint64_t gap;
        pfx_fixed_recip((uint32_t)dn, &m, &s);
        p = dn * (uint64_t)m;
        gap = (p > (UINT64_C(1) << 62)) ? p - (UINT64_C(1) << 62) : (UINT64_C(1) << 62) - p;
        if (s != 62u || 2u * gap > dn) {
            ++bad;
        }
    }
    printf("recip_not_rounded %lu 0\n", bad);
}

int main(int argc, char **argv)
{
    const char *what = (argc > 1) ? argv[1] : "all";
    int all = (strcmp(what, "all") == 0);
    if (all || strcmp(what, "log2") == 0) {
        sweep_log2();
    }
    if (all || strcmp(what, "exp2") == 0) {
        sweep_exp2();
    }
    if (all || strcmp(what, "recip") == 0) {
        sweep_recip();
    }
    return 0;
}
