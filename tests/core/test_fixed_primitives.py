"""Fixed-point primitives of the C core (through cffi) against exact arithmetic.

References are Python integers and fractions.Fraction (exact), or float64
where a primitive is an approximation (log2, exp2): the float64 reference is
itself within ~1e-6 LSB of the exact value here, far below the bounds.
Every C result is also checked bit for bit against peerfix.core.quantise.
"""

from __future__ import annotations

import math
import re
import subprocess
from fractions import Fraction
from pathlib import Path

import numpy as np
import pytest
from hypothesis import example, given
from hypothesis import strategies as st

from peerfix.core import CoreError, Status, fixed
from peerfix.core import quantise as q
from peerfix.core._build import read_cdef
from peerfix.core._pfx import ffi, lib

# Paths from the test tree, so the suite also runs against an installed copy
# of the package (tools/sanitize.sh).
ROOT = Path(__file__).resolve().parents[2]
C_SOURCE = ROOT / "c_core" / "src" / "pfx_fixed.c"
PUBLIC_HEADER = ROOT / "c_core" / "include" / "peerfix.h"
FIXED_HEADER = ROOT / "c_core" / "include" / "pfx_fixed.h"

# --- tolerances, in LSB of the output ---------------------------------------
# log2 (Q16): analytic bound 0.70 = interpolation h^2/8*max|f''| (0.18) + table
# and truncation (< 0.02) + final rounding (0.5).  Exhaustive sweep of every
# 32-bit mantissa (measure_bounds.c): worst 0.6889 LSB at x = 2151500543.
LOG2_BOUND_LSB = 0.70
# exp2_frac_sat (Q30, x <= 0): exhaustive over x in [-33, 0] (every nonzero
# output): worst 0.5611 LSB at x = -55494 (Q16).  Bound used: 0.57.
EXP2_FRAC_BOUND_LSB = 0.57
# exp2_split mantissa (Q30 in [1, 2)): exhaustive over all 65536 fractions:
# worst 0.6227 LSB at x = 10091.  Bound used: 0.63 (exp2_q_sat: same worst).
EXP2_SPLIT_BOUND_LSB = 0.63
# x / d through the reciprocal: 0.5 (final rounding) + |x| * 0.5 * 2^-shift.
RECIP_DIVIDE_BOUND_LSB = 0.75

i32 = st.integers(q.INT32_MIN, q.INT32_MAX)
i64 = st.integers(q.INT64_MIN, q.INT64_MAX)
u32 = st.integers(0, q.UINT32_MAX)
u64 = st.integers(0, q.UINT64_MAX)
u32_pos = st.integers(1, q.UINT32_MAX)
u64_pos = st.integers(1, q.UINT64_MAX)
shift = st.integers(0, 70)
# Arguments near the edges are where wrap-around would show.
i32_edgy = st.one_of(i32, st.sampled_from([q.INT32_MIN, q.INT32_MIN + 1, -1, 0, 1, q.INT32_MAX - 1, q.INT32_MAX]))
i64_edgy = st.one_of(i64, st.sampled_from([q.INT64_MIN, q.INT64_MIN + 1, -1, 0, 1, q.INT64_MAX - 1, q.INT64_MAX]))


def exact_round(v: Fraction) -> int:
    """Round to nearest, ties toward +infinity: the rule of the whole core."""
    return math.floor(v + Fraction(1, 2))


def clamp_bits(v: int, bits: int) -> int:
    return max(-(1 << (bits - 1)), min((1 << (bits - 1)) - 1, v))


def c_out(fn, ctype: str, *args):
    out = ffi.new(ctype + " *")
    status = fn(*args, out)
    return int(status), int(out[0])


# --- header, source and mirror stay in step ----------------------------------


def test_status_codes_match_header():
    for member in Status:
        assert getattr(lib, "PFX_" + member.name) == member.value
    declared = set(re.findall(r"\b(PFX_(?:OK|ERR_\w+))\s*=", PUBLIC_HEADER.read_text()))
    assert declared == {"PFX_" + m.name for m in Status}


def test_cdef_follows_the_public_header_into_module_headers():
    cdef = read_cdef(PUBLIC_HEADER)
    assert "} pfx_status_t;" in cdef
    own_block = FIXED_HEADER.read_text().split("/* PFX_CDEF_BEGIN */")[1].split("/* PFX_CDEF_END */")[0]
    assert own_block.strip() in cdef
    assert cdef.index("} pfx_status_t;") < cdef.index("pfx_fixed_clz32")  # include order kept
    assert "#include" not in cdef and "PFX_CDEF" not in cdef


def test_every_header_prototype_is_defined_in_source_and_bound():
    declared = set(re.findall(r"\b(pfx_fixed_\w+)\s*\(", read_cdef(FIXED_HEADER)))
    defined = set(re.findall(r"^[a-z][\w ]*?\b(pfx_fixed_\w+)\(", C_SOURCE.read_text(), re.M))
    assert declared and declared == defined
    for name in declared:
        assert callable(getattr(lib, name))


def _c_array(name: str) -> list[int]:
    body = re.search(name + r"\[\d+\] = \{(.*?)\};", C_SOURCE.read_text(), re.S)
    assert body, name
    return [int(tok.rstrip("uU"), 0) for tok in re.findall(r"0x[0-9A-Fa-f]+u|\d+u", body.group(1))]


def test_rsqrt_line_seeds_are_within_their_stated_error():
    # k_rsqrt_line_q30 is a fitted table (not generated): the 64-bit square root
    # needs only its bound, relative error below 2^-7 of y = 2^30 / sqrt(m / 2^32)
    # on each eighth m >> 29 = 2..7.  Evaluated on 2^16 + 1 points of each piece
    # (a line against a convex curve: the extremes are at the ends or one
    # interior point, which the grid resolves to far below the bound).
    import numpy as np

    body = re.search(r"k_rsqrt_line_q30\[6\]\[2\] = \{(.*?)\};", C_SOURCE.read_text(), re.S)
    assert body
    vals = [int(t.rstrip("uU")) for t in re.findall(r"\d+u", body.group(1))]
    assert len(vals) == 12
    for k in range(2, 8):
        a, b = vals[2 * (k - 2)], vals[2 * (k - 2) + 1]
        m = np.linspace(k * 2**29, (k + 1) * 2**29 - 1, 2**16 + 1)
        seed = a - np.floor(b * m / 2**32)
        exact = 2**30 / np.sqrt(m / 2**32)
        assert np.max(np.abs(seed / exact - 1.0)) < 2**-7, k


def test_c_tables_equal_their_defining_formulas():
    assert _c_array("k_log2_table_q24") == list(q.log2_table())
    assert _c_array("k_exp2_table_q32") == list(q.exp2_table())
    assert _c_array("k_recip_seed_q15") == list(q.recip_seed_table())
    src = C_SOURCE.read_text()
    for k, value in enumerate(q.exp2_poly(), start=1):
        assert f"#define PFX_EXP2_C{k} UINT64_C({value})" in src
    # Spot values from the formulas (float64, independent of the decimal code).
    assert q.log2_table()[128] == round(math.log2(1.5) * 2**24)
    assert q.exp2_table()[128] == round((math.sqrt(2) - 1) * 2**32)


# --- leading zeros -------------------------------------------------------------


@given(u32)
@example(0)
@example(1)
@example(q.UINT32_MAX)
def test_clz32(x):
    assert lib.pfx_fixed_clz32(x) == 32 - x.bit_length() == q.clz32(x)


@given(u64)
@example(0)
@example(1 << 32)
@example((1 << 32) - 1)
@example(q.UINT64_MAX)
def test_clz64(x):
    assert lib.pfx_fixed_clz64(x) == 64 - x.bit_length() == q.clz64(x)


# --- saturation -------------------------------------------------------------------


@given(i32_edgy, i32_edgy)
def test_add_sub_saturate_never_wrap(a, b):
    assert lib.pfx_fixed_add_sat(a, b) == clamp_bits(a + b, 32) == q.add_sat(a, b)
    assert lib.pfx_fixed_sub_sat(a, b) == clamp_bits(a - b, 32) == q.sub_sat(a, b)


def test_saturation_at_both_ends():
    assert lib.pfx_fixed_add_sat(q.INT32_MAX, 1) == q.INT32_MAX
    assert lib.pfx_fixed_add_sat(q.INT32_MIN, -1) == q.INT32_MIN
    assert lib.pfx_fixed_sub_sat(q.INT32_MIN, 1) == q.INT32_MIN
    assert lib.pfx_fixed_sub_sat(0, q.INT32_MIN) == q.INT32_MAX
    assert lib.pfx_fixed_neg_sat(q.INT32_MIN) == q.INT32_MAX
    assert lib.pfx_fixed_abs_sat(q.INT32_MIN) == q.INT32_MAX
    assert lib.pfx_fixed_sat32(q.INT64_MAX) == q.INT32_MAX
    assert lib.pfx_fixed_sat32(q.INT64_MIN) == q.INT32_MIN
    assert lib.pfx_fixed_add64_sat(q.INT64_MAX, 1) == q.INT64_MAX
    assert lib.pfx_fixed_add64_sat(q.INT64_MIN, -1) == q.INT64_MIN
    assert lib.pfx_fixed_sub64_sat(q.INT64_MIN, 1) == q.INT64_MIN
    assert lib.pfx_fixed_sub64_sat(0, q.INT64_MIN) == q.INT64_MAX


@given(i32_edgy)
def test_neg_abs(a):
    assert lib.pfx_fixed_neg_sat(a) == clamp_bits(-a, 32)
    assert lib.pfx_fixed_abs_sat(a) == clamp_bits(abs(a), 32)


@given(i64_edgy, i64_edgy)
def test_add64_sub64(a, b):
    assert lib.pfx_fixed_add64_sat(a, b) == clamp_bits(a + b, 64)
    assert lib.pfx_fixed_sub64_sat(a, b) == clamp_bits(a - b, 64)


@given(i64_edgy, i32, i32)
def test_sat32_and_clamps(x, lo, hi):
    assert lib.pfx_fixed_sat32(x) == clamp_bits(x, 32)
    lo, hi = min(lo, hi), max(lo, hi)
    x32 = clamp_bits(x, 32)
    assert lib.pfx_fixed_clamp(x32, lo, hi) == min(hi, max(lo, x32))
    assert lib.pfx_fixed_clamp64(x, lo, hi) == min(hi, max(lo, x))


# --- shifts -------------------------------------------------------------------------


@given(i32_edgy, shift)
def test_shr32_floor_and_round(x, s):
    assert lib.pfx_fixed_shr_floor(x, s) == math.floor(Fraction(x, 1 << s)) == q.shr_floor(x, s)
    assert lib.pfx_fixed_shr_round(x, s) == exact_round(Fraction(x, 1 << s)) == q.shr_round(x, s)


@given(i64_edgy, shift)
def test_shr64_floor_round_and_sat32(x, s):
    assert lib.pfx_fixed_shr64_floor(x, s) == math.floor(Fraction(x, 1 << s))
    r = exact_round(Fraction(x, 1 << s))
    assert lib.pfx_fixed_shr64_round(x, s) == r
    assert lib.pfx_fixed_shr64_round_sat32(x, s) == clamp_bits(r, 32)


def test_round_shift_ties_go_toward_plus_infinity():
    assert lib.pfx_fixed_shr_round(5, 1) == 3  # 2.5
    assert lib.pfx_fixed_shr_round(-5, 1) == -2  # -2.5
    assert lib.pfx_fixed_shr_round(-7, 1) == -3  # -3.5
    assert lib.pfx_fixed_shr64_round(q.INT64_MIN, 64) == 0  # -0.5
    assert lib.pfx_fixed_shr_round(q.INT32_MIN, 32) == 0  # -0.5
    assert lib.pfx_fixed_shr_floor(-1, 200) == -1


@given(i32_edgy, shift)
def test_shl_saturates(x, s):
    assert lib.pfx_fixed_shl_sat(x, s) == clamp_bits(x << s, 32) == q.shl_sat(x, s)


@given(i64_edgy, shift)
def test_shl64_saturates(x, s):
    assert lib.pfx_fixed_shl64_sat(x, s) == clamp_bits(x << s, 64)


# --- multiply ---------------------------------------------------------------------


@given(i32_edgy, i32_edgy, st.integers(0, 66))
@example(q.INT32_MIN, q.INT32_MIN, 31)
@example(q.INT32_MIN, q.INT32_MIN, 62)
@example(q.INT32_MIN, q.INT32_MAX, 30)
@example(q.INT32_MAX, q.INT32_MAX, 0)
def test_mul_sat_exact_rounding(a, b, s):
    expected = clamp_bits(exact_round(Fraction(a * b, 1 << s)), 32)
    assert lib.pfx_fixed_mul_sat(a, b, s) == expected == q.mul_sat(a, b, s)
    assert lib.pfx_fixed_mul_wide(a, b) == a * b


def test_mul_sat_extremes_and_ties():
    assert lib.pfx_fixed_mul_sat(q.INT32_MIN, q.INT32_MIN, 31) == q.INT32_MAX  # 2^31 saturates
    assert lib.pfx_fixed_mul_sat(q.INT32_MIN, q.INT32_MIN, 32) == 1 << 30
    assert lib.pfx_fixed_mul_sat(q.INT32_MIN, q.INT32_MAX, 31) == -q.INT32_MAX
    assert lib.pfx_fixed_mul_sat(q.INT32_MIN, q.INT32_MIN, 62) == 1
    assert lib.pfx_fixed_mul_sat(q.INT32_MIN, q.INT32_MAX, 0) == q.INT32_MIN
    assert lib.pfx_fixed_mul_sat(3, 1, 1) == 2  # 1.5 -> 2
    assert lib.pfx_fixed_mul_sat(-3, 1, 1) == -1  # -1.5 -> -1
    # Q16.16 * Q16.16 >> 16: 1.5 * -2.25 = -3.375
    assert lib.pfx_fixed_mul_sat(q.to_q(1.5, 16), q.to_q(-2.25, 16), 16) == q.to_q(-3.375, 16)


@given(i64_edgy, i32_edgy, i32_edgy)
def test_mac_sat(acc, a, b):
    assert lib.pfx_fixed_mac_sat(acc, a, b) == clamp_bits(acc + a * b, 64) == q.mac_sat(acc, a, b)


def test_mac_accumulates_then_rounds_once():
    # Sum of eight squares of Q30 values (Q60 products), rounded once to Q28:
    # equals the exactly rounded sum (about 3.3, beyond Q30's range of 2).
    xs = [q.to_q(v, 30) for v in (0.9, -0.7, 0.33, 0.5, -0.999, 0.123, 0.75, -0.25)]
    acc = 0
    for x in xs:
        acc = lib.pfx_fixed_mac_sat(acc, x, x)
    assert acc == sum(x * x for x in xs)
    assert lib.pfx_fixed_shr64_round_sat32(acc, 32) == exact_round(Fraction(acc, 1 << 32))
    assert lib.pfx_fixed_shr64_round_sat32(acc, 30) == q.INT32_MAX  # too big for Q30: saturates


# --- divide ---------------------------------------------------------------------------


@given(i32_edgy, i32_edgy, st.integers(0, 32))
@example(q.INT32_MIN, -1, 0)
@example(q.INT32_MIN, 1, 32)
@example(q.INT32_MAX, q.INT32_MIN, 32)
@example(1, 3, 32)
def test_div_sat_exact_rounding(a, b, s):
    status, value = c_out(lib.pfx_fixed_div_sat, "int32_t", a, b, s)
    assert (status, value) == q.div_sat(a, b, s)
    if b == 0:
        assert status == Status.ERR_DOMAIN
        return
    exact = exact_round(Fraction(a << s, b))
    assert value == clamp_bits(exact, 32)
    assert status == (Status.OK if value == exact else Status.ERR_RANGE)


def test_div_sat_ties_statuses_and_zero():
    assert c_out(lib.pfx_fixed_div_sat, "int32_t", 1, 2, 0) == (Status.OK, 1)  # 0.5
    assert c_out(lib.pfx_fixed_div_sat, "int32_t", -1, 2, 0) == (Status.OK, 0)  # -0.5
    assert c_out(lib.pfx_fixed_div_sat, "int32_t", 3, -2, 0) == (Status.OK, -1)  # -1.5
    assert c_out(lib.pfx_fixed_div_sat, "int32_t", q.INT32_MIN, -1, 0) == (Status.ERR_RANGE, q.INT32_MAX)
    assert c_out(lib.pfx_fixed_div_sat, "int32_t", q.INT32_MIN, 1, 0) == (Status.OK, q.INT32_MIN)
    assert c_out(lib.pfx_fixed_div_sat, "int32_t", 5, 0, 16) == (Status.ERR_DOMAIN, q.INT32_MAX)
    assert c_out(lib.pfx_fixed_div_sat, "int32_t", -5, 0, 16) == (Status.ERR_DOMAIN, q.INT32_MIN)
    assert c_out(lib.pfx_fixed_div_sat, "int32_t", 0, 0, 16) == (Status.ERR_DOMAIN, 0)
    assert c_out(lib.pfx_fixed_div_sat, "int32_t", 1, 1, 33) == (Status.ERR_ARG, 0)
    assert lib.pfx_fixed_div_sat(1, 1, 0, ffi.NULL) == Status.ERR_ARG


@given(i64_edgy, i64_edgy)
@example(q.INT64_MIN, -1)
@example(q.INT64_MIN, 1)
@example(q.INT64_MIN, q.INT64_MIN)
@example(q.INT64_MAX, 2)
def test_div64_sat_exact_rounding(n, d):
    status, value = c_out(lib.pfx_fixed_div64_sat, "int64_t", n, d)
    assert (status, value) == q.div64_sat(n, d)
    if d == 0:
        assert status == Status.ERR_DOMAIN
        return
    exact = exact_round(Fraction(n, d))
    assert value == clamp_bits(exact, 64)
    assert status == (Status.OK if value == exact else Status.ERR_RANGE)


def _recip(d: int) -> tuple[int, int, int]:
    mant = ffi.new("int32_t *")
    sh = ffi.new("unsigned *")
    status = lib.pfx_fixed_recip(d, mant, sh)
    return int(status), int(mant[0]), int(sh[0])


@given(u32_pos)
@example(1)
@example(3)
@example(1 << 31)
@example((1 << 31) + 1)
@example(q.UINT32_MAX)
def test_recip_is_correctly_rounded(d):
    status, mant, sh = _recip(d)
    assert status == Status.OK
    assert (1 << 30) <= mant < (1 << 31)
    assert abs(Fraction(mant) - Fraction(1 << sh, d)) <= Fraction(1, 2)
    assert (status, mant, sh) == q.recip(d)


@given(u32_pos, i32_edgy)
def test_divide_by_recip_within_bound(d, x):
    _, mant, sh = _recip(d)
    got = lib.pfx_fixed_mul_sat(x, mant, sh)
    exact = Fraction(x, d)
    if abs(exact) < q.INT32_MAX:
        assert abs(got - exact) <= Fraction(RECIP_DIVIDE_BOUND_LSB)


def test_recip_zero_is_a_domain_error():
    assert _recip(0) == (Status.ERR_DOMAIN, 0, 0)


# --- square roots ---------------------------------------------------------------------


@st.composite
def near_squares(draw, max_root):
    k = draw(st.integers(0, max_root))
    return draw(st.sampled_from([k * k, k * k + 1, k * k + k, k * k + k + 1, max(k * k - 1, 0)]))


@given(st.one_of(u32, near_squares(65535)))
@example(q.UINT32_MAX)
def test_isqrt_u32(x):
    r = lib.pfx_fixed_isqrt_u32(x)
    assert r == math.isqrt(x)
    rr = lib.pfx_fixed_isqrt_round_u32(x)
    assert (2 * rr - 1) ** 2 < 4 * x < (2 * rr + 1) ** 2 or x == rr == 0  # |sqrt(x) - rr| < 1/2
    assert rr == q.isqrt_round_u32(x)


@given(st.one_of(u64, near_squares(q.UINT32_MAX)))
@example(q.UINT64_MAX)
@example((q.UINT32_MAX) ** 2 + q.UINT32_MAX)  # just below (2^32 - 1/2)^2
@example((q.UINT32_MAX) ** 2 + q.UINT32_MAX + 1)  # just above: rounds to 2^32
def test_isqrt_u64(x):
    assert lib.pfx_fixed_isqrt_u64(x) == math.isqrt(x)
    rr = lib.pfx_fixed_isqrt_round_u64(x)
    assert (2 * rr - 1) ** 2 < 4 * x < (2 * rr + 1) ** 2 or x == rr == 0
    assert rr == q.isqrt_round_u64(x)


@given(u32, st.integers(0, 40), st.integers(0, 40))
@example(q.UINT32_MAX, 0, 16)
@example(q.UINT32_MAX, 32, 32)
def test_sqrt_q(x, frac_in, frac_out):
    status, value = c_out(lib.pfx_fixed_sqrt_q, "uint32_t", x, frac_in, frac_out)
    assert (status, value) == q.sqrt_q(x, frac_in, frac_out)
    k = 2 * frac_out - frac_in
    if not 0 <= k <= 32:
        assert (status, value) == (Status.ERR_ARG, 0)
        return
    assert status == Status.OK
    exact_sq = Fraction(x, 1 << frac_in) * (1 << (2 * frac_out))  # (result)^2 before rounding
    assert max(value - Fraction(1, 2), 0) ** 2 <= exact_sq <= (value + Fraction(1, 2)) ** 2


def test_sqrt_q_examples():
    # Q2n -> Qn: a variance of 2.25 m^2 in Q20 is a standard deviation of 1.5 m in Q10.
    assert fixed.sqrt_q(q.to_q(2.25, 20, signed=False), 20, 10) == q.to_q(1.5, 10)
    assert fixed.sqrt_q(q.to_q(2.0, 16, signed=False), 16, 16) == round(math.sqrt(2) * 65536)


# --- log2 --------------------------------------------------------------------------------


def _log2_u32(x: int) -> tuple[int, int]:
    return c_out(lib.pfx_fixed_log2_u32, "int32_t", x)


def test_log2_within_bound_on_every_table_interval():
    # Every one of the 256 interpolation intervals, at 64 points each including
    # the middle (where the chord is furthest below the curve).
    rng = np.random.default_rng(20240611)
    xs = []
    for k in range(256):
        base = (1 << 31) + (k << 23)
        xs += [base, base + (1 << 22), base + (1 << 22) - 1, base + (1 << 23) - 1]
        xs += [int(v) for v in base + rng.integers(0, 1 << 23, size=60)]
    got = np.array([_log2_u32(x)[1] for x in xs], dtype=np.float64)
    err = np.abs(got / 65536.0 - np.log2(np.array(xs, dtype=np.float64))) * 65536.0
    assert err.max() <= LOG2_BOUND_LSB, err.max()
    assert err.max() > 0.5  # the sweep reaches the interpolation worst case


@given(u32_pos)
def test_log2_u32_bound_and_mirror(x):
    status, v = _log2_u32(x)
    assert status == Status.OK
    assert abs(v / 65536.0 - math.log2(x)) * 65536.0 <= LOG2_BOUND_LSB
    assert (status, v) == q.log2_u32(x)


@given(u64_pos)
@example(q.UINT64_MAX)
def test_log2_u64_bound_and_mirror(x):
    status, v = c_out(lib.pfx_fixed_log2_u64, "int32_t", x)
    assert status == Status.OK
    # keeping the top 32 bits costs < 2^-31 * 1.45 bit: within the same bound
    assert abs(v / 65536.0 - math.log2(x)) * 65536.0 <= LOG2_BOUND_LSB
    assert (status, v) == q.log2_u64(x)


def test_log2_exact_on_powers_of_two_and_zero_is_domain():
    for n in range(32):
        assert _log2_u32(1 << n) == (Status.OK, n << 16)
    for n in range(64):
        assert c_out(lib.pfx_fixed_log2_u64, "int32_t", 1 << n) == (Status.OK, n << 16)
    assert _log2_u32(0) == (Status.ERR_DOMAIN, q.INT32_MIN)
    assert c_out(lib.pfx_fixed_log2_u64, "int32_t", 0) == (Status.ERR_DOMAIN, q.INT32_MIN)


@given(u32_pos, st.integers(0, 63))
def test_log2_q_subtracts_fraction_bits(x, f):
    status, v = c_out(lib.pfx_fixed_log2_q, "int32_t", x, f)
    assert status == Status.OK
    assert v == _log2_u32(x)[1] - (f << 16) == q.log2_q(x, f)[1]


def test_log2_q_examples():
    assert fixed.log2_q(q.to_q(0.25, 30, signed=False), 30) == -2 << 16
    assert c_out(lib.pfx_fixed_log2_q, "int32_t", 1, 64) == (Status.ERR_ARG, q.INT32_MIN)
    with pytest.raises(CoreError) as info:
        fixed.log2(0)
    assert info.value.status == Status.ERR_DOMAIN


# --- exp2 --------------------------------------------------------------------------------


def test_exp2_split_every_fraction_within_bound():
    xs = np.arange(65536)
    mant = np.empty(65536, dtype=np.float64)
    split = lib.pfx_fixed_exp2_split
    m_ptr, e_ptr = ffi.new("int32_t *"), ffi.new("int32_t *")
    for x in range(65536):
        split(x, m_ptr, e_ptr)
        assert e_ptr[0] == 0
        mant[x] = m_ptr[0]
    err = np.abs(mant - np.exp2(xs / 65536.0 + 30.0))
    assert err.max() <= EXP2_SPLIT_BOUND_LSB, (err.max(), int(err.argmax()))
    assert mant.min() >= 2**30 and mant.max() < 2**31


def test_exp2_frac_sat_within_bound_for_x_in_minus2_to_0():
    # The mantissa is the same for every integer part; [-2, 0] covers every
    # fraction at the two largest output scales.
    xs = range(-2 * 65536, 1)
    got = np.array([lib.pfx_fixed_exp2_frac_sat(x) for x in xs], dtype=np.float64)
    err = np.abs(got - np.exp2(np.array(xs) / 65536.0 + 30.0))
    assert err.max() <= EXP2_FRAC_BOUND_LSB, (err.max(), int(err.argmax()))


@given(st.integers(-40 * 65536, 0))
def test_exp2_frac_sat_bound_and_mirror(x):
    v = lib.pfx_fixed_exp2_frac_sat(x)
    assert abs(v - 2.0 ** (x / 65536.0 + 30.0)) <= EXP2_FRAC_BOUND_LSB
    assert v == q.exp2_frac_sat(x)


@given(i32_edgy)
def test_exp2_all_variants_match_mirror(x):
    assert lib.pfx_fixed_exp2_frac_sat(x) == q.exp2_frac_sat(x)
    assert fixed.exp2_split(x) == q.exp2_split(x)
    for fb in (0, 8, 16, 30, 31, 45, 62, 4000):
        assert lib.pfx_fixed_exp2_q_sat(x, fb) == q.exp2_q_sat(x, fb)


@given(st.integers(-30 * 65536, 30 * 65536), st.integers(0, 40))
def test_exp2_q_sat_bound(x, fb):
    exact = 2.0 ** (x / 65536.0 + fb)
    v = lib.pfx_fixed_exp2_q_sat(x, fb)
    if exact >= q.INT32_MAX:
        assert v == q.INT32_MAX
    else:
        assert abs(v - exact) <= EXP2_SPLIT_BOUND_LSB


def test_exp2_exact_points_saturation_and_underflow():
    one = 1 << 30
    assert lib.pfx_fixed_exp2_frac_sat(0) == one
    for k in range(31):
        assert lib.pfx_fixed_exp2_frac_sat(-k << 16) == one >> k  # exact powers
    assert lib.pfx_fixed_exp2_frac_sat(-31 << 16) == 1  # exactly 0.5 LSB: the tie rounds up
    assert lib.pfx_fixed_exp2_frac_sat((-31 << 16) - 1) == 0  # just below 0.5 LSB
    assert lib.pfx_fixed_exp2_frac_sat((-32 << 16)) == 0
    assert lib.pfx_fixed_exp2_frac_sat(q.INT32_MIN) == 0
    assert lib.pfx_fixed_exp2_frac_sat(1) == one  # x > 0 saturates to 1.0
    assert lib.pfx_fixed_exp2_frac_sat(q.INT32_MAX) == one
    assert lib.pfx_fixed_exp2_q_sat(31 << 16, 0) == q.INT32_MAX
    assert lib.pfx_fixed_exp2_q_sat((31 << 16) - 1, 0) == 2147460935  # 2^(31 - 2^-16) = 2147460935.07 (float64)
    assert lib.pfx_fixed_exp2_q_sat(30 << 16, 0) == 1 << 30
    assert lib.pfx_fixed_exp2_q_sat(q.INT32_MIN, 62) == 0
    assert lib.pfx_fixed_exp2_q_sat(-1 << 16, 16) == 32768  # 0.5 in Q16
    assert fixed.exp2_split(q.INT32_MIN) == (one, -32768)
    assert fixed.exp2_split(q.INT32_MAX)[1] == 32767


# --- wrappers and Q conversion ------------------------------------------------------------


def test_wrappers_raise_on_status():
    assert fixed.div(1, 3, 16) == 21845
    with pytest.raises(CoreError) as info:
        fixed.div(1, 0, 16)
    assert info.value.status == Status.ERR_DOMAIN
    with pytest.raises(CoreError):
        fixed.div(q.INT32_MIN, -1, 0)
    assert fixed.div(q.INT32_MIN, -1, 0, saturate=True) == q.INT32_MAX
    assert fixed.div64(7, -2) == -3  # -3.5 -> -3
    assert fixed.recip(3) == (1431655765, 32)
    with pytest.raises(CoreError):
        fixed.recip(0)
    with pytest.raises(OverflowError):  # cffi refuses values outside int32_t
        lib.pfx_fixed_add_sat(1 << 31, 0)


def test_to_q_rounding_and_saturation():
    assert q.to_q(0.1, 10) == 102  # 102.4
    assert q.to_q(2.5, 0) == 3 and q.to_q(-2.5, 0) == -2  # ties toward +infinity
    assert q.to_q(1e20, 16) == q.INT32_MAX and q.to_q(-1e20, 16) == q.INT32_MIN
    assert q.to_q(-1.0, 8, bits=16, signed=False) == 0
    assert q.to_q(math.inf, 4) == q.INT32_MAX and q.to_q(-math.inf, 4) == q.INT32_MIN
    assert q.to_q(Fraction(1, 3), 30, bits=64) == 357913941
    with pytest.raises(ValueError):
        q.to_q(math.nan, 4)


@given(st.floats(-30000.0, 30000.0), st.integers(0, 16))
def test_to_q_from_q_round_trip(x, f):
    v = q.to_q(x, f)
    assert abs(Fraction(q.from_q(v, f)) - Fraction(x)) <= Fraction(1, 1 << (f + 1))


# --- exhaustive sweeps (slow: about a minute) -------------------------------------------


@pytest.mark.slow
def test_exhaustive_bounds(request, tmp_path):
    """Every 32-bit log2 mantissa, every nonzero exp2_frac_sat output, every reciprocal divisor."""
    if "slow" not in (request.config.option.markexpr or ""):
        pytest.skip("exhaustive sweep: run with -m slow")
    exe = tmp_path / "measure_bounds"
    program = Path(__file__).parent / "c" / "measure_bounds.c"
    include = ROOT / "c_core" / "include"
    subprocess.run(["gcc", "-std=c99", "-O2", "-I", str(include), str(program), str(C_SOURCE), "-lm", "-o", str(exe)],
                   check=True)  # fmt: skip
    out = subprocess.run([str(exe), "all"], check=True, capture_output=True, text=True).stdout
    worst = {line.split()[0]: float(line.split()[1]) for line in out.splitlines()}
    assert worst["log2_u32"] <= LOG2_BOUND_LSB
    assert worst["exp2_frac_sat"] <= EXP2_FRAC_BOUND_LSB
    assert worst["exp2_split"] <= EXP2_SPLIT_BOUND_LSB
    assert all(v <= EXP2_SPLIT_BOUND_LSB for k, v in worst.items() if k.startswith("exp2_q_sat"))
    assert worst["recip_not_rounded"] == 0
