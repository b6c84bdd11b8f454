#!/usr/bin/env python3
"""Write the air format's variance words into c_core/src/pfx_wire.c.

The variance of code c (c = 0..167) is D[c] = round(2^(c/8 + 10)) in Q20 m^2
(2^(c/8 - 10) m^2).  The core does not store the 168 values: it keeps eight
32-bit words W[j] = floor(M[j] / 2^5) of the mantissas M[j] = round(2^(j/8) *
2^36) and computes, for c = 8 o + j, D[c] = floor((W[j] + 2^(s-1)) / 2^s)
with s = 21 - o (1..21), which is floor((M[j] + 2^(s+4)) / 2^(s+5)): the
dropped five bits cannot carry, as 2^(s+4) is a multiple of 2^5.  Rounding
twice could differ from rounding once; this script proves it does not, code
by code, against peerfix.core.wire.variance_table() (60-digit decimals), and
refuses to write words that fail.  tests/core runs the C function over every
code.

    python tools/gen_wire_table.py          # rewrite the words in place
    python tools/gen_wire_table.py --check  # exit 1 if the C block is stale
"""

from __future__ import annotations

import re
import sys
from decimal import ROUND_HALF_UP, Decimal, localcontext
from pathlib import Path

from peerfix.core.wire import variance_table

SOURCE = Path(__file__).resolve().parents[1] / "c_core" / "src" / "pfx_wire.c"
BLOCK = re.compile(r"(/\* PFX_WIRE_TABLE_BEGIN \*/\n).*?(/\* PFX_WIRE_TABLE_END \*/)", re.S)
MANT_BITS = 36  # the smallest precision at which the double rounding is exact for all 168 codes
WORD_SHIFT = 5  # M[j] < 2^37: five bits off leave a 32-bit word
STEPS = 8  # codes per octave


def words() -> list[int]:
    with localcontext() as ctx:
        ctx.prec = 60
        mant = [int((Decimal(2) ** (Decimal(j) / STEPS) * (1 << MANT_BITS)).quantize(Decimal(1), rounding=ROUND_HALF_UP))
                for j in range(STEPS)]
    return [m >> WORD_SHIFT for m in mant]


def variance_from_words(code: int, w: list[int]) -> int:
    """The core's formula (pfx_wire_var_value), in Python."""
    octave, j = divmod(code, STEPS)
    s = MANT_BITS - WORD_SHIFT - 10 - octave
    return (w[j] + (1 << (s - 1))) >> s


def render() -> str:
    w = words()
    table = variance_table()
    bad = [c for c in range(len(table)) if variance_from_words(c, w) != table[c]]
    if bad or max(w) + (1 << 20) >= 1 << 32:
        raise SystemExit(f"the words of 2^{MANT_BITS} mantissas do not reproduce codes {bad[:5]} in 32 bits")
    body = ", ".join(f"{v}u" for v in w)
    return f"static const uint32_t k_var_words[{STEPS}] = {{\n    {body}\n}};\n"


def main() -> int:
    text = SOURCE.read_text()
    new = BLOCK.sub(lambda m: m.group(1) + render() + m.group(2), text)
    if "--check" in sys.argv:
        return 0 if new == text else 1
    SOURCE.write_text(new)
    return 0


if __name__ == "__main__":
    sys.exit(main())
