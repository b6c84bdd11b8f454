"""Run cross-built core functions instruction by instruction (unicorn).

An :class:`Emulator` holds one unicorn CPU with the tag's memory map
(flash 0x08000000, RAM 0x20000000, 256 KiB each, as c_core/port/pfx_port.ld)
and the ELF's loadable segments (``.data`` copied to RAM as start-up code
would).  :meth:`Emulator.call` calls a function by name with AAPCS
arguments (r0-r3, 64-bit values in an even/odd register pair, the rest on
the stack), returns r0/r1 and what the call cost:

* instructions: counted from a block hook (every instruction the core
  issues, including IT-block instructions whose condition fails: they take
  a pipeline slot; unicorn's per-instruction hook, by contrast, only fires
  for those whose condition passes).  Each basic block that unicorn
  translates is disassembled once (capstone, cached by address and size);
  the hook only counts (block, next block) pairs, so every executed block
  contributes all its instructions, and the next address tells whether a
  conditional branch at its end was taken (next != fall-through address).
  Emulation stops when the PC reaches the return address (before that
  block would run), so no counted block is cut short; a fault raises.
* cycles: the :mod:`peerfix.budget.timing` model over those instructions.
  An ESTIMATE (see there): no wait states, no bus contention.
* stack: high-water mark.  The stack is filled with a pattern before the
  call and scanned afterwards: the deepest changed word, relative to the
  stack pointer at the call.

The hooks are added when the emulator is made, before anything is
translated: unicorn instruments a block when it translates it, so a hook
added later could miss blocks already in its cache.  A new configuration
(other hooks, other image) gets a fresh ``Uc``.

CPU models (unicorn 2): the harness asks for ``UC_CPU_ARM_CORTEX_M4`` for
the Cortex-M4 and ``UC_CPU_ARM_CORTEX_M0`` for the Cortex-M0+ (unicorn has no
M0+ model; both are ARMv6-M) through ``ctl_set_cpu_model``.  unicorn 2.1.4
accepts the call but keeps its default M-profile core, a Cortex-M33
(``ctl_get_cpu_model`` reports 11, and M33-only instructions such as TT
run under either request): :attr:`Emulator.cpu_model_reported` records what
unicorn says.  That core executes every ARMv6-M and ARMv7E-M instruction
with the same results, so the emulated results stand; what it does not do
is refuse instructions the tag lacks.  For the Cortex-M0+ the harness
therefore checks each block it costs and raises :class:`EmulationError` on
an instruction outside ARMv6-M (the tag would fault); the Cortex-M4 image
is compiled for the M4 only, and the build checks the M0+ image statically.
Timing never comes from unicorn: it is the table in
:mod:`peerfix.budget.timing`.
"""

from __future__ import annotations

import bisect
from dataclasses import dataclass, field
from pathlib import Path

from capstone import CS_ARCH_ARM, CS_MODE_MCLASS, CS_MODE_THUMB, Cs
from capstone import arm_const as A
from elftools.elf.elffile import ELFFile
from unicorn import (
    UC_ARCH_ARM,
    UC_HOOK_BLOCK,
    UC_HOOK_CODE,
    UC_MODE_MCLASS,
    UC_MODE_THUMB,
    UC_PROT_EXEC,
    UC_PROT_READ,
    Uc,
    UcError,
)
from unicorn import arm_const as U

from peerfix.budget.elfcode import is_armv6m
from peerfix.budget.timing import MODELS, InsnCost, TimingModel

FLASH_BASE = 0x0800_0000
FLASH_SIZE = 256 * 1024
RAM_BASE = 0x2000_0000
RAM_SIZE = 256 * 1024
RETURN_ADDR = 0x0FFF_F000  # LR of every call: a page of "b ." that is never executed
STACK_PATTERN = 0xA5  # byte the stack is filled with before a call

CPU_MODELS = {
    "cortex-m4": ("UC_CPU_ARM_CORTEX_M4", U.UC_CPU_ARM_CORTEX_M4),
    "cortex-m0plus": ("UC_CPU_ARM_CORTEX_M0", U.UC_CPU_ARM_CORTEX_M0),
}

_ARG_REGS = (U.UC_ARM_REG_R0, U.UC_ARM_REG_R1, U.UC_ARM_REG_R2, U.UC_ARM_REG_R3)
ARG_TYPES = ("i32", "u32", "i64", "u64", "ptr")


class EmulationError(RuntimeError):
    """The emulated code faulted, ran away, or did not return."""


@dataclass(frozen=True)
class Block:
    """One translated basic block, costed once."""

    addr: int
    size: int
    instructions: int
    base_cycles: int
    exit: InsnCost | None  # the control transfer ending the block, if any
    text: tuple[str, ...]  # disassembly, for reports and tests
    predicated: int = 0  # instructions inside an IT block (Cortex-M4 only)


@dataclass
class CallResult:
    r0: int
    r1: int
    value: int  # r0 (or r1:r0) read as the return type
    instructions: int
    cycles: int  # ESTIMATE, see peerfix.budget.timing
    stack_bytes: int  # high-water mark below the stack pointer at the call
    taken_branches: int = 0
    not_taken_branches: int = 0
    traced_instructions: int | None = None  # per-instruction hook count, when enabled
    predicated_instructions: int = 0  # of `instructions`, those inside IT blocks (run or skipped)
    blocks: dict[tuple[int, int], int] = field(default_factory=dict)  # (addr, size) -> times run
    per_function: dict[str, tuple[int, int]] = field(default_factory=dict)  # name -> (instructions, cycles)


def cffi_signature(ffi, func) -> tuple[tuple[str, ...], str]:
    """(argument types, return type) codes of a cffi function, for :meth:`Emulator.call`."""
    t = ffi.typeof(func)

    def code(ct) -> str:
        if ct.kind == "pointer":
            return "ptr"
        if ct.kind == "enum":
            return "i32"
        if ct.kind == "void":
            return "void"
        if ct.kind != "primitive":
            raise TypeError(f"{ct.cname}: struct arguments are not supported")
        if ct.cname in ("size_t", "uintptr_t"):
            return "u32"  # 32 bits on the target whatever the host says
        size = ffi.sizeof(ct)
        signed = int(ffi.cast(ct, -1)) < 0
        return ("i" if signed else "u") + ("64" if size == 8 else "32")

    return tuple(code(a) for a in t.args), code(t.result)


class Emulator:
    """One emulated Cortex-M with the core loaded; reuse it for many calls."""

    def __init__(
        self,
        segments: list[tuple[int, bytes]],
        symbols: dict[str, int],
        cpu: str,
        timing: TimingModel | None = None,
        stack_size: int = 8 * 1024,
        ram_free: int | None = None,
        functions: list[tuple[int, str]] | None = None,
        trace_instructions: bool = False,
    ):
        """``trace_instructions`` adds a per-instruction hook that counts
        instructions a second, independent way (slow; for checking the
        block-based count)."""
        if cpu not in CPU_MODELS:
            raise ValueError(f"unknown cpu {cpu!r}; known: {', '.join(CPU_MODELS)}")
        self.cpu = cpu
        self.cpu_model = CPU_MODELS[cpu][0]
        self.timing = timing or MODELS[cpu]
        self.symbols = dict(symbols)
        self._func_starts = sorted(functions or [(a & ~1, n) for n, a in symbols.items()])
        self._func_addrs = [a for a, _ in self._func_starts]
        self.uc = Uc(UC_ARCH_ARM, UC_MODE_THUMB | UC_MODE_MCLASS)
        self.uc.ctl_set_cpu_model(CPU_MODELS[cpu][1])  # before anything else initialises the core
        self.uc.mem_map(FLASH_BASE, FLASH_SIZE, UC_PROT_READ | UC_PROT_EXEC)  # a store to flash faults
        self.uc.mem_map(RAM_BASE, RAM_SIZE)
        self.uc.mem_map(RETURN_ADDR, 0x1000, UC_PROT_READ | UC_PROT_EXEC)
        self.uc.mem_write(RETURN_ADDR, b"\xfe\xe7" * 0x800)  # b . (never reached: emulation stops there)
        for addr, data in segments:
            self.uc.mem_write(addr, data)
        self.cpu_model_reported = _cpu_model_name(self.uc.ctl_get_cpu_model())
        self.stack_top = RAM_BASE + RAM_SIZE
        self.stack_bottom = self.stack_top - stack_size
        self.scratch_base = (ram_free if ram_free is not None else RAM_BASE) + 7 & ~7
        if not RAM_BASE <= self.scratch_base < self.stack_bottom:
            raise ValueError(f"scratch RAM at {self.scratch_base:#x} is not in RAM below the stack")
        self._scratch = self.scratch_base
        self._dirty_low = self.stack_bottom  # whole stack needs its first fill
        self._md = Cs(CS_ARCH_ARM, CS_MODE_THUMB | CS_MODE_MCLASS)
        self._md.detail = True
        self._blocks: dict[tuple[int, int], Block] = {}
        self._edges: dict = {}
        self._prev: tuple[int, int] | None = None
        self._blocks_left = 0
        self.uc.hook_add(UC_HOOK_BLOCK, self._on_block)
        self._traced: int | None = None
        if trace_instructions:
            self._traced = 0
            self.uc.hook_add(UC_HOOK_CODE, self._on_code)

    # ---- construction ----------------------------------------------------------
    @classmethod
    def from_elf(cls, elf: Path | str, cpu: str, **kw) -> "Emulator":
        segments: list[tuple[int, bytes]] = []
        symbols: dict[str, int] = {}
        functions: list[tuple[int, str]] = []
        with open(elf, "rb") as fh:
            f = ELFFile(fh)
            for seg in f.iter_segments():
                if seg["p_type"] != "PT_LOAD":
                    continue
                data = seg.data()
                segments.append((seg["p_paddr"], data))  # flash image
                if seg["p_vaddr"] != seg["p_paddr"]:
                    segments.append((seg["p_vaddr"], data))  # .data as start-up code copies it
                # .bss (memsz beyond filesz) stays zero: fresh RAM is zeroed
            for sym in f.get_section_by_name(".symtab").iter_symbols():
                if sym.name and not sym.name.startswith("$"):
                    symbols.setdefault(sym.name, sym["st_value"])
                    if sym["st_info"]["type"] == "STT_FUNC":
                        functions.append((sym["st_value"] & ~1, sym.name))
        ram_free = symbols.get("__pfx_ram_free")
        return cls(segments, symbols, cpu, ram_free=ram_free, functions=functions, **kw)

    @classmethod
    def from_code(cls, code: bytes, cpu: str, symbols: dict[str, int] | None = None, **kw) -> "Emulator":
        """Machine code placed at the start of flash (for testing the harness itself)."""
        syms = {"start": FLASH_BASE | 1}
        syms.update({k: FLASH_BASE + v for k, v in (symbols or {}).items()})
        return cls([(FLASH_BASE, code)], syms, cpu, **kw)

    # ---- memory ----------------------------------------------------------------
    def alloc(self, size: int, align: int = 8) -> int:
        """A scratch buffer in RAM (below the stack), zeroed; freed by reset_scratch()."""
        addr = (self._scratch + align - 1) & ~(align - 1)
        if addr + size > self.stack_bottom:
            raise MemoryError(f"scratch RAM exhausted ({size} bytes asked)")
        self._scratch = addr + size
        self.uc.mem_write(addr, bytes(size))
        return addr

    def alloc_bytes(self, data: bytes, align: int = 8) -> int:
        addr = self.alloc(len(data), align)
        self.uc.mem_write(addr, bytes(data))
        return addr

    def reset_scratch(self) -> None:
        self._scratch = self.scratch_base

    def write(self, addr: int, data: bytes) -> None:
        self.uc.mem_write(addr, bytes(data))

    def read(self, addr: int, size: int) -> bytes:
        return bytes(self.uc.mem_read(addr, size))

    def address(self, name: str) -> int:
        """Address of a symbol (Thumb bit cleared)."""
        try:
            return self.symbols[name] & ~1
        except KeyError:
            raise KeyError(f"no symbol {name} in the image") from None

    # ---- calls -----------------------------------------------------------------
    def call(
        self,
        func: str | int,
        *args: int,
        argtypes: tuple[str, ...] | None = None,
        restype: str = "u32",
        max_blocks: int = 20_000_000,
    ) -> CallResult:
        """Call ``func`` (name or address) with integer arguments (pointers as addresses).

        ``max_blocks`` bounds the run (a runaway loop raises EmulationError); a
        counter in the block hook is far cheaper than unicorn's timeout, which
        starts a thread per call."""
        entry = self.address(func) if isinstance(func, str) else func & ~1
        argtypes = argtypes or ("u32",) * len(args)
        if len(argtypes) != len(args):
            raise ValueError(f"{len(args)} arguments, {len(argtypes)} argument types")
        regs, stack_words = _marshal(args, argtypes)
        stack_args = len(stack_words) * 4
        sp = (self.stack_top - stack_args - 64) & ~7  # AAPCS: 8-byte aligned at a call
        uc = self.uc
        # Refill only the part of the stack dirtied by earlier calls.
        if self._dirty_low < self.stack_top:
            uc.mem_write(self._dirty_low, bytes([STACK_PATTERN]) * (self.stack_top - self._dirty_low))
        for i, word in enumerate(stack_words):
            uc.mem_write(sp + 4 * i, word.to_bytes(4, "little"))
        # r4-r11 keep whatever the last call left: callee-saved, the code must not read them
        regs = regs + [0] * (4 - len(regs))
        for reg, value in zip(_ARG_REGS, regs):
            uc.reg_write(reg, value)
        uc.reg_write(U.UC_ARM_REG_SP, sp)
        uc.reg_write(U.UC_ARM_REG_LR, RETURN_ADDR | 1)
        self._edges = {}
        self._prev = None
        self._blocks_left = max_blocks
        if self._traced is not None:
            self._traced = 0
        self._dirty_low = self.stack_bottom  # until the scan below says better (a fault may dirty it all)
        try:
            uc.emu_start(entry | 1, RETURN_ADDR)
        except UcError as err:
            pc = uc.reg_read(U.UC_ARM_REG_PC)
            raise EmulationError(f"{err} at pc={pc:#010x} ({self.where(pc)}) calling {func}") from None
        pc = uc.reg_read(U.UC_ARM_REG_PC)
        if pc != RETURN_ADDR:
            raise EmulationError(f"{func} did not return within {max_blocks} blocks (pc={pc:#010x}, {self.where(pc)})")
        if self._prev is not None:
            key = (self._prev, RETURN_ADDR)
            self._edges[key] = self._edges.get(key, 0) + 1
        low = self._stack_low()
        self._dirty_low = low
        r0 = uc.reg_read(U.UC_ARM_REG_R0)
        r1 = uc.reg_read(U.UC_ARM_REG_R1)
        result = CallResult(r0=r0, r1=r1, value=_decode(r0, r1, restype), instructions=0, cycles=0,
                            stack_bytes=max(0, sp - low), traced_instructions=self._traced)
        self._account(result)
        return result

    def where(self, addr: int) -> str:
        """symbol+offset of a code address."""
        i = bisect.bisect_right(self._func_addrs, addr & ~1) - 1
        if i < 0:
            return "?"
        start, name = self._func_starts[i]
        return f"{name}+{(addr & ~1) - start:#x}"

    def block(self, addr: int, size: int) -> Block:
        """The costed block at (addr, size), disassembling it on first use."""
        key = (addr, size)
        blk = self._blocks.get(key)
        if blk is None:
            blk = self._blocks[key] = self._analyse_block(addr, size)
        return blk

    # ---- internals -------------------------------------------------------------
    def _on_block(self, uc, addr, size, _user) -> None:
        key = (self._prev, addr)
        edges = self._edges
        edges[key] = edges.get(key, 0) + 1
        self._prev = (addr, size)
        self._blocks_left -= 1
        if self._blocks_left < 0:
            uc.emu_stop()

    def _on_code(self, uc, addr, size, _user) -> None:
        self._traced += 1

    def _stack_low(self) -> int:
        """Lowest stack address written since the fill (word-aligned)."""
        data = self.read(self.stack_bottom, self.stack_top - self.stack_bottom)
        untouched = len(data) - len(data.lstrip(bytes([STACK_PATTERN])))
        if untouched == 0:
            raise EmulationError("stack overflow: the whole emulated stack was used")
        return self.stack_bottom + (untouched & ~3)

    def _analyse_block(self, addr: int, size: int) -> Block:
        code = self.read(addr, size)
        insns = list(self._md.disasm(code, addr))
        if sum(i.size for i in insns) != size:
            raise EmulationError(f"cannot disassemble the block at {addr:#x}+{size} ({self.where(addr)})")
        if self.cpu == "cortex-m0plus":
            bad = [i for i in insns if not is_armv6m(i)]
            if bad:
                raise EmulationError(f"not ARMv6-M at {bad[0].address:#x} ({self.where(bad[0].address)}): "
                                     f"{bad[0].mnemonic} {bad[0].op_str}; a Cortex-M0+ faults here")
        base = 0
        previous = None
        cost = None
        for insn in insns:
            cost = self.timing.cost(insn, previous)
            base += cost.base
            previous = insn
        # unicorn ends a block at every control transfer, so only the last
        # instruction can be one
        exit_cost = cost if cost is not None and cost.writes_pc else None
        predicated = sum(1 for i in insns if i.cc not in (A.ARM_CC_AL, A.ARM_CC_INVALID)
                         and i.id not in (A.ARM_INS_B, A.ARM_INS_CBZ, A.ARM_INS_CBNZ))
        return Block(addr, size, len(insns), base, exit_cost,
                     tuple(f"{i.address:#x} {i.mnemonic} {i.op_str}".rstrip() for i in insns), predicated)

    def _account(self, result: CallResult) -> None:
        blocks: dict[tuple[int, int], int] = {}
        per_function: dict[str, list[int]] = {}
        for (prev, nxt), count in self._edges.items():
            if prev is None:
                continue
            blk = self.block(*prev)
            blocks[prev] = blocks.get(prev, 0) + count
            cycles = blk.base_cycles
            exit_ = blk.exit
            if exit_ is not None:
                if exit_.conditional:
                    if nxt != blk.addr + blk.size:
                        cycles += exit_.taken_extra
                        result.taken_branches += count
                    else:
                        result.not_taken_branches += count
                else:
                    result.taken_branches += count
            result.instructions += blk.instructions * count
            result.predicated_instructions += blk.predicated * count
            result.cycles += cycles * count
            acc = per_function.setdefault(self.where(blk.addr).split("+")[0], [0, 0])
            acc[0] += blk.instructions * count
            acc[1] += cycles * count
        result.blocks = blocks
        result.per_function = {k: (v[0], v[1]) for k, v in per_function.items()}


def _cpu_model_name(value: int) -> str:
    names = [n for n in dir(U) if n.startswith("UC_CPU_ARM_") and getattr(U, n) == value
             and n not in ("UC_CPU_ARM_ENDING", "UC_CPU_ARM_MAX")]
    return names[0] if names else str(value)


def _marshal(args: tuple[int, ...], argtypes: tuple[str, ...]) -> tuple[list[int], list[int]]:
    """AAPCS base standard: core registers r0-r3, 64-bit values in an even
    register pair (r0:r1 or r2:r3, low word first); once an argument goes to
    the stack, so do all that follow; 64-bit stack slots are 8-byte aligned."""
    regs: list[int] = []
    stack: list[int] = []
    ncrn = 0
    for value, kind in zip(args, argtypes):
        if kind not in ARG_TYPES:
            raise ValueError(f"unknown argument type {kind!r}; known: {', '.join(ARG_TYPES)}")
        if kind in ("i64", "u64"):
            v = value & 0xFFFF_FFFF_FFFF_FFFF
            words = [v & 0xFFFF_FFFF, v >> 32]
            if ncrn % 2:
                ncrn += 1
            if ncrn <= 2:
                while len(regs) < ncrn:
                    regs.append(0)
                regs.extend(words)
                ncrn += 2
            else:
                ncrn = 4
                if len(stack) % 2:
                    stack.append(0)
                stack.extend(words)
        else:
            word = value & 0xFFFF_FFFF
            if ncrn < 4:
                while len(regs) < ncrn:
                    regs.append(0)
                regs.append(word)
                ncrn += 1
            else:
                stack.append(word)
    return regs, stack


def _decode(r0: int, r1: int, restype: str) -> int:
    if restype in ("u32", "ptr"):
        return r0
    if restype == "i32":
        return r0 - (1 << 32) if r0 & 0x8000_0000 else r0
    if restype in ("u64", "i64"):
        v = (r1 << 32) | r0
        if restype == "i64" and v & (1 << 63):
            v -= 1 << 64
        return v
    if restype == "void":
        return 0
    raise ValueError(f"unknown return type {restype!r}")
