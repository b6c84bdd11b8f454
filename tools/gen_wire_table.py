#!/usr/bin/env python3
"""Write the air format's variance table into c_core/src/pfx_wire.c.

D[c] = round(2^(c/8 + 10)) for c = 0..167: the variance of code c in Q20 m^2
(2^(c/8 - 10) m^2), computed with 60-digit decimals.  The values come from
peerfix.core.wire.variance_table(), which the tests also check against the C
array, so the C source and its Python mirror cannot drift apart.

    python tools/gen_wire_table.py          # rewrite the table in place
    python tools/gen_wire_table.py --check  # exit 1 if the C table is stale
"""

from __future__ import annotations

import re
import sys
from pathlib import Path

from peerfix.core.wire import variance_table

SOURCE = Path(__file__).resolve().parents[1] / "c_core" / "src" / "pfx_wire.c"
BLOCK = re.compile(r"(/\* PFX_WIRE_TABLE_BEGIN \*/\n).*?(/\* PFX_WIRE_TABLE_END \*/)", re.S)


def render() -> str:
    values = variance_table()
    lines = []
    for i in range(0, len(values), 6):
        lines.append("    " + ", ".join(f"{v}u" for v in values[i : i + 6]) + ",")
    return "static const uint32_t pfx_wire_var_table[PFX_WIRE_VAR_CODES] = {\n" + "\n".join(lines) + "\n};\n"


def main() -> int:
    text = SOURCE.read_text()
    new = BLOCK.sub(lambda m: m.group(1) + render() + m.group(2), text)
    if "--check" in sys.argv:
        return 0 if new == text else 1
    SOURCE.write_text(new)
    return 0


if __name__ == "__main__":
    sys.exit(main())
