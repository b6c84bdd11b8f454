"""Cycle model: cycles per executed instruction on Cortex-M4 and Cortex-M0+.

THE CYCLE FIGURE IS AN ESTIMATE.  It is the sum of the processor's
documented per-instruction cycle counts over the instructions that the
emulator executed, for a system with zero wait states.  It leaves out flash
wait states and flash accelerators, bus contention, caches, interrupts and
every pipeline effect not listed below.  Real parts with slow flash take more.

Sources
-------
Cortex-M4: Arm Cortex-M4 Technical Reference Manual (Arm DDI 0439),
"Processor instruction timings" table (values as collected in
shared/reference/check-values.md; the same table is reproduced in vendor
manuals, e.g. TI SWCU192 table 3-25, which the project consulted).  Rows we
use: data processing, shifts, logic, MOV, CLZ, saturation, extend: 1;
MUL/MLA/MLS and SMULL/UMULL/SMLAL/UMLAL: 1; SDIV/UDIV: 2 to 12 (early
termination); LDR/STR single: 2, neighbouring single loads/stores pipeline
(N back-to-back take N + 1); LDRD/STRD, LDM/STM, PUSH/POP: 1 + N; a write
to the PC (taken branch, BX, BL, POP {..., pc}, LDR pc): + P pipeline
refill, P = 1 to 3; TBB/TBH: 2 + P; not-taken conditional branch: 1.
The LDRD/STRD, TBB/TBH and "write to PC adds P" rows are recalled from the
TRM (from memory), not read off a copy.

Choices of this model (stated, each an input of :class:`TimingModel`):
  * P = 2 for every taken branch (middle of 1..3): a taken B costs 3.
  * SDIV/UDIV cost their worst case, 12 (no operand-based early termination).
  * Load/store pipelining: inside one basic block, a single LDR*/STR* right
    after another single LDR*/STR* costs 1 instead of 2 (so N in a row cost
    N + 1).  Loads into the PC are not pipelined.
  * IT costs 1 (the TRM allows it to be folded onto the previous 16-bit
    instruction, i.e. 0: the model errs on the slow side).
  * An instruction inside an IT block whose condition fails is costed as if
    it executed (upper bound; the emulator does not look at the flags).

Cortex-M0+: Arm Cortex-M0+ Technical Reference Manual (Arm DDI 0484C), table
3.1 "Cortex-M0+ instruction summary" (found through the project's search
of stored pages).  Rows used: data processing, shifts, logic, extend,
reverse: 1; MULS: 1 (the fast single-cycle multiplier option; the small
multiplier option takes 32); LDR*/STR*: 2 (1 only for the single-cycle I/O
port, which the core does not use); LDM/STM, PUSH, POP: 1 + N; MOV/ADD to
PC: 2.  Branch and return rows, recalled from the same table (from memory):
B<cc>: 1 not taken, 2 taken; B: 2; BL: 3; BX, BLX: 2; POP {..., pc}: 3 + N
with N the registers other than the PC.  No pipelining of loads and no
divide instruction (libgcc's division helpers run in the emulator and are
counted instruction by instruction like any other code).
"""

from __future__ import annotations

from dataclasses import dataclass, field

from capstone import CsInsn
from capstone import arm_const as A

ESTIMATE_NOTE = (
    "cycle figures are an ESTIMATE: documented per-instruction cycle counts "
    "(zero wait states) summed over the emulated instructions; flash wait states, "
    "bus contention, caches and interrupts are left out"
)

_LOAD_STORE_SINGLE = frozenset(
    {
        A.ARM_INS_LDR, A.ARM_INS_LDRB, A.ARM_INS_LDRH, A.ARM_INS_LDRSB, A.ARM_INS_LDRSH,
        A.ARM_INS_STR, A.ARM_INS_STRB, A.ARM_INS_STRH,
        A.ARM_INS_LDRT, A.ARM_INS_LDRBT, A.ARM_INS_LDREX,
    }
)
_LOAD_STORE_DOUBLE = frozenset({A.ARM_INS_LDRD, A.ARM_INS_STRD})
_MULTIPLE = frozenset(
    {A.ARM_INS_LDM, A.ARM_INS_LDMDB, A.ARM_INS_STM, A.ARM_INS_STMDB, A.ARM_INS_PUSH, A.ARM_INS_POP}
)
_DIVIDE = frozenset({A.ARM_INS_SDIV, A.ARM_INS_UDIV})
_COND_BRANCH_ALWAYS = frozenset({A.ARM_INS_CBZ, A.ARM_INS_CBNZ})
_TABLE_BRANCH = frozenset({A.ARM_INS_TBB, A.ARM_INS_TBH})
_CALLS = frozenset({A.ARM_INS_BL, A.ARM_INS_BLX})


@dataclass(frozen=True)
class InsnCost:
    """Cost of one instruction: ``base`` cycles, plus ``taken_extra`` when it
    transfers control.  ``conditional`` says whether it may fall through (then
    the emulator decides taken / not taken from the next executed address)."""

    base: int
    taken_extra: int = 0
    writes_pc: bool = False
    conditional: bool = False
    kind: str = "alu"


def _is_conditional(insn: CsInsn) -> bool:
    return insn.cc not in (A.ARM_CC_AL, A.ARM_CC_INVALID)


def _reg_list_count(insn: CsInsn) -> tuple[int, bool]:
    """Registers transferred by LDM/STM/PUSH/POP and whether the PC is one."""
    regs = [op.reg for op in insn.operands if op.type == A.ARM_OP_REG]
    if insn.id in (A.ARM_INS_LDM, A.ARM_INS_LDMDB, A.ARM_INS_STM, A.ARM_INS_STMDB):
        regs = regs[1:]  # the first operand is the base register
    return len(regs), A.ARM_REG_PC in regs


def _dest_is_pc(insn: CsInsn) -> bool:
    ops = insn.operands
    return bool(ops) and ops[0].type == A.ARM_OP_REG and ops[0].reg == A.ARM_REG_PC


@dataclass(frozen=True)
class TimingModel:
    """Per-instruction cycle table of one processor (see the module docstring)."""

    name: str
    source: str
    branch_refill: int  # P of the Cortex-M4 table; unused for the M0+
    divide_cycles: int = 12
    multiply_cycles: int = 1
    pipeline_loads: bool = True
    notes: tuple[str, ...] = field(default_factory=tuple)

    def cost(self, insn: CsInsn, previous: CsInsn | None) -> InsnCost:
        """Cost of ``insn``; ``previous`` is the instruction before it in the
        same basic block (None at a block start), for load pipelining."""
        if self.name == "cortex-m4":
            return self._cost_m4(insn, previous)
        return self._cost_m0plus(insn)

    # ---- Cortex-M4 -----------------------------------------------------------------
    def _cost_m4(self, insn: CsInsn, previous: CsInsn | None) -> InsnCost:
        p = self.branch_refill
        iid = insn.id
        cond = _is_conditional(insn)
        if iid == A.ARM_INS_B:
            if cond:
                return InsnCost(1, p, True, True, "branch")
            return InsnCost(1 + p, 0, True, False, "branch")
        if iid in _COND_BRANCH_ALWAYS:
            return InsnCost(1, p, True, True, "branch")
        if iid in _CALLS:
            return InsnCost(1 + p if not cond else 1, p if cond else 0, True, cond, "call")
        if iid == A.ARM_INS_BX:
            return InsnCost(1 + p if not cond else 1, p if cond else 0, True, cond, "return")
        if iid in _TABLE_BRANCH:
            return InsnCost(2 + p, 0, True, False, "branch")
        if iid in _MULTIPLE:
            n, has_pc = _reg_list_count(insn)
            if has_pc:
                return InsnCost(1 + n if cond else 1 + n + p, p if cond else 0, True, cond, "return")
            return InsnCost(1 + n, kind="multiple")
        if iid in _LOAD_STORE_DOUBLE:
            return InsnCost(3, kind="load_store")
        if iid in _LOAD_STORE_SINGLE:
            if _dest_is_pc(insn):
                return InsnCost(2 if cond else 2 + p, p if cond else 0, True, cond, "branch")
            pipelined = (
                self.pipeline_loads
                and previous is not None
                and previous.id in _LOAD_STORE_SINGLE
                and not _dest_is_pc(previous)
            )
            return InsnCost(1 if pipelined else 2, kind="load_store")
        if iid in _DIVIDE:
            return InsnCost(self.divide_cycles, kind="divide")
        if _dest_is_pc(insn) and iid in (A.ARM_INS_MOV, A.ARM_INS_ADD):
            return InsnCost(1 if cond else 1 + p, p if cond else 0, True, cond, "branch")
        if iid in (A.ARM_INS_MUL, A.ARM_INS_MLA, A.ARM_INS_MLS, A.ARM_INS_SMULL, A.ARM_INS_UMULL,
                   A.ARM_INS_SMLAL, A.ARM_INS_UMLAL):
            return InsnCost(self.multiply_cycles, kind="multiply")
        return InsnCost(1)

    # ---- Cortex-M0+ ----------------------------------------------------------------
    def _cost_m0plus(self, insn: CsInsn) -> InsnCost:
        iid = insn.id
        cond = _is_conditional(insn)
        if iid == A.ARM_INS_B:
            return InsnCost(1, 1, True, True, "branch") if cond else InsnCost(2, 0, True, False, "branch")
        if iid == A.ARM_INS_BL:
            return InsnCost(3, 0, True, False, "call")
        if iid == A.ARM_INS_BLX:
            return InsnCost(2, 0, True, False, "call")
        if iid == A.ARM_INS_BX:
            return InsnCost(2, 0, True, False, "return")
        if iid in _MULTIPLE:
            n, has_pc = _reg_list_count(insn)
            if has_pc:
                return InsnCost(3 + (n - 1), 0, True, False, "return")
            return InsnCost(1 + n, kind="multiple")
        if iid in _LOAD_STORE_SINGLE:
            return InsnCost(2, kind="load_store")
        if _dest_is_pc(insn) and iid in (A.ARM_INS_MOV, A.ARM_INS_ADD):
            return InsnCost(2, 0, True, False, "branch")
        if iid == A.ARM_INS_MUL:
            return InsnCost(self.multiply_cycles, kind="multiply")
        return InsnCost(1)

    def table(self) -> list[tuple[str, str]]:
        """The model as (instruction class, cycles) rows, for reports."""
        if self.name == "cortex-m4":
            p = self.branch_refill
            return [
                ("ADD, SUB, MOV, logic, shifts, compare, extend, CLZ, IT", "1"),
                ("MUL, MLA, MLS, SMULL, UMULL, SMLAL, UMLAL", str(self.multiply_cycles)),
                ("SDIV, UDIV", f"{self.divide_cycles} (worst case of 2..12)"),
                ("LDR/STR single", "2; 1 when right after another single LDR/STR (N in a row: N + 1)"
                 if self.pipeline_loads else "2"),
                ("LDRD, STRD", "3 (1 + N, N = 2)"),
                ("LDM, STM, PUSH, POP", "1 + N"),
                ("B<cc>, CBZ, CBNZ", f"1 not taken, {1 + p} taken (1 + P, P = {p})"),
                ("B, BL, BX, BLX, MOV/ADD pc", f"{1 + p} (1 + P)"),
                ("POP/LDM with pc", f"1 + N + {p}"),
                ("LDR pc", f"{2 + p} (2 + P)"),
                ("TBB, TBH", f"{2 + p} (2 + P)"),
            ]
        return [
            ("ADDS, SUBS, MOVS, logic, shifts, compare, extend, reverse", "1"),
            ("MULS", f"{self.multiply_cycles} (fast multiplier option)"),
            ("LDR*/STR* single", "2"),
            ("LDM, STM, PUSH, POP", "1 + N"),
            ("POP with pc", "3 + N (N: registers other than pc)"),
            ("B<cc>", "1 not taken, 2 taken"),
            ("B", "2"),
            ("BL", "3"),
            ("BX, BLX, MOV/ADD pc", "2"),
        ]


CORTEX_M4 = TimingModel(
    name="cortex-m4",
    source="Arm Cortex-M4 Technical Reference Manual (DDI 0439), processor instruction timings",
    branch_refill=2,
    divide_cycles=12,
    notes=(
        "P = 2 for every taken branch",
        "SDIV/UDIV at their worst case, 12 cycles",
        "back-to-back single LDR/STR in a basic block: N + 1",
        "IT costs 1 (never folded); failed IT-block instructions costed as executed",
    ),
)

CORTEX_M0PLUS = TimingModel(
    name="cortex-m0plus",
    source="Arm Cortex-M0+ Technical Reference Manual (DDI 0484C), table 3.1",
    branch_refill=1,
    notes=(
        "MULS 1 cycle: the fast multiplier option",
        "branch and pop-with-pc rows recalled from the table (from memory)",
    ),
)

MODELS: dict[str, TimingModel] = {m.name: m for m in (CORTEX_M4, CORTEX_M0PLUS)}
