"""Thin checked wrappers over the C fixed-point primitives (pfx_fixed_*).

The C functions that return a status write their value through a pointer;
these wrappers allocate it, turn a status other than PFX_OK into a
CoreError, and return plain Python ints.  Functions that cannot fail are
used directly from ``lib`` (e.g. ``lib.pfx_fixed_mul_sat(a, b, s)``).
cffi itself refuses arguments that do not fit the C type (OverflowError).
"""

from __future__ import annotations

from peerfix.core import CoreError, Status
from peerfix.core._pfx import ffi, lib

__all__ = [
    "check",
    "div",
    "div64",
    "exp2_split",
    "ffi",
    "lib",
    "log2",
    "log2_q",
    "recip",
    "sqrt_q",
]


def check(status: int, what: str, allow_range: bool = False) -> None:
    """Raise CoreError unless status is PFX_OK (or PFX_ERR_RANGE when saturation is accepted)."""
    if status == Status.OK or (allow_range and status == Status.ERR_RANGE):
        return
    raise CoreError(status, what)


def div(a: int, b: int, shift: int, saturate: bool = False) -> int:
    """round(a * 2^shift / b) as int32; a saturated result raises unless ``saturate``."""
    out = ffi.new("int32_t *")
    check(lib.pfx_fixed_div_sat(a, b, shift, out), f"div({a}, {b}, {shift})", saturate)
    return int(out[0])


def div64(n: int, d: int, saturate: bool = False) -> int:
    """round(n / d) as int64."""
    out = ffi.new("int64_t *")
    check(lib.pfx_fixed_div64_sat(n, d, out), f"div64({n}, {d})", saturate)
    return int(out[0])


def recip(d: int) -> tuple[int, int]:
    """(mant, shift) with 1/d = mant / 2^shift, mant correctly rounded in [2^30, 2^31)."""
    mant = ffi.new("int32_t *")
    shift = ffi.new("unsigned *")
    check(lib.pfx_fixed_recip(d, mant, shift), f"recip({d})")
    return int(mant[0]), int(shift[0])


def sqrt_q(x: int, frac_in: int, frac_out: int) -> int:
    """round(sqrt(x / 2^frac_in) * 2^frac_out) as uint32."""
    out = ffi.new("uint32_t *")
    check(lib.pfx_fixed_sqrt_q(x, frac_in, frac_out, out), f"sqrt_q({x}, {frac_in}, {frac_out})")
    return int(out[0])


def log2(x: int) -> int:
    """log2(x) in Q16 for an integer 0 < x < 2^64."""
    out = ffi.new("int32_t *")
    check(lib.pfx_fixed_log2_u64(x, out), f"log2({x})")
    return int(out[0])


def log2_q(x: int, frac_bits: int) -> int:
    """log2(x / 2^frac_bits) in Q16 for a uint32 Q value x > 0."""
    out = ffi.new("int32_t *")
    check(lib.pfx_fixed_log2_q(x, frac_bits, out), f"log2_q({x}, {frac_bits})")
    return int(out[0])


def exp2_split(x_q16: int) -> tuple[int, int]:
    """(mant, exponent): 2^(x_q16 / 2^16) = mant * 2^(exponent - 30), mant in [2^30, 2^31)."""
    mant = ffi.new("int32_t *")
    exponent = ffi.new("int32_t *")
    check(lib.pfx_fixed_exp2_split(x_q16, mant, exponent), f"exp2_split({x_q16})")
    return int(mant[0]), int(exponent[0])
