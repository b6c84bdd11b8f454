"""Python mirror of the air format (c_core/src/pfx_wire.c), bit for bit.

Beliefs here are lists of integer components in the core's Q formats:
(log2w Q16, x Q10, y Q10, pxx Q20, pxy Q20, pyy Q20).  Tools and tests use
this to build, read and mutate frames without the compiled core; the tests
check that it and the C code agree on every byte.  Layout: docs/wire-format.md.
"""

from __future__ import annotations

import struct
from dataclasses import dataclass
from decimal import ROUND_HALF_UP, Decimal, localcontext
from functools import lru_cache

from . import Status
from .quantise import div_sat, isqrt_round_u64, round_shift

VERSION = 1
HEADER_BYTES = 11
COMPONENT_BYTES = 8
CHECK_BYTES = 2
MAX_COMPONENTS = 8  # PFX_MAX_COMPONENTS
VAR_CODES = 168
REF_LIMIT = (1 << 23) - 1
OFFSET_MAX = 32767
FLAG_ANCHOR = 1
WEIGHT_STEP_SHIFT = 12


@dataclass(frozen=True)
class Meta:
    sender: int = 0
    sequence: int = 0
    flags: int = 0


class WireError(Exception):
    def __init__(self, status: Status, why: str):
        self.status = status
        super().__init__(f"{status.name}: {why}")


def frame_size(count: int) -> int:
    """Bytes of a frame with count components: 13 + 8 count."""
    if not 1 <= count <= MAX_COMPONENTS:
        return 0
    return HEADER_BYTES + COMPONENT_BYTES * count + CHECK_BYTES


@lru_cache(maxsize=1)
def variance_table() -> tuple[int, ...]:
    """D[c] = round(2^(c/8 + 10)), c = 0..167 (Q20 m^2), from 60-digit decimals."""
    out = []
    with localcontext() as ctx:
        ctx.prec = 60
        for c in range(VAR_CODES):
            v = Decimal(2) ** (Decimal(c) / 8 + 10)
            out.append(int(v.quantize(Decimal(1), rounding=ROUND_HALF_UP)))
    return tuple(out)


def crc16_kermit(data: bytes) -> int:
    """CRC-16/KERMIT (IEEE 802.15.4 frame check): poly 0x1021 reflected, init 0, no xorout."""
    crc = 0
    for byte in data:
        crc ^= byte
        for _ in range(8):
            crc = (crc >> 1) ^ 0x8408 if crc & 1 else crc >> 1
    return crc


def var_code(v: int) -> int:
    table = variance_table()
    if v <= table[0]:
        return 0
    lo, hi = 0, VAR_CODES - 1
    while lo < hi:
        mid = (lo + hi + 1) // 2
        if table[mid] <= v:
            lo = mid
        else:
            hi = mid - 1
    c = lo
    if c + 1 < VAR_CODES and v * v >= table[c] * table[c + 1]:
        c += 1
    return c


def corr_scale(cx: int, cy: int) -> int:
    t = variance_table()
    return isqrt_round_u64(t[cx] * t[cy])


def encode(components: list[tuple[int, int, int, int, int, int]], meta: Meta = Meta()) -> bytes:
    n = len(components)
    if n == 0:
        raise WireError(Status.ERR_EMPTY, "a censored belief is not sent")
    if n > MAX_COMPONENTS or meta.flags & ~FLAG_ANCHOR or (meta.flags & FLAG_ANCHOR and n != 1):
        raise WireError(Status.ERR_ARG, "bad count or flags")
    h = max(range(n), key=lambda k: (components[k][0], -k))
    for w, x, y, pxx, pxy, pyy in components:
        if pxx < 0 or pyy < 0 or pxx * pyy < pxy * pxy:
            raise WireError(Status.ERR_DEGENERATE, "covariance not positive semi-definite")
    _, xr, yr = components[h][:3]
    if abs(xr) > REF_LIMIT or abs(yr) > REF_LIMIT:
        raise WireError(Status.ERR_RANGE, "reference beyond the format's reach")
    for e in range(16):
        if all(
            abs(round_shift(c[1] - xr, e)) <= OFFSET_MAX and abs(round_shift(c[2] - yr, e)) <= OFFSET_MAX
            for c in components
        ):
            break
    else:
        raise WireError(Status.ERR_RANGE, "components span too far")
    anchor = bool(meta.flags & FLAG_ANCHOR)
    out = bytearray()
    out.append((VERSION << 4) | n)
    out.append((e << 4) | (meta.flags & 0x0F))
    out += struct.pack("<HB", meta.sender, meta.sequence)
    out += xr.to_bytes(3, "little", signed=True) + yr.to_bytes(3, "little", signed=True)
    order = [h] + [k for k in range(n) if k != h]
    for k in order:
        w, x, y, pxx, pxy, pyy = components[k]
        wcode = min(255, round_shift(components[h][0] - w, WEIGHT_STEP_SHIFT))
        cx = cy = rho = 0
        if not anchor:
            cx, cy = var_code(pxx), var_code(pyy)
            _, q = div_sat(pxy, corr_scale(cx, cy), 7)
            rho = max(-127, min(127, q))
        out.append(wcode)
        out += struct.pack("<hh", round_shift(x - xr, e), round_shift(y - yr, e))
        out += struct.pack("<BBb", cx, cy, rho)
    out += struct.pack("<H", crc16_kermit(bytes(out)))
    return bytes(out)


def decode(frame: bytes) -> tuple[list[tuple[int, int, int, int, int, int]], Meta]:
    """Validate and decode one frame; raises WireError with the status the C decoder returns."""
    if len(frame) < 1:
        raise WireError(Status.ERR_FORMAT, "empty frame")
    if frame[0] >> 4 != VERSION:
        raise WireError(Status.ERR_VERSION, f"version {frame[0] >> 4}")
    n = frame[0] & 0x0F
    if not 1 <= n <= MAX_COMPONENTS or len(frame) != frame_size(n):
        raise WireError(Status.ERR_FORMAT, "count or length")
    if crc16_kermit(frame[:-2]) != struct.unpack_from("<H", frame, len(frame) - 2)[0]:
        raise WireError(Status.ERR_FORMAT, "check sequence")
    e, flags = frame[1] >> 4, frame[1] & 0x0F
    if flags & ~FLAG_ANCHOR or (flags & FLAG_ANCHOR and n != 1):
        raise WireError(Status.ERR_FORMAT, "flags")
    sender, sequence = struct.unpack_from("<HB", frame, 2)
    xr = int.from_bytes(frame[5:8], "little", signed=True)
    yr = int.from_bytes(frame[8:11], "little", signed=True)
    if xr < -REF_LIMIT or yr < -REF_LIMIT:
        raise WireError(Status.ERR_FORMAT, "reference")
    offsets = [struct.unpack_from("<hh", frame, HEADER_BYTES + COMPONENT_BYTES * k + 1) for k in range(n)]
    if e > 0 and all(abs(v) <= OFFSET_MAX // 2 for pair in offsets for v in pair):
        raise WireError(Status.ERR_FORMAT, "offset exponent larger than needed")
    table = variance_table()
    comps = []
    for k in range(n):
        p = HEADER_BYTES + COMPONENT_BYTES * k
        wcode = frame[p]
        dx, dy = struct.unpack_from("<hh", frame, p + 1)
        cx, cy, rho = struct.unpack_from("<BBb", frame, p + 5)
        if (
            dx < -OFFSET_MAX
            or dy < -OFFSET_MAX
            or cx >= VAR_CODES
            or cy >= VAR_CODES
            or rho < -127
            or (k == 0 and (wcode or dx or dy))
            or (flags & FLAG_ANCHOR and (cx or cy or rho))
        ):
            raise WireError(Status.ERR_FORMAT, f"component {k}")
        x, y = xr + dx * (1 << e), yr + dy * (1 << e)
        if flags & FLAG_ANCHOR:
            pxx = pxy = pyy = 0
        else:
            pxx, pyy = table[cx], table[cy]
            pxy = round_shift(rho * corr_scale(cx, cy), 7)
        comps.append((-wcode * (1 << WEIGHT_STEP_SHIFT), x, y, pxx, pxy, pyy))
    return comps, Meta(sender, sequence, flags)


def quantise(components):
    """What the neighbours hear: decode(encode(components))."""
    return decode(encode(components))[0]


__all__ = ["Meta", "WireError", "crc16_kermit", "decode", "encode", "frame_size", "quantise", "variance_table"]
