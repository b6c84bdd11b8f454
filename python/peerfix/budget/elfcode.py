"""The code of a linked Cortex-M ELF, function by function.

Reads the function symbols (with the source file of local ones, from the
STT_FILE symbols that precede them), the Arm mapping symbols (``$t`` code,
``$d`` literal pools) and ``.text``, and disassembles a function's code
ranges with capstone.  Shared by the stack analysis and the instruction-set
check of the build.
"""

from __future__ import annotations

import bisect
import re
from collections.abc import Iterator
from dataclasses import dataclass, field
from pathlib import Path

from capstone import CS_ARCH_ARM, CS_MODE_MCLASS, CS_MODE_THUMB, Cs, CsInsn
from capstone import arm_const as A
from elftools.elf.elffile import ELFFile

_MAPPING = re.compile(r"^\$[tda](\.|$)")

# The only 32-bit instructions of ARMv6-M (Cortex-M0/M0+); everything else is 16-bit.
ARMV6M_WIDE = frozenset({A.ARM_INS_BL, A.ARM_INS_MRS, A.ARM_INS_MSR, A.ARM_INS_DMB, A.ARM_INS_DSB, A.ARM_INS_ISB})
# 16-bit Thumb instructions that ARMv7-M added and ARMv6-M lacks.
ARMV7M_ONLY_NARROW = frozenset({A.ARM_INS_IT, A.ARM_INS_CBZ, A.ARM_INS_CBNZ})


def is_armv6m(insn: CsInsn) -> bool:
    """Whether a decoded Thumb instruction exists in ARMv6-M."""
    if insn.size == 4:
        return insn.id in ARMV6M_WIDE
    return insn.id not in ARMV7M_ONLY_NARROW


@dataclass
class FunctionSym:
    name: str
    addr: int  # even address of the first instruction
    size: int
    file: str | None  # source file of a local symbol, None for a global
    thumb: bool  # bit 0 of the symbol value: Thumb state (False: Arm state)
    aliases: set[str] = field(default_factory=set)


@dataclass
class CodeImage:
    base: int
    code: bytes
    functions: dict[int, FunctionSym]
    mapping: list[tuple[int, str]]  # (address, "$t" | "$d" | "$a"), sorted

    def by_name(self) -> dict[str, list[FunctionSym]]:
        out: dict[str, list[FunctionSym]] = {}
        for fn in self.functions.values():
            for name in {fn.name} | fn.aliases:
                out.setdefault(name, []).append(fn)
        return out

    def code_ranges(self, fn: FunctionSym) -> list[tuple[int, int]]:
        """The parts of fn that are code, skipping literal pools ($d)."""
        start, end = fn.addr, fn.addr + fn.size
        keys = [a for a, _ in self.mapping]
        i = bisect.bisect_right(keys, start) - 1
        state = self.mapping[i][1] if i >= 0 else "$t"
        ranges: list[tuple[int, int]] = []
        pos, j = start, i + 1
        while pos < end:
            inside = j < len(self.mapping) and self.mapping[j][0] < end
            nxt = self.mapping[j][0] if inside else end
            if state == "$t" and nxt > pos:
                ranges.append((pos, nxt))
            if inside:
                state = self.mapping[j][1]
                j += 1
            pos = nxt
        return ranges

    def instructions(self, fn: FunctionSym, md: Cs | None = None) -> Iterator[CsInsn]:
        md = md or disassembler()
        for start, end in self.code_ranges(fn):
            yield from md.disasm(self.code[start - self.base : end - self.base], start)


def disassembler() -> Cs:
    md = Cs(CS_ARCH_ARM, CS_MODE_THUMB | CS_MODE_MCLASS)
    md.detail = True
    return md


def read_image(elf: Path) -> CodeImage:
    with open(elf, "rb") as fh:
        f = ELFFile(fh)
        text = f.get_section_by_name(".text")
        text_index = next(i for i, sec in enumerate(f.iter_sections()) if sec.name == ".text")
        base = text["sh_addr"]
        code = text.data()
        funcs: dict[int, FunctionSym] = {}
        mapping: list[tuple[int, str]] = []
        current_file: str | None = None
        for sym in f.get_section_by_name(".symtab").iter_symbols():
            kind = sym["st_info"]["type"]
            if kind == "STT_FILE":
                current_file = sym.name
                continue
            if _MAPPING.match(sym.name):
                if sym["st_shndx"] == text_index:
                    mapping.append((sym["st_value"] & ~1, sym.name[:2]))
                continue
            if kind != "STT_FUNC":
                continue
            addr = sym["st_value"] & ~1
            local = sym["st_info"]["bind"] == "STB_LOCAL"
            fn = funcs.get(addr)
            if fn is None:
                funcs[addr] = FunctionSym(sym.name, addr, sym["st_size"], current_file if local else None,
                                          bool(sym["st_value"] & 1))
            else:
                fn.aliases.add(sym.name)
                fn.size = max(fn.size, sym["st_size"])
    # Zero-size symbols (hand-written assembly): the room up to the next function.
    starts = sorted(funcs)
    for i, addr in enumerate(starts):
        if funcs[addr].size == 0:
            end = starts[i + 1] if i + 1 < len(starts) else base + len(code)
            funcs[addr].size = end - addr
    mapping.sort()
    return CodeImage(base, code, funcs, mapping)


def armv6m_violations(elf: Path, names: list[str] | None = None) -> list[str]:
    """Code a Cortex-M0+ cannot run: Arm-state functions, 32-bit Thumb
    instructions outside ARMv6-M's six (BL, MRS, MSR, DMB, DSB, ISB), and
    the 16-bit IT, CBZ, CBNZ.
    ``names``: only these functions (default: all)."""
    image = read_image(elf)
    md = disassembler()
    out: list[str] = []
    wanted = set(names) if names is not None else None
    for fn in sorted(image.functions.values(), key=lambda f: f.addr):
        if wanted is not None and not ({fn.name} | fn.aliases) & wanted:
            continue
        if not fn.thumb:
            out.append(f"{fn.name}: Arm-state code")
            continue
        decoded = 0
        for insn in image.instructions(fn, md):
            decoded += insn.size
            if not is_armv6m(insn):
                out.append(f"{fn.name}+{insn.address - fn.addr:#x}: {insn.mnemonic} {insn.op_str}")
        code_bytes = sum(e - s for s, e in image.code_ranges(fn))
        if decoded != code_bytes:
            out.append(f"{fn.name}: {code_bytes - decoded} bytes that do not decode as Thumb")
    return out
