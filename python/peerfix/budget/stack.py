"""Worst-case stack depth of each entry point, from the linked ELF.

Frames: gcc's ``.su`` files give each compiled function's own frame
(``-fstack-usage``; "static" means a fixed size).  Functions without one
(libgcc's helpers such as ``__aeabi_uldivmod``, ``__udivmoddi4``,
``__aeabi_idiv``) get a frame measured from their linked code: every PUSH
and every ``sub sp, #imm`` in the function added up (an upper bound when a
function has several prologue paths).

Calls: the union of gcc's call graph (``.ci`` files, ``-fcallgraph-info``)
and the calls found in the linked code (``bl`` and branches that leave the
function, i.e. tail calls).  The disassembly adds what gcc's graph cannot
know: calls the compiler emits itself (library helpers, struct copies).
Every call, tail calls included, adds the callee's depth to the caller's
frame: an upper bound (a tail call actually runs after the frame is popped).

The worst case of an entry point is its frame plus the deepest callee,
recursively.  The core has no recursion: a cycle in the graph raises
:class:`CallGraphCycle`; an indirect call raises :class:`UnboundedStack`.
The emulator's stack high-water mark is the measured cross-check.
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field
from pathlib import Path

from capstone import arm_const as A

from peerfix.budget.elfcode import CodeImage, FunctionSym, disassembler, read_image


class CallGraphCycle(RuntimeError):
    """Recursion in the call graph: no static stack bound."""


class UnboundedStack(RuntimeError):
    """A function with a dynamic frame or an indirect call: no static stack bound."""


@dataclass
class Function:
    name: str
    addr: int  # even address of the first instruction
    size: int
    file: str | None  # source file of a local symbol, None for a global
    aliases: set[str] = field(default_factory=set)  # other symbols at the same address
    frame: int | None = None
    frame_source: str = ""  # "su" or "disassembly"
    calls: set[int] = field(default_factory=set)  # callee addresses (union of the two below)
    code_calls: set[int] = field(default_factory=set)  # found in the linked code
    ci_calls: set[int] = field(default_factory=set)  # from gcc's .ci call graph
    indirect: list[str] = field(default_factory=list)  # indirect control transfers found


@dataclass(frozen=True)
class StackPath:
    entry: str
    total: int  # bytes, worst case
    path: tuple[tuple[str, int, str], ...]  # (function, frame bytes, frame source) from the entry down


@dataclass
class StackReport:
    functions: dict[int, Function]
    entries: dict[str, StackPath]
    su_frames: dict[tuple[str, str], int]  # (source file, function) -> bytes from .su

    def function(self, name: str) -> Function:
        for f in self.functions.values():
            if name == f.name or name in f.aliases:
                return f
        raise KeyError(name)


_SU_LINE = re.compile(r"^(?P<file>.*?):\d+:\d+:(?P<func>[^\t]+)\t(?P<bytes>\d+)\t(?P<kind>\S+)\s*$")
_CI_NODE = re.compile(r'^node: \{ title: "(?P<title>[^"]+)" label: "(?P<label>[^"]*)"')
_CI_EDGE = re.compile(r'^edge: \{ sourcename: "(?P<src>[^"]+)" targetname: "(?P<dst>[^"]+)"')


def parse_su(paths: list[Path]) -> dict[tuple[str, str], tuple[int, str]]:
    """(translation unit, function) -> (bytes, qualifier) from gcc .su files.

    Keyed by the unit (the .su file's stem + ".c", as the ELF's STT_FILE
    symbols name it), not by the file a line names: a static inline function
    from a header is compiled once per unit that uses it."""
    out: dict[tuple[str, str], tuple[int, str]] = {}
    for path in paths:
        unit = path.stem + ".c"
        for line in path.read_text().splitlines():
            m = _SU_LINE.match(line)
            if not m:
                continue
            out[(unit, m["func"])] = (int(m["bytes"]), m["kind"])
    return out


def parse_ci(paths: list[Path]) -> dict[str, list[tuple[str, str]]]:
    """source file name -> (caller, callee) edges from gcc .ci files."""
    out: dict[str, list[tuple[str, str]]] = {}
    for path in paths:
        edges: list[tuple[str, str]] = []
        source = None
        for line in path.read_text().splitlines():
            if line.startswith("graph:"):
                m = re.search(r'title: "([^"]+)"', line)
                source = Path(m.group(1)).name if m else path.stem + ".c"
            m = _CI_EDGE.match(line)
            if m:
                edges.append((m["src"], m["dst"]))
        out[source or path.stem + ".c"] = edges
    return out


def scan(image: CodeImage, fn: FunctionSym, md=None) -> tuple[int, set[int], list[str]]:
    """Frame bytes from PUSH / sub sp, call targets, and indirect transfers of fn."""
    frame = 0
    calls: set[int] = set()
    indirect: list[str] = []
    lo, hi = fn.addr, fn.addr + fn.size
    for insn in image.instructions(fn, md):
        ops = insn.operands
        iid = insn.id
        if iid == A.ARM_INS_PUSH or (iid == A.ARM_INS_STMDB and ops and ops[0].reg == A.ARM_REG_SP):
            regs = [o for o in ops if o.type == A.ARM_OP_REG]
            frame += 4 * (len(regs) - (1 if iid == A.ARM_INS_STMDB else 0))
        elif iid in (A.ARM_INS_SUB, A.ARM_INS_SUBW) and ops and ops[0].type == A.ARM_OP_REG and ops[0].reg == A.ARM_REG_SP:
            if ops[-1].type == A.ARM_OP_IMM:
                frame += ops[-1].imm
            else:
                indirect.append(f"{insn.address:#x} {insn.mnemonic} {insn.op_str} (dynamic frame)")
        elif insn.writeback and any(o.type == A.ARM_OP_MEM and o.mem.base == A.ARM_REG_SP for o in ops):
            # str/strd rX, [sp, #-n]! : a push by another name
            disp = next(o.mem.disp for o in ops if o.type == A.ARM_OP_MEM)
            frame += max(0, -disp)
        elif iid in (A.ARM_INS_BL, A.ARM_INS_B) and ops and ops[0].type == A.ARM_OP_IMM:
            target = ops[0].imm
            if iid == A.ARM_INS_BL and target == lo:
                calls.add(target)  # self call: recursion, caught as a cycle
            elif not (lo <= target < hi):
                calls.add(target)
        elif iid == A.ARM_INS_BLX:
            indirect.append(f"{insn.address:#x} {insn.mnemonic} {insn.op_str}")
        elif iid == A.ARM_INS_BX and ops and ops[0].reg != A.ARM_REG_LR:
            indirect.append(f"{insn.address:#x} {insn.mnemonic} {insn.op_str}")
    return frame, calls, indirect


# libgcc's Thumb-1 switch helpers jump back into their caller through a
# computed LR ("bx" on an adjusted return address): not a call to elsewhere.
_TABLE_HELPERS = re.compile(r"^__gnu_thumb1_case_")


def analyse(elf: Path, su_files: list[Path], ci_files: list[Path], entries: list[str]) -> StackReport:
    """Worst-case stack of each entry point; raises on recursion or unbounded frames."""
    image = read_image(elf)
    funcs = {a: Function(s.name, s.addr, s.size, s.file, set(s.aliases)) for a, s in image.functions.items()}
    su = parse_su(su_files)
    md = disassembler()
    by_name: dict[str, list[Function]] = {}
    for fn in funcs.values():
        for name in {fn.name} | fn.aliases:
            by_name.setdefault(name, []).append(fn)

    for addr, fn in funcs.items():
        frame, calls, indirect = scan(image, image.functions[addr], md)
        fn.code_calls = {c for c in calls if c in funcs}
        fn.calls = set(fn.code_calls)
        fn.indirect = [] if _TABLE_HELPERS.match(fn.name) else indirect
        key = (fn.file, fn.name) if fn.file else None
        entry = su.get(key) if key else None
        if entry is None:
            # A global: match its .su entry by name alone (globals are unique).
            matches = [v for (f, n), v in su.items() if n == fn.name]
            entry = matches[0] if len(matches) == 1 and fn.file is None else None
        if entry is not None:
            nbytes, kind = entry
            if kind != "static":
                fn.indirect.append(f"frame is {kind} in .su")
            fn.frame, fn.frame_source = nbytes, "su"
        else:
            fn.frame, fn.frame_source = frame, "disassembly"

    # Add gcc's call graph edges whose ends are linked functions.
    for source, edges in parse_ci(ci_files).items():
        for caller, callee in edges:
            src = _resolve(by_name, caller, source)
            dst = _resolve(by_name, callee, source)
            if src is not None and dst is not None:
                src.ci_calls.add(dst.addr)
                src.calls.add(dst.addr)

    report = StackReport(funcs, {}, {k: v[0] for k, v in su.items()})
    memo: dict[int, tuple[int, tuple[tuple[str, int, str], ...]]] = {}
    for name in entries:
        fns = by_name.get(name)
        if not fns:
            raise KeyError(f"entry point {name} is not in {elf}")
        total, path = _deepest(fns[0].addr, funcs, memo, [])
        report.entries[name] = StackPath(name, total, path)
    return report


def _resolve(by_name: dict[str, list[Function]], title: str, source: str) -> Function | None:
    """The linked function a .ci node title names; gcc writes a local one as
    "<file>:<name>" (the file may be a header for a static inline)."""
    name = title.rsplit(":", 1)[-1]
    cands = by_name.get(name)
    if not cands:
        return None
    for fn in cands:
        if fn.file == source:
            return fn
    globals_ = [fn for fn in cands if fn.file is None]
    return globals_[0] if globals_ else None


def _deepest(addr: int, funcs: dict[int, Function], memo: dict, stack: list[int]):
    if addr in memo:
        return memo[addr]
    fn = funcs[addr]
    if addr in stack:
        cycle = " -> ".join(funcs[a].name for a in stack[stack.index(addr):] + [addr])
        raise CallGraphCycle(f"recursion, no static stack bound: {cycle}")
    if fn.indirect:
        raise UnboundedStack(f"{fn.name}: {'; '.join(fn.indirect)}")
    stack.append(addr)
    best_total, best_path = 0, ()
    for callee in sorted(fn.calls):
        total, path = _deepest(callee, funcs, memo, stack)
        if total > best_total:
            best_total, best_path = total, path
    stack.pop()
    frame = fn.frame or 0
    result = (frame + best_total, ((fn.name, frame, fn.frame_source),) + best_path)
    memo[addr] = result
    return result
