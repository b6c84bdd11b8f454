"""Call one core function on the host (cffi) and in the emulator with the
same integer arguments, for the bit-exactness tests.

Pointer parameters to a primitive (``int32_t *``, ``unsigned *``, ...) are
out-parameters: each side gets a buffer pre-filled with the same sentinel,
and the value left in it is part of the result.
"""

from __future__ import annotations

import random

from peerfix.budget.emulator import Emulator, cffi_signature
from peerfix.core._pfx import ffi, lib

SENTINEL = 0x5A


def _int_info(ct) -> tuple[int, bool]:
    if ct.kind == "enum":
        return 4, True
    size = ffi.sizeof(ct)
    return size, int(ffi.cast(ct, -1)) < 0


def _edge_values(bits: int, signed: bool) -> list[int]:
    if signed:
        lo, hi = -(1 << (bits - 1)), (1 << (bits - 1)) - 1
        return [0, 1, -1, 2, -2, lo, hi, lo + 1, hi - 1, 1 << (bits - 2), -(1 << (bits - 2))]
    return [0, 1, 2, 3, (1 << bits) - 1, (1 << bits) - 2, 1 << (bits - 1), (1 << (bits - 1)) - 1]


def random_value(rng: random.Random, ct) -> int:
    """A value of the integer type ct: edge values, shift-like small counts for
    ``unsigned int`` (the core's shift and format parameters), otherwise a
    random magnitude (uniform bit length, then uniform value) and sign."""
    size, signed = _int_info(ct)
    bits = 8 * size
    if ct.cname == "unsigned int" and rng.random() < 0.9:
        return rng.randrange(0, 73)
    if rng.random() < 0.1:
        return rng.choice(_edge_values(bits, signed))
    width = rng.randrange(0, bits + 1)
    v = rng.getrandbits(width) if width else 0
    if signed:
        v = -v if rng.random() < 0.5 else v
        v = max(-(1 << (bits - 1)), min((1 << (bits - 1)) - 1, v))
    return v


def random_args(rng: random.Random, name: str) -> list[int]:
    """Random scalar arguments for ``name`` (out-pointers are not arguments here)."""
    return [random_value(rng, ct) for ct in ffi.typeof(getattr(lib, name)).args if ct.kind != "pointer"]


def host_call(name: str, scalars: list[int]) -> tuple[int, list[int]]:
    fn = getattr(lib, name)
    args, outs = [], []
    it = iter(scalars)
    for ct in ffi.typeof(fn).args:
        if ct.kind == "pointer":
            p = ffi.new(ct)
            ffi.memmove(p, bytes([SENTINEL]) * ffi.sizeof(ct.item), ffi.sizeof(ct.item))
            args.append(p)
            outs.append(p)
        else:
            args.append(next(it))
    ret = fn(*args)
    return (0 if ret is None else int(ret)), [int(p[0]) for p in outs]


def target_call(em: Emulator, name: str, scalars: list[int]):
    """(return value, out values, CallResult) of the emulated call."""
    fn = getattr(lib, name)
    argtypes, restype = cffi_signature(ffi, fn)
    em.reset_scratch()
    args, outs = [], []
    it = iter(scalars)
    for ct in ffi.typeof(fn).args:
        if ct.kind == "pointer":
            size = ffi.sizeof(ct.item)
            addr = em.alloc_bytes(bytes([SENTINEL]) * size)
            args.append(addr)
            outs.append((addr, ct.item))
        else:
            args.append(next(it))
    res = em.call(name, *args, argtypes=argtypes, restype=restype)
    values = []
    for addr, item in outs:
        size, signed = _int_info(item)
        values.append(int.from_bytes(em.read(addr, size), "little", signed=signed))
    return res.value, values, res
