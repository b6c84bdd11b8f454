"""The cycle model's table against its sources.

Cortex-M4 rows: shared/reference/check-values.md, "Cortex-M4 instruction
timing", from the Arm Cortex-M4 Technical Reference Manual (processor
instruction timings table).  Cortex-M0+ rows: Arm Cortex-M0+ TRM (DDI 0484C)
table 3.1; its branch rows are from memory, as the model's docstring says.
Encodings: ARMv7-M Architecture Reference Manual (hand-written here).
"""

from __future__ import annotations

import struct

import pytest

from .support import needs_unicorn

pytestmark = needs_unicorn


def decode(*halfwords: int):
    from capstone import CS_ARCH_ARM, CS_MODE_MCLASS, CS_MODE_THUMB, Cs

    md = Cs(CS_ARCH_ARM, CS_MODE_THUMB | CS_MODE_MCLASS)
    md.detail = True
    (insn,) = md.disasm(struct.pack(f"<{len(halfwords)}H", *halfwords), 0x1000)
    return insn


M4_ROWS = [
    # (encoding, check-values.md row, cycles)
    ((0x1888,), "ADD (adds r0, r1, r2)", 1),
    ((0x0088,), "shift (lsls r0, r1, #2)", 1),
    ((0x4008,), "logic (ands r0, r1)", 1),
    ((0x4348,), "MUL (muls r0, r1, r0)", 1),
    ((0xFB01, 0x3002), "MLA", 1),
    ((0xFB01, 0x3012), "MLS", 1),
    ((0xFB82, 0x0103), "SMULL", 1),
    ((0xFBA2, 0x0103), "UMULL", 1),
    ((0xFBC2, 0x0103), "SMLAL", 1),
    ((0xFBE2, 0x0103), "UMLAL", 1),
    ((0xFB90, 0xF0F1), "SDIV: 2 to 12, the model takes the worst", 12),
    ((0xFBB0, 0xF0F1), "UDIV: 2 to 12, the model takes the worst", 12),
    ((0xFAB1, 0xF081), "CLZ", 1),
    ((0x6801,), "LDR single", 2),
    ((0x6081,), "STR single", 2),
]


@pytest.mark.parametrize("encoding, row, cycles", M4_ROWS)
def test_cortex_m4_rows(encoding, row, cycles):
    from peerfix.budget.timing import CORTEX_M4

    assert CORTEX_M4.cost(decode(*encoding), None).base == cycles, row


def test_cortex_m4_pipelining_and_branches():
    from peerfix.budget.timing import CORTEX_M4

    ldr, str_ = decode(0x6801), decode(0x6081)
    # back-to-back loads/stores: N of them take N + 1
    assert CORTEX_M4.cost(ldr, None).base + CORTEX_M4.cost(str_, ldr).base == 3
    p = CORTEX_M4.branch_refill
    assert 1 <= p <= 3  # the TRM's range for the pipeline refill
    bne = CORTEX_M4.cost(decode(0xD1FC), None)
    assert (bne.base, bne.base + bne.taken_extra, bne.conditional) == (1, 1 + p, True)
    b = CORTEX_M4.cost(decode(0xE7FE), None)
    assert (b.base, b.conditional) == (1 + p, False)
    pop = CORTEX_M4.cost(decode(0xBD10), None)  # pop {r4, pc}: 1 + N + P
    assert pop.base == 1 + 2 + p and pop.writes_pc
    assert CORTEX_M4.cost(decode(0xB510), None).base == 3  # push {r4, lr}: 1 + N
    assert CORTEX_M4.cost(decode(0xC806), None).base == 3  # ldm r0!, {r1, r2}: 1 + N


def test_cortex_m0plus_rows():
    from peerfix.budget.timing import CORTEX_M0PLUS as M0

    assert M0.cost(decode(0x4348), None).base == 1  # MULS, fast multiplier option
    assert M0.cost(decode(0x6801), None).base == 2  # LDR
    assert M0.cost(decode(0x6081), decode(0x6801)).base == 2  # no pipelining on the M0+
    assert M0.cost(decode(0xB510), None).base == 3  # PUSH {r4, lr}: 1 + N
    assert M0.cost(decode(0xBD10), None).base == 4  # POP {r4, pc}: 3 + N (N = 1 low register)
    bne = M0.cost(decode(0xD1FC), None)
    assert (bne.base, bne.base + bne.taken_extra) == (1, 2)
    assert M0.cost(decode(0xE7FE), None).base == 2  # B
    assert M0.cost(decode(0xF000, 0xF801), None).base == 3  # BL
    assert M0.cost(decode(0x4770), None).base == 2  # BX


def test_models_state_their_source_and_the_estimate_caveat():
    from peerfix.budget import timing

    assert "Cortex-M4 Technical Reference Manual" in timing.CORTEX_M4.source
    assert "Cortex-M0+ Technical Reference Manual" in timing.CORTEX_M0PLUS.source
    assert "ESTIMATE" in timing.ESTIMATE_NOTE and "wait states" in timing.ESTIMATE_NOTE
    for model in timing.MODELS.values():
        rows = dict(model.table())
        assert rows and all(rows.values())
