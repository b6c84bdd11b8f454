"""The input vectors of tests/core/c/fixed_vectors.c, and the same result fold over quantise.

Keep in step with the C program: same inputs, same iteration order, same fold.
``expected_folds()`` returns the lines the C program must print.
"""

from __future__ import annotations

from peerfix.core import quantise as q

M64 = (1 << 64) - 1

EDGE32 = [
    q.INT32_MIN, q.INT32_MIN + 1, -(1 << 30), -65537, -65536, -65535, -32768, -3, -2, -1,
    0, 1, 2, 3, 32768, 65535, 65536, 1 << 30, q.INT32_MAX - 1, q.INT32_MAX,
]  # fmt: skip
EDGE64 = [
    q.INT64_MIN, q.INT64_MIN + 1, -(1 << 62), -(1 << 32), q.INT32_MIN, -3, -1, 0,
    1, 3, q.INT32_MAX, 1 << 32, 1 << 62, q.INT64_MAX - 1, q.INT64_MAX, 7,
]  # fmt: skip
SHIFTS = [0, 1, 2, 15, 16, 17, 30, 31, 32, 33, 62, 63, 64, 65, 200]
DIV_SHIFTS = [0, 1, 16, 31, 32, 33]
EXP2_FRAC_BITS = [0, 16, 30, 31, 40, 62, 1000]
N_RAND = 28


def _signed(u: int, bits: int) -> int:
    return u - (1 << bits) if u >> (bits - 1) else u


def make_inputs() -> tuple[list[int], list[int], list[int], list[int]]:
    state = 0x9E3779B97F4A7C15

    def lcg() -> int:
        nonlocal state
        state = (state * 6364136223846793005 + 1442695040888963407) & M64
        return state

    v32 = list(EDGE32)
    for _ in range(N_RAND):
        r = lcg()
        v32.append(_signed((r >> 32) >> (r & 31), 32))
    v64 = list(EDGE64)
    for _ in range(N_RAND):
        r = lcg()
        v64.append(_signed(r >> (r & 63), 64))
    u32: list[int] = []
    for i in range(32):
        u32 += [1 << i, (1 << i) - 1]
    u32 += [q.UINT32_MAX, q.UINT32_MAX - 1, 3, 5, 0x80000001, 0xC0000000, 0xFFFE0001, 0xFFFF0000]
    for _ in range(N_RAND):
        r = lcg()
        u32.append((r >> 32) >> (r & 31))
    u64: list[int] = []
    for i in range(64):
        u64 += [1 << i, (1 << i) - 1]
    u64 += [M64, M64 - 1, 0xFFFFFFFE00000001, 0xFFFFFFFF00000000]
    for _ in range(N_RAND):
        r = lcg()
        u64.append(lcg() >> (r & 63))
    return v32, v64, u32, u64


class Fold:
    def __init__(self) -> None:
        self.h = 14695981039346656037
        self.n = 0

    def __call__(self, *values: int) -> None:
        for v in values:
            self.h = ((self.h ^ (v & M64)) * 1099511628211) & M64
            self.n += 1

    def line(self, name: str) -> str:
        return f"{name} {self.n} {self.h:016x}"


def expected_folds() -> list[str]:
    v32, v64, u32, u64 = make_inputs()
    lines = []

    f = Fold()
    for x in u32:
        f(q.clz32(x))
    for x in u64:
        f(q.clz64(x))
    lines.append(f.line("clz"))

    f = Fold()
    for x in v64:
        f(q.sat32(x))
    for a in v32:
        f(q.neg_sat(a), q.abs_sat(a))
        for b in v32:
            f(q.add_sat(a, b), q.sub_sat(a, b), q.clamp(a, -1000, b))
    for a in v64:
        for b in v64:
            f(q.add64_sat(a, b), q.sub64_sat(a, b), q.clamp64(a, -1000, b))
    lines.append(f.line("saturate"))

    f = Fold()
    for x in v32:
        for s in SHIFTS:
            f(q.shr_floor(x, s), q.shr_round(x, s), q.shl_sat(x, s))
    for x in v64:
        for s in SHIFTS:
            f(q.shr64_floor(x, s), q.shr64_round(x, s), q.shr64_round_sat32(x, s), q.shl64_sat(x, s))
    lines.append(f.line("shift"))

    f = Fold()
    for i, a in enumerate(v32):
        for b in v32:
            f(q.mul_wide(a, b), q.mac_sat(v64[i % len(v64)], a, b))
            for s in SHIFTS:
                f(q.mul_sat(a, b, s))
    lines.append(f.line("multiply"))

    f = Fold()
    for a in v32:
        for b in v32:
            for s in DIV_SHIFTS:
                f(*q.div_sat(a, b, s))
    for a in v64:
        for b in v64:
            f(*q.div64_sat(a, b))
    for x in u32:
        f(*q.recip(x))
    lines.append(f.line("divide"))

    f = Fold()
    for x in u32:
        f(q.isqrt_u32(x), q.isqrt_round_u32(x))
        for k in range(0, 34, 3):
            f(*q.sqrt_q(x, k, (k + 1) // 2 + k % 5))
    for x in u64:
        f(q.isqrt_u64(x), q.isqrt_round_u64(x))
    lines.append(f.line("sqrt"))

    f = Fold()
    for x in u32:
        f(*q.log2_u32(x))
        for k in range(0, 70, 16):
            f(*q.log2_q(x, k))
    for x in u64:
        f(*q.log2_u64(x))
    lines.append(f.line("log2"))

    f = Fold()
    for x in v32:
        mant, e = q.exp2_split(x)
        f(0, mant, e, q.exp2_frac_sat(x))
        for fb in EXP2_FRAC_BITS:
            f(q.exp2_q_sat(x, fb))
    for x in range(-45 * 65536, 45 * 65536 + 1, 257):
        mant, e = q.exp2_split(x)
        f(mant, e, q.exp2_frac_sat(x), q.exp2_q_sat(x, 16))
    lines.append(f.line("exp2"))
    return lines
