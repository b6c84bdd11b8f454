/*
 * peerfix.h - the one public header of the peerfix fixed-point core.
 *
 * Include only this file.  It defines what every module shares (the status
 * codes) and pulls in each module's header, in dependency order.
 *
 * Language and platform contract (binding for every module):
 *   - C99; only <stdint.h>, <stddef.h> and <string.h>.
 *   - No float or double, no libm, no heap, no recursion, no VLAs.
 *   - No undefined behaviour, and no implementation-defined behaviour that
 *     changes a result: no signed overflow, no right shift of a negative
 *     value, no out-of-range conversion to a signed type.  The same bits come
 *     out with or without -fwrapv, at any optimisation level, on gcc, clang
 *     and arm-none-eabi-gcc (Cortex-M0+ has no divide and no CLZ: neither is
 *     needed for a correct result).
 *
 * Naming: every public function is pfx_<module>_<verb>; every type is
 * pfx_<meaning>_<format>_t, and its comment gives range, LSB and unit.
 *
 * The text between the PFX_CDEF_BEGIN and PFX_CDEF_END markers (here and in
 * each module header included below) is also the cffi cdef of the Python
 * binding (python/peerfix/core/_build.py reads it), so it may hold only
 * typedefs, enums, "#define NAME <integer literal>" and prototypes.
 */
#ifndef PEERFIX_H
#define PEERFIX_H

#include <stddef.h>
#include <stdint.h>

#ifdef __cplusplus
extern "C" {
#endif

/* PFX_CDEF_BEGIN */

/*
 * Status of a call that can fail.  PFX_OK is 0; the values are stable (the
 * Python binding mirrors them in peerfix.core.Status).  A function that
 * returns a status always writes every out-parameter it was given (unless
 * the status is PFX_ERR_ARG for a NULL pointer), so the caller never reads
 * an uninitialised value.
 */
typedef enum {
    PFX_OK = 0,
    PFX_ERR_ARG = 1,        /* an argument outside its documented range, or a NULL pointer */
    PFX_ERR_DOMAIN = 2,     /* mathematically undefined: divide by zero, log2 of zero */
    PFX_ERR_RANGE = 3,      /* result not representable: the saturated value was written */
    PFX_ERR_FULL = 4,       /* a compile-time bounded buffer has no room left */
    PFX_ERR_EMPTY = 5,      /* the operation needs at least one element */
    PFX_ERR_DEGENERATE = 6, /* numerically degenerate input: singular covariance, zero total weight */
    PFX_ERR_FORMAT = 7,     /* bytes do not parse as the wire format (length, field, check sequence) */
    PFX_ERR_VERSION = 8,    /* a wire format version this build does not support */
    PFX_ERR_STATE = 9       /* call not valid in the object's current state (e.g. not initialised) */
} pfx_status_t;

/* PFX_CDEF_END */

#ifdef __cplusplus
}
#endif

/* Module headers, in dependency order. */
#include "pfx_fixed.h"
#include "pfx_mixture.h"
#include "pfx_range.h"
#include "pfx_node.h"
#include "pfx_wire.h"

#endif /* PEERFIX_H */
