/*
 * pfx_wire.c - belief messages on the air: encode, decode, check sequence.
 *
 * Layout and rules: pfx_wire.h and docs/wire-format.md.  Every quantiser here
 * is exact and idempotent (decode then encode gives back the same bytes):
 *   - weights:   code = round((log2w_max - log2w) * 16), 0..255 (1/16 bit steps);
 *   - offsets:   round(d / 2^e) with the smallest e that keeps |o| <= 32767;
 *   - variances: the nearest (in log) of 168 table values 2^(c/8 - 10) m^2,
 *                nearest decided exactly by comparing v^2 with D[c] * D[c+1];
 *   - correlation: code = round(128 * pxy / s), s = round(sqrt(D[cx] D[cy])),
 *                |code| <= 127, so a decoded covariance is always positive definite.
 * A variance floor of 2^-10 m^2 (3.1 cm standard deviation) keeps s >= 1024 LSB,
 * which is what makes the correlation code idempotent (rounding moves it by at
 * most 64 / s < 0.07 of a code).
 */
#include <string.h>

#include "peerfix.h"

/* Variance code c in Q20 m^2: D[c] = round(2^(c/8 + 10)) (2^(c/8 - 10) m^2), from
 * eight words W[j] = floor(round(2^(j/8) * 2^36) / 2^5) (tools/gen_wire_table.py,
 * which proves the formula of pfx_wire_var_value exact for every code;
 * tests/core checks the C function against exact arithmetic). */
/* PFX_WIRE_TABLE_BEGIN */
static const uint32_t k_var_words[8] = {
    2147483648u, 2341847523u, 2553802833u, 2784941737u, 3037000499u, 3311872529u, 3611622602u, 3938502375u
};
/* PFX_WIRE_TABLE_END */

/* c = 8 o + j: D[c] = (W[j] + 2^(s-1)) >> s, s = 21 - o in 1..21; W[j] + 2^20 < 2^32.
 * Out of line: its six call sites would copy it for 260 B of flash, against
 * about 100 cycles a frame (measured with peerfix budget --against). */
PFX_NOINLINE uint32_t pfx_wire_var_value(uint32_t code)
{
    unsigned s;
    if (code >= PFX_WIRE_VAR_CODES) {
        return 0u;
    }
    s = 21u - code / 8u;
    return (k_var_words[code % 8u] + (UINT32_C(1) << (s - 1u))) >> s;
}

#define WEIGHT_STEP_SHIFT 12 /* one weight code = 1/16 bit = 2^12 LSB of Q16 */
#define OFFSET_MAX 32767

static void put_u16(uint8_t *p, uint32_t v)
{
    p[0] = (uint8_t)(v & 0xFFu);
    p[1] = (uint8_t)((v >> 8) & 0xFFu);
}

static uint32_t get_u16(const uint8_t *p)
{
    return (uint32_t)p[0] | ((uint32_t)p[1] << 8);
}

/* Two's complement bytes of a value in [-2^(8n-1), 2^(8n-1)), built from unsigned arithmetic. */
static void put_signed(uint8_t *p, int32_t v, unsigned n)
{
    uint32_t u = (uint32_t)v; /* well defined: modulo 2^32 */
    unsigned i;
    for (i = 0; i < n; i++) {
        p[i] = (uint8_t)(u & 0xFFu);
        u >>= 8;
    }
}

static int32_t get_signed(const uint8_t *p, unsigned n)
{
    uint32_t u = 0;
    unsigned i;
    uint32_t sign;
    for (i = 0; i < n; i++) {
        u |= (uint32_t)p[i] << (8u * i);
    }
    sign = (uint32_t)1 << (8u * n - 1u);
    /* (u ^ sign) - sign, in int32 without overflow: u < 2^(8n) <= 2^24 here. */
    return (int32_t)(u ^ sign) - (int32_t)sign;
}

uint16_t pfx_wire_crc16(const uint8_t *data, size_t len)
{
    uint32_t crc = 0;
    size_t i;
    unsigned bit;
    if (data == NULL) {
        return 0;
    }
    for (i = 0; i < len; i++) {
        crc ^= data[i];
        for (bit = 0; bit < 8; bit++) {
            crc = (crc & 1u) ? ((crc >> 1) ^ 0x8408u) : (crc >> 1);
        }
    }
    return (uint16_t)crc;
}

size_t pfx_wire_size(uint32_t count)
{
    if (count == 0 || count > PFX_MAX_COMPONENTS) {
        return 0;
    }
    return (size_t)PFX_WIRE_HEADER_BYTES + (size_t)PFX_WIRE_COMPONENT_BYTES * count + PFX_WIRE_CHECK_BYTES;
}

/* Nearest variance code (in log) to v (Q20 m^2), exact: v below the table -> 0.
 * D[8 o] = 2^(o + 10) exactly, so with b = floor(log2 v) the largest code with
 * D[c] <= v lies in octave o = b - 10 (b <= 30: o <= 20, the last octave). */
static uint32_t var_code(int32_t v)
{
    uint32_t lo, hi, c;
    uint64_t v2;
    if (v <= (INT32_C(1) << 10)) { /* D[0] */
        return 0;
    }
    lo = 8u * (31u - pfx_fixed_clz32_inline((uint32_t)v) - 10u);
    hi = lo + 7u;
    /* largest c with D[c] <= v */
    while (lo < hi) {
        uint32_t mid = (lo + hi + 1u) / 2u;
        if (pfx_wire_var_value(mid) <= (uint32_t)v) {
            lo = mid;
        } else {
            hi = mid - 1u;
        }
    }
    c = lo;
    /* v^2 < 2^62 and D[c] D[c+1] < 2^62: exact in uint64 */
    v2 = (uint64_t)(uint32_t)v * (uint64_t)(uint32_t)v;
    if (c + 1u < PFX_WIRE_VAR_CODES &&
        v2 >= (uint64_t)pfx_wire_var_value(c) * (uint64_t)pfx_wire_var_value(c + 1u)) {
        c++;
    }
    return c;
}

/* s = round(sqrt(D[cx] D[cy])) in Q20 from the two variances: the scale of the correlation code. */
static int32_t corr_scale(uint32_t vx, uint32_t vy)
{
    uint64_t s = pfx_fixed_isqrt_round_u64((uint64_t)vx * vy);
    return (int32_t)s; /* <= D[167] < 2^31 */
}

static int psd(const pfx_component_t *c)
{
    if (c->pxx < 0 || c->pyy < 0) {
        return 0;
    }
    return (int64_t)c->pxx * c->pyy >= (int64_t)c->pxy * c->pxy;
}

pfx_status_t pfx_wire_encode(const pfx_belief_t *belief, const pfx_wire_meta_t *meta,
                             uint8_t *buf, size_t cap, size_t *len)
{
    uint32_t n, k, h, slot, e;
    int anchor;
    size_t size;
    int32_t xr, yr;
    if (len != NULL) {
        *len = 0;
    }
    if (belief == NULL || meta == NULL || buf == NULL || len == NULL || belief->count > PFX_MAX_COMPONENTS) {
        return PFX_ERR_ARG;
    }
    n = belief->count;
    if (n == 0) {
        return PFX_ERR_EMPTY;
    }
    if ((meta->flags & ~(uint32_t)PFX_WIRE_FLAG_ANCHOR) != 0) {
        return PFX_ERR_ARG;
    }
    anchor = (meta->flags & PFX_WIRE_FLAG_ANCHOR) != 0;
    if (anchor && n != 1) {
        return PFX_ERR_ARG;
    }
    size = pfx_wire_size(n);
    if (cap < size) {
        return PFX_ERR_FULL;
    }
    /* the heaviest (first of equals) carries the reference and goes first */
    h = 0;
    for (k = 1; k < n; k++) {
        if (belief->comp[k].log2w > belief->comp[h].log2w) {
            h = k;
        }
    }
    for (k = 0; k < n; k++) {
        if (!psd(&belief->comp[k])) {
            return PFX_ERR_DEGENERATE;
        }
    }
    xr = belief->comp[h].x;
    yr = belief->comp[h].y;
    if (xr > PFX_WIRE_REF_LIMIT || xr < -PFX_WIRE_REF_LIMIT || yr > PFX_WIRE_REF_LIMIT || yr < -PFX_WIRE_REF_LIMIT) {
        return PFX_ERR_RANGE;
    }
    /* smallest offset exponent that fits every component */
    for (e = 0; e < 16u; e++) {
        int fits = 1;
        for (k = 0; k < n && fits; k++) {
            int64_t dx = pfx_fixed_shr64_round((int64_t)belief->comp[k].x - xr, e);
            int64_t dy = pfx_fixed_shr64_round((int64_t)belief->comp[k].y - yr, e);
            fits = dx <= OFFSET_MAX && dx >= -OFFSET_MAX && dy <= OFFSET_MAX && dy >= -OFFSET_MAX;
        }
        if (fits) {
            break;
        }
    }
    if (e == 16u) {
        return PFX_ERR_RANGE;
    }

    buf[0] = (uint8_t)((PFX_WIRE_VERSION << 4) | n);
    buf[1] = (uint8_t)((e << 4) | (meta->flags & 0x0Fu));
    put_u16(buf + 2, meta->sender);
    buf[4] = meta->sequence;
    put_signed(buf + 5, xr, 3);
    put_signed(buf + 8, yr, 3);
    for (slot = 0; slot < n; slot++) {
        /* slot 0: the heaviest; then the others in their order */
        uint32_t idx = slot == 0 ? h : (slot <= h ? slot - 1u : slot);
        const pfx_component_t *c = &belief->comp[idx];
        uint8_t *p = buf + PFX_WIRE_HEADER_BYTES + (size_t)PFX_WIRE_COMPONENT_BYTES * slot;
        /* diff >= 0 and < 2^32: int64 */
        int64_t diff = (int64_t)belief->comp[h].log2w - c->log2w;
        int64_t wcode = pfx_fixed_shr64_round(diff, WEIGHT_STEP_SHIFT);
        uint32_t cx = 0, cy = 0;
        int32_t rho = 0;
        p[0] = (uint8_t)(wcode > 255 ? 255 : wcode);
        put_signed(p + 1, (int32_t)pfx_fixed_shr64_round((int64_t)c->x - xr, e), 2);
        put_signed(p + 3, (int32_t)pfx_fixed_shr64_round((int64_t)c->y - yr, e), 2);
        if (!anchor) {
            int32_t s, q;
            cx = var_code(c->pxx);
            cy = var_code(c->pyy);
            s = corr_scale(pfx_wire_var_value(cx), pfx_wire_var_value(cy));
            (void)pfx_fixed_div_sat(c->pxy, s, 7, &q); /* s >= 1024: no domain error; range saturates */
            rho = pfx_fixed_clamp(q, -127, 127);
        }
        p[5] = (uint8_t)cx;
        p[6] = (uint8_t)cy;
        put_signed(p + 7, rho, 1);
    }
    put_u16(buf + size - 2u, pfx_wire_crc16(buf, size - 2u));
    *len = size;
    return PFX_OK;
}

pfx_status_t pfx_wire_decode(const uint8_t *buf, size_t len, pfx_belief_t *belief, pfx_wire_meta_t *meta)
{
    uint32_t n, k, e, flags;
    int32_t xr, yr;
    if (belief != NULL) {
        belief->count = 0;
    }
    if (meta != NULL) {
        memset(meta, 0, sizeof *meta);
    }
    if (buf == NULL || belief == NULL || meta == NULL) {
        return PFX_ERR_ARG;
    }
    if (len < 1u) {
        return PFX_ERR_FORMAT;
    }
    if ((uint32_t)(buf[0] >> 4) != PFX_WIRE_VERSION) {
        return PFX_ERR_VERSION;
    }
    n = buf[0] & 0x0Fu;
    if (n == 0 || n > PFX_MAX_COMPONENTS || len != pfx_wire_size(n)) {
        return PFX_ERR_FORMAT;
    }
    if (pfx_wire_crc16(buf, len - 2u) != get_u16(buf + len - 2u)) {
        return PFX_ERR_FORMAT;
    }
    e = (uint32_t)buf[1] >> 4;
    flags = buf[1] & 0x0Fu;
    if ((flags & ~(uint32_t)PFX_WIRE_FLAG_ANCHOR) != 0 || ((flags & PFX_WIRE_FLAG_ANCHOR) && n != 1)) {
        return PFX_ERR_FORMAT;
    }
    xr = get_signed(buf + 5, 3);
    yr = get_signed(buf + 8, 3);
    if (xr < -PFX_WIRE_REF_LIMIT || yr < -PFX_WIRE_REF_LIMIT) {
        return PFX_ERR_FORMAT;
    }
    if (e > 0) {
        /* canonical exponent: the smallest that fits, so some offset needs it */
        int needed = 0;
        for (k = 0; k < n && !needed; k++) {
            const uint8_t *p = buf + PFX_WIRE_HEADER_BYTES + (size_t)PFX_WIRE_COMPONENT_BYTES * k;
            int32_t dx = get_signed(p + 1, 2), dy = get_signed(p + 3, 2);
            needed = dx > OFFSET_MAX / 2 || dx < -(OFFSET_MAX / 2) || dy > OFFSET_MAX / 2 || dy < -(OFFSET_MAX / 2);
        }
        if (!needed) {
            return PFX_ERR_FORMAT;
        }
    }
    for (k = 0; k < n; k++) {
        const uint8_t *p = buf + PFX_WIRE_HEADER_BYTES + (size_t)PFX_WIRE_COMPONENT_BYTES * k;
        pfx_component_t *c = &belief->comp[k];
        int32_t dx = get_signed(p + 1, 2), dy = get_signed(p + 3, 2);
        uint32_t cx = p[5], cy = p[6];
        int32_t rho = get_signed(p + 7, 1);
        if (dx < -OFFSET_MAX || dy < -OFFSET_MAX || cx >= PFX_WIRE_VAR_CODES || cy >= PFX_WIRE_VAR_CODES || rho < -127 ||
            (k == 0 && (p[0] != 0 || dx != 0 || dy != 0)) ||
            ((flags & PFX_WIRE_FLAG_ANCHOR) && (cx != 0 || cy != 0 || rho != 0))) {
            belief->count = 0;
            memset(meta, 0, sizeof *meta);
            return PFX_ERR_FORMAT;
        }
        c->log2w = -(int32_t)p[0] * (1 << WEIGHT_STEP_SHIFT);
        /* |d * 2^e| <= 32767 * 2^15 < 2^30 and |ref| < 2^23: the sum fits int32 */
        c->x = xr + dx * (int32_t)(1u << e);
        c->y = yr + dy * (int32_t)(1u << e);
        if (flags & PFX_WIRE_FLAG_ANCHOR) {
            c->pxx = c->pxy = c->pyy = 0;
        } else {
            uint32_t vx = pfx_wire_var_value(cx), vy = pfx_wire_var_value(cy);
            int32_t s = corr_scale(vx, vy);
            c->pxx = (int32_t)vx;
            c->pyy = (int32_t)vy;
            c->pxy = (int32_t)pfx_fixed_shr64_round((int64_t)rho * s, 7);
        }
    }
    belief->count = n;
    meta->sender = (uint16_t)get_u16(buf + 2);
    meta->sequence = buf[4];
    meta->flags = (uint8_t)flags;
    return PFX_OK;
}

pfx_status_t pfx_wire_quantise(pfx_belief_t *belief)
{
    uint8_t frame[PFX_WIRE_MAX_BYTES];
    size_t len;
    pfx_wire_meta_t meta = {0, 0, 0};
    pfx_status_t st;
    if (belief == NULL) {
        return PFX_ERR_ARG;
    }
    st = pfx_wire_encode(belief, &meta, frame, sizeof frame, &len);
    if (st != PFX_OK) {
        return st;
    }
    return pfx_wire_decode(frame, len, belief, &meta);
}
