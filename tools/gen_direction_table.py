#!/usr/bin/env python3
"""Generate the arc direction table and the constants of the fixed-point core.

    python tools/gen_direction_table.py          # rewrite the generated blocks in place
    python tools/gen_direction_table.py --check  # exit 1 if a committed block differs

The table (written into c_core/src/pfx_range.c) holds
round(cos(2 pi k / 256) * 2^30), k = 0..255 (Q30); the sine of direction
k is the cosine of direction (k + 192) mod 256, so one table serves both.  Every value is computed with 60-digit decimal arithmetic (pi by
Machin's formula, cos by its Taylor series) and rounded once, to nearest with
ties toward +infinity (the house rule of the core), so the table is the
exactly rounded image of the float twin's directions.

c_core/src/pfx_mixture.c gets the 96 seeds of the reciprocal square root
(unit vectors, square roots) (round(2^15 / sqrt(M)) at the middle of each 1/128-wide interval of
M in [1/4, 1)).

The constants (pi, log2(2 pi), 1/(2 ln 2), log2(1e-9)) are produced the same
way and written into c_core/include/pfx_mixture.h.
"""

from __future__ import annotations

import argparse
import sys
from decimal import ROUND_FLOOR, Decimal, localcontext
from pathlib import Path

DIRECTIONS = 256
TABLE_FRAC_BITS = 30
ROOT = Path(__file__).resolve().parents[1]
TABLE_FILE = ROOT / "c_core" / "src" / "pfx_range.c"
TABLE_BEGIN = "/* BEGIN GENERATED TABLE by tools/gen_direction_table.py: do not edit */"
TABLE_END = "/* END GENERATED TABLE */"
SEED_FILE = ROOT / "c_core" / "src" / "pfx_mixture.c"
SEED_BEGIN = "/* BEGIN GENERATED SEEDS by tools/gen_direction_table.py: do not edit */"
SEED_END = "/* END GENERATED SEEDS */"
CONST_FILE = ROOT / "c_core" / "include" / "pfx_mixture.h"
CONST_BEGIN = "/* BEGIN GENERATED CONSTANTS by tools/gen_direction_table.py: do not edit */"
CONST_END = "/* END GENERATED CONSTANTS */"
PREC = 60


def _atan_inv(n: int) -> Decimal:
    """atan(1/n) by its series (n >= 2)."""
    x = Decimal(1) / n
    x2 = x * x
    term, total, k = x, x, 1
    eps = Decimal(10) ** -(PREC + 5)
    while abs(term) > eps:
        term *= -x2
        k += 2
        total += term / k
    return total


def pi() -> Decimal:
    return 16 * _atan_inv(5) - 4 * _atan_inv(239)


def cos(x: Decimal) -> Decimal:
    term, total, n = Decimal(1), Decimal(1), 0
    eps = Decimal(10) ** -(PREC + 5)
    while abs(term) > eps:
        term *= -x * x / ((n + 1) * (n + 2))
        n += 2
        total += term
    return total


def round_half_up(v: Decimal) -> int:
    """floor(v + 1/2): round to nearest, ties toward +infinity."""
    return int((v + Decimal("0.5")).to_integral_value(rounding=ROUND_FLOOR))


def table() -> list[int]:
    with localcontext() as ctx:
        ctx.prec = PREC
        p = pi()
        return [round_half_up(cos(2 * p * k / DIRECTIONS) * (1 << TABLE_FRAC_BITS)) for k in range(DIRECTIONS)]


def constants() -> dict[str, tuple[int, str]]:
    with localcontext() as ctx:
        ctx.prec = PREC
        p = pi()
        ln2 = Decimal(2).ln()
        return {
            "PFX_PI_Q29": (round_half_up(p * (1 << 29)), "round(pi * 2^29)"),
            "PFX_LOG2_2PI_Q16": (round_half_up((2 * p).ln() / ln2 * (1 << 16)), "round(log2(2 pi) * 2^16)"),
            "PFX_INV_2LN2_Q30": (round_half_up(1 / (2 * ln2) * (1 << 30)), "round(1 / (2 ln 2) * 2^30)"),
            "PFX_LOG2_1E9_Q16": (round_half_up(Decimal("1e-9").ln() / ln2 * (1 << 16)), "round(log2(1e-9) * 2^16)"),
        }


def render_constants() -> str:
    lines = [CONST_BEGIN]
    for name, (value, formula) in constants().items():
        lines.append(f"#define {name} ({value}) /* {formula} */")
    lines.append(CONST_END)
    return "\n".join(lines)


RSQRT_SEEDS = 96  # intervals of width 1/128 covering M in [1/4, 1)


def rsqrt_seeds() -> list[int]:
    """round(2^15 / sqrt(M)) at the middle of each interval [(32 + i)/128, (33 + i)/128)."""
    with localcontext() as ctx:
        ctx.prec = PREC
        return [round_half_up((1 << 15) / (Decimal(65 + 2 * i) / 256).sqrt()) for i in range(RSQRT_SEEDS)]


def render_table() -> str:
    values = table()
    lines = [TABLE_BEGIN]
    lines.append(f"/* round(cos(2 pi k / {DIRECTIONS}) * 2^{TABLE_FRAC_BITS}), k = 0..{DIRECTIONS - 1} (Q30). */")
    lines.append(f"static const int32_t k_cos_q30[{DIRECTIONS}] = {{")
    for start in range(0, DIRECTIONS, 6):
        chunk = ", ".join(str(v) for v in values[start : start + 6])
        lines.append(f"    {chunk}{',' if start + 6 < DIRECTIONS else ''}")
    lines.append("};")
    lines.append(TABLE_END)
    return "\n".join(lines)


def render_seeds() -> str:
    seeds = rsqrt_seeds()
    lines = [SEED_BEGIN]
    lines.append(f"/* round(2^15 / sqrt((65 + 2 i) / 256)), i = 0..{RSQRT_SEEDS - 1}: 1/sqrt(M) seeds, Q15, M in [1/4, 1). */")
    lines.append(f"static const uint16_t k_rsqrt_seed_q15[{RSQRT_SEEDS}] = {{")
    for start in range(0, RSQRT_SEEDS, 12):
        chunk = ", ".join(f"{v}u" for v in seeds[start : start + 12])
        lines.append(f"    {chunk}{',' if start + 12 < RSQRT_SEEDS else ''}")
    lines.append("};")
    lines.append(SEED_END)
    return "\n".join(lines)


def splice(text: str, begin: str, end: str, block: str) -> str:
    start = text.index(begin)
    stop = text.index(end, start) + len(end)
    return text[:start] + block + text[stop:]


def targets() -> list[tuple[Path, str, str, str]]:
    return [
        (CONST_FILE, CONST_BEGIN, CONST_END, render_constants()),
        (TABLE_FILE, TABLE_BEGIN, TABLE_END, render_table()),
        (SEED_FILE, SEED_BEGIN, SEED_END, render_seeds()),
    ]


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--check", action="store_true", help="only compare; exit 1 when a file differs")
    ap.add_argument("--print", action="store_true", help="print the blocks instead of writing them")
    args = ap.parse_args()
    stale = 0
    for path, begin, end, block in targets():
        if args.print:
            print(block)
            continue
        text = path.read_text(encoding="utf-8")
        new = splice(text, begin, end, block)
        if new == text:
            continue
        if args.check:
            print(f"{path}: generated block is out of date (run {Path(__file__).name})", file=sys.stderr)
            stale = 1
        else:
            path.write_text(new, encoding="utf-8")
    return stale


if __name__ == "__main__":
    sys.exit(main())
