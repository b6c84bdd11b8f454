"""The emulator harness on hand-written Thumb code with hand-worked counts.

Every program here is machine code written out by hand (encodings from the
ARMv7-M / ARMv6-M Architecture Reference Manual Thumb encoding tables; the
16-bit ones are valid on both cores).  Cycle expectations use the model's
documented table (peerfix.budget.timing): Cortex-M4 with P = 2 (taken
branch 3 cycles, BX 3, POP {.., pc} 1 + N + 2), Cortex-M0+ with taken B<cc>
2, BL 3, BX 2, POP {.., pc} 3 + N.
"""

from __future__ import annotations

import struct

import pytest

from .support import needs_unicorn

pytestmark = needs_unicorn


def thumb(*halfwords: int) -> bytes:
    return struct.pack(f"<{len(halfwords)}H", *halfwords)


# r0 = N >= 1 iterations; returns N in r0.
#   0: movs r1, #0      2100
#   2: adds r1, #1      3101   <- loop
#   4: subs r0, #1      3801
#   6: bne  2           D1FC   (offset 2 - (6 + 4) = -8 -> imm8 -4)
#   8: movs r0, r1      0008
#  10: bx   lr          4770
COUNT_LOOP = thumb(0x2100, 0x3101, 0x3801, 0xD1FC, 0x0008, 0x4770)

# returns 5 unless r0 == 0 (then 0): one conditional branch, taken iff r0 == 0.
#   0: cmp  r0, #0      2800
#   2: beq  6           D000   (offset 6 - (2 + 4) = 0)
#   4: movs r0, #5      2005
#   6: bx   lr          4770
BRANCH = thumb(0x2800, 0xD000, 0x2005, 0x4770)

# r0 = pointer p; returns p[0] + p[1] and stores p[0] to p[2], through a call.
#   0: push {r4, lr}        B510
#   2: ldr  r1, [r0, #0]    6801
#   4: ldr  r2, [r0, #4]    6842
#   6: str  r1, [r0, #8]    6081
#   8: bl   14              F000 F801   (offset 14 - (8 + 4) = 2)
#  12: pop  {r4, pc}        BD10
#  14: adds r0, r1, r2      1888        <- callee
#  16: bx   lr              4770
CALL = thumb(0xB510, 0x6801, 0x6842, 0x6081, 0xF000, 0xF801, 0xBD10, 0x1888, 0x4770)

# udiv r0, r0, r1 (Thumb-2, not in ARMv6-M); bx lr
UDIV = thumb(0xFBB0, 0xF0F1, 0x4770)


def emulator(code: bytes, cpu: str, **kw):
    from peerfix.budget.emulator import Emulator

    return Emulator.from_code(code, cpu, **kw)


@pytest.mark.parametrize("cpu", ["cortex-m4", "cortex-m0plus"])
@pytest.mark.parametrize("n", [1, 2, 10, 1000])
def test_counted_loop_exact_instructions_and_cycles(cpu, n):
    em = emulator(COUNT_LOOP, cpu, trace_instructions=True)
    res = em.call("start", n)
    assert res.value == n
    # movs + N * (adds, subs, bne) + movs + bx
    assert res.instructions == 3 * n + 3
    assert res.traced_instructions == res.instructions  # per-instruction hook agrees
    # bne taken N - 1 times, falls through once; bx always taken
    assert (res.taken_branches, res.not_taken_branches) == (n, 1)
    if cpu == "cortex-m4":
        # 1 + N * 2 + (N - 1) * 3 + 1 (bne not taken) + 1 + 3 (bx)
        assert res.cycles == 5 * n + 3
    else:
        # 1 + N * 2 + (N - 1) * 2 + 1 + 1 + 2 (bx)
        assert res.cycles == 4 * n + 3
    assert res.stack_bytes == 0  # touches no memory


@pytest.mark.parametrize(
    "cpu, r0, want, insns, cycles, taken, not_taken",
    [
        ("cortex-m4", 0, 0, 3, 1 + 3 + 3, 2, 0),  # cmp, beq taken (1 + P), bx (1 + P)
        ("cortex-m4", 7, 5, 4, 1 + 1 + 1 + 3, 1, 1),  # beq falls through (1), movs, bx
        ("cortex-m0plus", 0, 0, 3, 1 + 2 + 2, 2, 0),
        ("cortex-m0plus", 7, 5, 4, 1 + 1 + 1 + 2, 1, 1),
    ],
)
def test_taken_and_not_taken_branch(cpu, r0, want, insns, cycles, taken, not_taken):
    res = emulator(BRANCH, cpu).call("start", r0)
    assert (res.value, res.instructions, res.cycles) == (want, insns, cycles)
    assert (res.taken_branches, res.not_taken_branches) == (taken, not_taken)


@pytest.mark.parametrize(
    "cpu, cycles",
    [
        # push 1+2, ldr 2, ldr 1 and str 1 (pipelined after a load), bl 1+2, adds 1,
        # bx 1+2, pop {r4, pc} 1+2+2
        ("cortex-m4", 3 + 2 + 1 + 1 + 3 + 1 + 3 + 5),
        # push 1+2, ldr 2, ldr 2, str 2, bl 3, adds 1, bx 2, pop {r4, pc} 3+1
        ("cortex-m0plus", 3 + 2 + 2 + 2 + 3 + 1 + 2 + 4),
    ],
)
def test_call_loads_stores_and_stack_mark(cpu, cycles):
    em = emulator(CALL, cpu)
    p = em.alloc_bytes(struct.pack("<3I", 40, 2, 0))
    res = em.call("start", p, argtypes=("ptr",))
    assert res.value == 42
    assert struct.unpack("<3I", em.read(p, 12)) == (40, 2, 40)
    assert res.instructions == 8
    assert res.cycles == cycles
    assert res.stack_bytes == 8  # push {r4, lr}
    assert set(res.per_function) == {"start"}


def test_cortex_m0plus_rejects_armv7m_instructions():
    """udiv is Thumb-2: the Cortex-M4 runs it (12 cycles, the stated worst
    case, + bx 3).  unicorn's M0 model would run it too (its decoder does not
    check the architecture), so the harness refuses it for the Cortex-M0+, as
    the tag would fault; likewise the 16-bit ARMv7-M additions IT and CBZ."""
    from peerfix.budget.emulator import EmulationError

    res = emulator(UDIV, "cortex-m4").call("start", 100, 7)
    assert (res.value, res.instructions, res.cycles) == (14, 2, 12 + 3)
    it_eq = thumb(0xBF08, 0x2001, 0x4770)  # it eq; moveq r0, #1; bx lr
    cbz = thumb(0xB100, 0x2001, 0x4770)  # cbz r0, +0; movs r0, #1; bx lr
    for code in (UDIV, it_eq, cbz):
        assert emulator(code, "cortex-m4").call("start", 100, 7).instructions >= 2
        with pytest.raises(EmulationError, match="not ARMv6-M"):
            emulator(code, "cortex-m0plus").call("start", 100, 7)


def test_aapcs_64_bit_arguments():
    """AAPCS: an int64 after one int32 skips r1 and takes r2:r3; after three
    int32 it goes to the stack (8-byte aligned), low word first."""
    from peerfix.budget.emulator import _marshal

    assert _marshal((1, 2), ("i32", "i64")) == ([1, 0, 2, 0], [])
    assert _marshal((1, 2, 3, 4), ("i32", "i32", "i32", "i64")) == ([1, 2, 3], [4, 0])
    assert _marshal((-1, 5), ("i64", "i32")) == ([0xFFFFFFFF, 0xFFFFFFFF, 5], [])
    assert _marshal((1, 2, 3, 4, 5), ("i64", "i64", "i32", "i32", "u32")) == ([1, 0, 2, 0], [3, 4, 5])
    value = -0x123456789AB
    # movs r0, r2 (0010); movs r1, r3 (0019); bx lr: returns the r2:r3 pair
    res = emulator(thumb(0x0010, 0x0019, 0x4770), "cortex-m4").call(
        "start", 7, value, argtypes=("i32", "i64"), restype="i64")  # fmt: skip
    assert res.value == value
    # ldr r0, [sp, #0] (9800); ldr r1, [sp, #4] (9901); bx lr: returns the first stack slot pair
    res = emulator(thumb(0x9800, 0x9901, 0x4770), "cortex-m0plus").call(
        "start", 1, 2, 3, value, argtypes=("i32", "i32", "i32", "i64"), restype="i64")  # fmt: skip
    assert res.value == value


def test_runaway_code_is_stopped():
    from peerfix.budget.emulator import EmulationError

    with pytest.raises(EmulationError, match="did not return"):
        emulator(thumb(0xE7FE), "cortex-m4").call("start", max_blocks=1000)  # b .


def test_block_cache_disassembles_each_block_once():
    em = emulator(COUNT_LOOP, "cortex-m4")
    em.call("start", 50)
    blocks = dict(em._blocks)
    res = em.call("start", 50)
    assert em._blocks == blocks  # nothing new translated or costed
    # entry block [0, 8), loop block [2, 8), exit block [8, 12)
    assert res.blocks == {(0x0800_0000, 8): 1, (0x0800_0002, 6): 49, (0x0800_0008, 4): 1}


def test_store_to_flash_faults():
    from peerfix.budget.emulator import FLASH_BASE, EmulationError

    with pytest.raises(EmulationError, match="start"):
        emulator(thumb(0x6001, 0x4770), "cortex-m4").call("start", FLASH_BASE)  # str r1, [r0]; bx lr


def test_cpu_model_requested_and_reported():
    """The model asked of unicorn, and the one it reports (unicorn 2.1.4 keeps
    its default Cortex-M33; see the emulator docstring): recorded, not hidden."""
    m4, m0 = emulator(thumb(0x4770), "cortex-m4"), emulator(thumb(0x4770), "cortex-m0plus")
    assert (m4.cpu_model, m0.cpu_model) == ("UC_CPU_ARM_CORTEX_M4", "UC_CPU_ARM_CORTEX_M0")
    assert m4.cpu_model_reported.startswith("UC_CPU_ARM_CORTEX_M")
    assert m0.cpu_model_reported.startswith("UC_CPU_ARM_CORTEX_M")
