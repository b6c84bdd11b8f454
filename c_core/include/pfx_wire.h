/*
 * pfx_wire.h - belief messages on the air (module "wire"), included by peerfix.h.
 *
 * One broadcast is one frame, little-endian, byte by byte in docs/wire-format.md:
 *
 *   header  11 bytes  version|count, offset exponent|flags, sender (u16),
 *                     sequence (u8), reference x, y (s24 each, Q10 m)
 *   count x  8 bytes  weight code (u8), dx, dy (s16, LSB 2^(e-10) m),
 *                     variance codes x, y (u8), correlation code (s8)
 *   check    2 bytes  CRC-16/KERMIT (the IEEE 802.15.4 frame check) of all before it
 *
 * So a belief of K components takes 13 + 8 K bytes (K = 4: 45 bytes).
 *
 * Quantisation is idempotent: decode(encode(b)) encodes to the same bytes,
 * and a node that broadcasts keeps exactly what its neighbours decode
 * (pfx_wire_quantise), so the air hides no extra precision.
 */
#ifndef PFX_WIRE_H
#define PFX_WIRE_H

#include "peerfix.h"

#ifdef __cplusplus
extern "C" {
#endif

/* PFX_CDEF_BEGIN */

#define PFX_WIRE_VERSION 1
#define PFX_WIRE_HEADER_BYTES 11
#define PFX_WIRE_COMPONENT_BYTES 8
#define PFX_WIRE_CHECK_BYTES 2
#define PFX_WIRE_MAX_BYTES 77          /* 11 + 8 * PFX_MAX_COMPONENTS + 2 */
#define PFX_WIRE_FLAG_ANCHOR 1          /* a surveyed point: one component, zero covariance */
#define PFX_WIRE_VAR_CODES 168          /* variance codes 0..167: 2^(c/8 - 10) m^2 */
#define PFX_WIRE_REF_LIMIT 8388607      /* |reference| <= 2^23 - 1 in Q10 m (~8.19 km) */

/* Who sent a frame and when; the estimator itself does not use these. */
typedef struct {
    uint16_t sender;
    uint8_t sequence;
    uint8_t flags;                      /* PFX_WIRE_FLAG_* */
} pfx_wire_meta_t;

/* CRC-16/KERMIT: poly x^16 + x^12 + x^5 + 1 (0x1021, reflected 0x8408), init 0,
 * input and output reflected, no final XOR: the IEEE 802.15.4 frame check sequence.
 * Bitwise, no table (flash matters more than speed for 77 bytes). */
uint16_t pfx_wire_crc16(const uint8_t *data, size_t len);

/* The variance of code `code` in Q20 m^2: round(2^(code/8 + 10)), computed from
 * eight mantissas (exact for every code); 0 for code >= PFX_WIRE_VAR_CODES. */
uint32_t pfx_wire_var_value(uint32_t code);

/* Frame size for count components (0 when count is 0 or above PFX_MAX_COMPONENTS). */
size_t pfx_wire_size(uint32_t count);

/* Encodes a belief (1..PFX_MAX_COMPONENTS components) into buf[0..cap).
 * The heaviest component goes first and carries the reference point.
 * PFX_ERR_EMPTY: count 0 (a censored belief is not sent).
 * PFX_ERR_FULL: cap too small.  PFX_ERR_RANGE: the reference is beyond
 * PFX_WIRE_REF_LIMIT or the components span more than 2^15 * 2^5 m.
 * PFX_ERR_DEGENERATE: a covariance that is not positive semi-definite.
 * PFX_ERR_ARG: NULL or count above PFX_MAX_COMPONENTS.  On error *len = 0. */
pfx_status_t pfx_wire_encode(const pfx_belief_t *belief, const pfx_wire_meta_t *meta,
                             uint8_t *buf, size_t cap, size_t *len);

/* Decodes and validates one frame of exactly len bytes.  Checks, in order:
 * version (PFX_ERR_VERSION), count, length and check sequence, then every
 * field (reserved bits, codes, anchor form) (PFX_ERR_FORMAT).  Reads only
 * buf[0..len); on error *belief is emptied (count 0) and *meta zeroed. */
pfx_status_t pfx_wire_decode(const uint8_t *buf, size_t len, pfx_belief_t *belief,
                             pfx_wire_meta_t *meta);

/* belief := decode(encode(belief)): what the neighbours will hear.
 * Same errors as pfx_wire_encode; on error the belief is unchanged. */
pfx_status_t pfx_wire_quantise(pfx_belief_t *belief);

/* PFX_CDEF_END */

#ifdef __cplusplus
}
#endif

#endif /* PFX_WIRE_H */
