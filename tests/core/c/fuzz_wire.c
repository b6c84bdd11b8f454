/*
 * libFuzzer target for the belief-frame decoder (tools/fuzz_wire.sh).
 *
 * Every input is a frame.  The decoder must return a status from the
 * documented set and never touch memory outside the input (AddressSanitizer
 * watches; the input buffer libFuzzer passes is exactly `size` bytes).  A
 * frame that decodes must encode back to the same bytes (the format is
 * idempotent), and its covariances must be positive definite.
 */
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "peerfix.h"

static unsigned long long counts[16];

static void report(void)
{
    unsigned s;
    fprintf(stderr, "fuzz_wire statuses:");
    for (s = 0; s < 16; s++) {
        if (counts[s]) {
            fprintf(stderr, " %u:%llu", s, counts[s]);
        }
    }
    fprintf(stderr, "\n");
}

int LLVMFuzzerInitialize(int *argc, char ***argv)
{
    (void)argc;
    (void)argv;
    atexit(report);
    return 0;
}

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
    pfx_belief_t b;
    pfx_wire_meta_t meta;
    pfx_status_t st = pfx_wire_decode(data, size, &b, &meta);
    uint32_t k;
    counts[(unsigned)st & 15u]++;
    if (st != PFX_OK) {
        if (st != PFX_ERR_FORMAT && st != PFX_ERR_VERSION) {
            abort(); /* not a status the decoder documents */
        }
        if (b.count != 0) {
            abort(); /* a rejected frame leaves an empty belief */
        }
        return 0;
    }
    for (k = 0; k < b.count; k++) {
        const pfx_component_t *c = &b.comp[k];
        if (!(meta.flags & PFX_WIRE_FLAG_ANCHOR) &&
            !(c->pxx > 0 && c->pyy > 0 && (int64_t)c->pxx * c->pyy > (int64_t)c->pxy * c->pxy)) {
            abort(); /* decoded covariance not positive definite */
        }
    }
    {
        uint8_t again[PFX_WIRE_MAX_BYTES];
        size_t len = 0;
        if (pfx_wire_encode(&b, &meta, again, sizeof again, &len) != PFX_OK || len != size ||
            memcmp(again, data, size) != 0) {
            abort(); /* decode then encode must give the same bytes */
        }
    }
    return 0;
}
