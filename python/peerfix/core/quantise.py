"""Pure-Python mirror of the C fixed-point primitives (c_core/src/pfx_fixed.c).

Every function here returns the same bits as its C namesake (``clz32`` mirrors
``pfx_fixed_clz32`` and so on), using Python's unbounded integers, so tests
can predict the C output exactly and SI values can be put into Q formats the
way the core would see them.

Rounding rule, the same everywhere in the core: round to nearest, ties toward
+infinity (add half an LSB, then floor).  Python's ``>>`` is a floor shift for
negative numbers too, which is what the C code builds portably.

The lookup tables and polynomial constants of the C file are computed here
from their defining formulas with 60-digit decimal arithmetic; a test checks
that the arrays in the C source equal these.
"""

from __future__ import annotations

import math
from decimal import ROUND_FLOOR, Decimal, localcontext
from fractions import Fraction
from functools import lru_cache
from numbers import Rational

from peerfix.core import Status

INT32_MIN = -(1 << 31)
INT32_MAX = (1 << 31) - 1
UINT32_MAX = (1 << 32) - 1
INT64_MIN = -(1 << 63)
INT64_MAX = (1 << 63) - 1
UINT64_MAX = (1 << 64) - 1

LOG2_FRAC_BITS = 16  # pfx_log2_q16_t
FRAC_Q30_ONE = 1 << 30  # pfx_frac_q30_t and pfx_mant_q30_t: 1.0

# Shape of the C tables (must match pfx_fixed.c).
LOG2_TABLE_BITS = 8  # log2 table: 2^8 intervals on [1, 2), linear interpolation
LOG2_TABLE_FRAC = 24  # table entries in Q24
EXP2_TABLE_BITS = 8  # exp2 table: 2^8 steps of the Q16 fraction, polynomial for the rest
RECIP_SEED_BITS = 7  # reciprocal seed: 2^7 intervals on [0.5, 1)


# --- SI floats <-> Q formats -------------------------------------------------


def _range(bits: int, signed: bool) -> tuple[int, int]:
    if signed:
        return -(1 << (bits - 1)), (1 << (bits - 1)) - 1
    return 0, (1 << bits) - 1


def to_q(x: float | Rational, frac_bits: int, bits: int = 32, signed: bool = True) -> int:
    """x (e.g. metres) as a Q value with ``frac_bits`` fractional bits.

    Round to nearest, ties toward +infinity, on the exact binary value of x;
    saturates to the ``bits``-wide integer range (signed or unsigned).
    NaN is refused; +-inf saturate.
    """
    lo, hi = _range(bits, signed)
    if isinstance(x, float):
        if math.isnan(x):
            raise ValueError("to_q: NaN has no Q value")
        if math.isinf(x):
            return hi if x > 0 else lo
    scaled = Fraction(x) * (1 << frac_bits) if frac_bits >= 0 else Fraction(x) / (1 << -frac_bits)
    q = math.floor(scaled + Fraction(1, 2))
    return max(lo, min(hi, q))


def from_q(v: int, frac_bits: int) -> float:
    """A Q value back to a float (correctly rounded: int / int true division)."""
    return v / (1 << frac_bits) if frac_bits >= 0 else float(v * (1 << -frac_bits))


# --- rounding shifts (Python ints: >> floors) -------------------------------


def round_shift(x: int, s: int) -> int:
    """round(x / 2^s), ties toward +infinity; s >= 0."""
    return x if s == 0 else (x + (1 << (s - 1))) >> s


def sat(x: int, bits: int = 32) -> int:
    lo, hi = _range(bits, True)
    return max(lo, min(hi, x))


# --- saturation and clamps ----------------------------------------------------


def sat32(x: int) -> int:
    return sat(x, 32)


def clamp(x: int, lo: int, hi: int) -> int:
    """Same order of tests as the C: below lo -> lo, else above hi -> hi."""
    if x < lo:
        return lo
    if x > hi:
        return hi
    return x


clamp64 = clamp


def add_sat(a: int, b: int) -> int:
    return sat(a + b, 32)


def sub_sat(a: int, b: int) -> int:
    return sat(a - b, 32)


def neg_sat(a: int) -> int:
    return sat(-a, 32)


def abs_sat(a: int) -> int:
    return sat(abs(a), 32)


def add64_sat(a: int, b: int) -> int:
    return sat(a + b, 64)


def sub64_sat(a: int, b: int) -> int:
    return sat(a - b, 64)


# --- shifts ---------------------------------------------------------------------


def shr_floor(x: int, s: int) -> int:
    return x >> s


shr64_floor = shr_floor


def shr_round(x: int, s: int) -> int:
    return round_shift(x, s)


shr64_round = shr_round


def shr64_round_sat32(x: int, s: int) -> int:
    return sat(round_shift(x, s), 32)


def shl_sat(x: int, s: int) -> int:
    return sat(x << s, 32)


def shl64_sat(x: int, s: int) -> int:
    return sat(x << s, 64)


# --- multiply -------------------------------------------------------------------


def mul_wide(a: int, b: int) -> int:
    return a * b


def mul_sat(a: int, b: int, s: int) -> int:
    return sat(round_shift(a * b, s), 32)


def mac_sat(acc: int, a: int, b: int) -> int:
    return sat(acc + a * b, 64)


# --- divide ---------------------------------------------------------------------


def _round_fraction(v: Fraction) -> int:
    return math.floor(v + Fraction(1, 2))


def div_sat(a: int, b: int, s: int) -> tuple[Status, int]:
    """(status, round(a * 2^s / b)) saturated to int32; s in 0..32."""
    if s > 32:
        return Status.ERR_ARG, 0
    if b == 0:
        return Status.ERR_DOMAIN, (INT32_MAX if a > 0 else INT32_MIN if a < 0 else 0)
    q = _round_fraction(Fraction(a << s, b))
    v = sat(q, 32)
    return (Status.OK if v == q else Status.ERR_RANGE), v


def div64_sat(n: int, d: int) -> tuple[Status, int]:
    """(status, round(n / d)) saturated to int64."""
    if d == 0:
        return Status.ERR_DOMAIN, (INT64_MAX if n > 0 else INT64_MIN if n < 0 else 0)
    q = _round_fraction(Fraction(n, d))
    v = sat(q, 64)
    return (Status.OK if v == q else Status.ERR_RANGE), v


def recip(d: int) -> tuple[Status, int, int]:
    """(status, mant, shift) with 1/d = mant / 2^shift, mant = round(2^shift / d) in [2^30, 2^31)."""
    if d == 0:
        return Status.ERR_DOMAIN, 0, 0
    c = clz32(d)
    dn = d << c
    if dn == 1 << 31:
        return Status.OK, 1 << 30, 61 - c
    return Status.OK, _round_fraction(Fraction(1 << 62, dn)), 62 - c


# --- square roots ---------------------------------------------------------------


def isqrt_u32(x: int) -> int:
    return math.isqrt(x)


isqrt_u64 = isqrt_u32


def isqrt_round_u32(x: int) -> int:
    q = math.isqrt(x)
    return q + (1 if x - q * q > q else 0)


isqrt_round_u64 = isqrt_round_u32


def sqrt_q(x: int, frac_in: int, frac_out: int) -> tuple[Status, int]:
    """(status, round(sqrt(x / 2^frac_in) * 2^frac_out)); needs 0 <= 2*frac_out - frac_in <= 32."""
    k = 2 * frac_out - frac_in
    if k < 0 or k > 32:
        return Status.ERR_ARG, 0
    return Status.OK, isqrt_round_u32(x << k)  # always < 2^32 (see pfx_fixed.h)


# --- leading zeros --------------------------------------------------------------


def clz32(x: int) -> int:
    return 32 - x.bit_length()


def clz64(x: int) -> int:
    return 64 - x.bit_length()


# --- tables and constants (from their defining formulas) ---------------------

_PREC = 60  # decimal digits: far beyond the 2^-40 the tables need


def _round_decimal(v: Decimal) -> int:
    """floor(v + 1/2): round to nearest, ties toward +infinity."""
    return int((v + Decimal("0.5")).to_integral_value(rounding=ROUND_FLOOR))


@lru_cache(maxsize=None)
def log2_table() -> tuple[int, ...]:
    """round(log2(1 + k/256) * 2^24), k = 0..256."""
    n = 1 << LOG2_TABLE_BITS
    with localcontext() as ctx:
        ctx.prec = _PREC
        ln2 = Decimal(2).ln()
        return tuple(
            _round_decimal((Decimal(n + k) / n).ln() / ln2 * (1 << LOG2_TABLE_FRAC)) for k in range(n + 1)
        )


@lru_cache(maxsize=None)
def exp2_table() -> tuple[int, ...]:
    """round((2^(k/256) - 1) * 2^32), k = 0..255: the fraction above 1, Q32."""
    n = 1 << EXP2_TABLE_BITS
    with localcontext() as ctx:
        ctx.prec = _PREC
        ln2 = Decimal(2).ln()
        return tuple(_round_decimal(((ln2 * k / n).exp() - 1) * (1 << 32)) for k in range(n))


@lru_cache(maxsize=None)
def exp2_poly() -> tuple[int, int, int, int]:
    """C1..C4 of e(t) = 2^(t/65536) - 1 = sum_k (t ln2 / 2^16)^k / k!, t in 0..255.

    In the C: e56 = t*C1 + t^2*C2 + round(t^3*C3 / 2^16) + round(t^4*C4 / 2^32),
    so C1 = ln2 * 2^40, C2 = ln2^2/2 * 2^24, C3 = ln2^3/6 * 2^24, C4 = ln2^4/24 * 2^24.
    """
    with localcontext() as ctx:
        ctx.prec = _PREC
        ln2 = Decimal(2).ln()
        return (
            _round_decimal(ln2 * (1 << 40)),
            _round_decimal(ln2**2 / 2 * (1 << 24)),
            _round_decimal(ln2**3 / 6 * (1 << 24)),
            _round_decimal(ln2**4 / 24 * (1 << 24)),
        )


@lru_cache(maxsize=None)
def recip_seed_table() -> tuple[int, ...]:
    """Reciprocal seeds in Q15: round(2^15 / mid_i), mid_i = (128.5 + i) / 256, i = 0..127."""
    n = 1 << RECIP_SEED_BITS
    return tuple(_round_fraction(Fraction((1 << 15) * 4 * n, 2 * n + 1 + 2 * i)) for i in range(n))


# --- log2 -----------------------------------------------------------------------


def _log2_frac24(m: int) -> int:
    """log2(m / 2^31) in Q24 for m in [2^31, 2^32): table + linear interpolation."""
    table = log2_table()
    k = (m >> 23) & 0xFF
    r = (m >> 8) & 0x7FFF
    return table[k] + (((table[k + 1] - table[k]) * r + (1 << 14)) >> 15)


def _log2_norm(m: int, n: int) -> int:
    return (n << 16) + ((_log2_frac24(m) + 128) >> 8)


def log2_u32(x: int) -> tuple[Status, int]:
    """(status, log2(x) in Q16); x == 0 gives ERR_DOMAIN and INT32_MIN."""
    if x == 0:
        return Status.ERR_DOMAIN, INT32_MIN
    n = x.bit_length() - 1
    return Status.OK, _log2_norm(x << (31 - n), n)


def log2_u64(x: int) -> tuple[Status, int]:
    if x == 0:
        return Status.ERR_DOMAIN, INT32_MIN
    n = x.bit_length() - 1
    m = ((x << (63 - n)) >> 32) & UINT32_MAX  # top 32 bits after normalising: truncates
    return Status.OK, _log2_norm(m, n)


def log2_q(x: int, frac_bits: int) -> tuple[Status, int]:
    """(status, log2(x / 2^frac_bits) in Q16); frac_bits 0..63."""
    if frac_bits > 63:
        return Status.ERR_ARG, INT32_MIN
    st, v = log2_u32(x)
    if st != Status.OK:
        return st, v
    return Status.OK, v - (frac_bits << 16)


# --- exp2 -----------------------------------------------------------------------


def exp2_mant_q63(f: int) -> int:
    """2^(f / 65536) in Q63 for f in [0, 65536) (the C's internal mantissa)."""
    c1, c2, c3, c4 = exp2_poly()
    h = exp2_table()[f >> 8]
    t = f & 0xFF
    e56 = t * c1 + t * t * c2 + ((t**3 * c3 + (1 << 15)) >> 16) + ((t**4 * c4 + (1 << 31)) >> 32)
    e40 = (e56 + (1 << 15)) >> 16
    return (1 << 63) + (h << 31) + (e40 << 23) + ((h * e40) >> 9)


def exp2_frac_sat(x: int) -> int:
    """round(2^(x / 2^16) * 2^30) for x <= 0; x > 0 saturates to 2^30 (1.0)."""
    if x > 0:
        return FRAC_Q30_ONE
    return round_shift(exp2_mant_q63(x & 0xFFFF), 33 - (x >> 16))


def exp2_split(x: int) -> tuple[int, int]:
    """(mant, exp): 2^(x / 2^16) = mant * 2^(exp - 30), mant in [2^30, 2^31)."""
    n = x >> 16
    mant = round_shift(exp2_mant_q63(x & 0xFFFF), 33)
    if mant == 1 << 31:
        mant, n = 1 << 30, n + 1
    return mant, n


def exp2_q_sat(x: int, frac_bits: int) -> int:
    """round(2^(x / 2^16) * 2^frac_bits), saturated to INT32_MAX."""
    s = 63 - (x >> 16) - frac_bits
    if s <= 32:
        return INT32_MAX
    return min(round_shift(exp2_mant_q63(x & 0xFFFF), s), INT32_MAX)
