"""Cross build of the C core for Cortex-M, and its flash / RAM figures.

One build per configuration (CPU x optimisation level) lands in
``build/target/<cpu>-<opt>/``: the objects, the linked ELF (``peerfix.elf``),
the map file, and gcc's ``.su`` (stack usage per function) and ``.ci``
(call graph) files.  A build is reused while the key (a hash of the
compiler version, the flags and every source, header and port file) is
unchanged, so a test session builds each configuration at most once.
A Cortex-M0+ image is checked to hold only ARMv6-M code (see
:func:`peerfix.budget.elfcode.armv6m_violations`).

Link: the same CPU flags as the compile (without them the gcc driver picks
the default libgcc multilib, Arm-state code that a Cortex-M cannot run),
``-nostartfiles -nostdlib`` plus ``-lgcc`` (64-bit and, on the M0+, 32-bit
division helpers), the port's linker script, ``--gc-sections`` with every
public function of the headers kept as a root (``--require-defined``, which
also fails the link if one is missing).  memset/memcpy/memmove come from
c_core/port/pfx_port_string.c.
"""

from __future__ import annotations

import hashlib
import json
import os
import re
import shutil
import subprocess
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field
from pathlib import Path

from elftools.elf.elffile import ELFFile

from peerfix.budget.elfcode import armv6m_violations

ROOT = Path(__file__).resolve().parents[3]

CC = "arm-none-eabi-gcc"
INSTALL_HINT = "run tools/install_cross.sh (Debian packages gcc-arm-none-eabi, libnewlib-arm-none-eabi)"

COMMON_CFLAGS = (
    "-std=c99",
    "-Wall",
    "-Wextra",
    "-ffunction-sections",
    "-fdata-sections",
    "-fstack-usage",
    "-fcallgraph-info=su",
)
# The port's string functions must not be recognised as calls to themselves.
PORT_STRING_CFLAGS = ("-fno-builtin", "-fno-tree-loop-distribute-patterns")
CPU_FLAGS = {
    "cortex-m4": ("-mcpu=cortex-m4", "-mthumb", "-mfloat-abi=soft"),
    "cortex-m0plus": ("-mcpu=cortex-m0plus", "-mthumb"),
}
# Per-CPU compile-only options.  The M4 has CLZ: pfx_fixed_clz32_inline
# then uses the compiler's builtin (one instruction; the same count, x = 0
# is tested first); the M0+ has none (the builtin would be a libgcc call),
# so it keeps the portable binary search.
CPU_DEFINES = {
    "cortex-m4": ("-DPFX_USE_BUILTIN_CLZ",),
    "cortex-m0plus": (),
}
OPT_LEVELS = ("O2", "Os")
ELF_NAME = "peerfix.elf"
MAP_NAME = "peerfix.map"
KEY_NAME = "build-key.json"


class ToolchainMissing(RuntimeError):
    """arm-none-eabi-gcc is not on PATH."""


class BuildError(RuntimeError):
    """The cross compile or link failed; the message carries the compiler output."""


@dataclass(frozen=True)
class TargetConfig:
    cpu: str  # a key of CPU_FLAGS
    opt: str  # "O2" or "Os"

    def __post_init__(self) -> None:
        if self.cpu not in CPU_FLAGS:
            raise ValueError(f"unknown cpu {self.cpu!r}; known: {', '.join(CPU_FLAGS)}")
        if self.opt not in OPT_LEVELS:
            raise ValueError(f"unknown optimisation level {self.opt!r}; known: {', '.join(OPT_LEVELS)}")

    @property
    def name(self) -> str:
        return f"{self.cpu}-{self.opt}"

    @property
    def cpu_flags(self) -> tuple[str, ...]:
        return CPU_FLAGS[self.cpu]

    @property
    def cflags(self) -> tuple[str, ...]:
        return self.cpu_flags + (f"-{self.opt}",) + COMMON_CFLAGS + CPU_DEFINES[self.cpu]

    @classmethod
    def parse(cls, name: str) -> "TargetConfig":
        cpu, _, opt = name.rpartition("-")
        return cls(cpu, opt)


CONFIGS: tuple[TargetConfig, ...] = tuple(TargetConfig(c, o) for c in CPU_FLAGS for o in OPT_LEVELS)


@dataclass
class BuildResult:
    config: TargetConfig
    out_dir: Path
    elf: Path
    map_file: Path
    su_files: list[Path]
    ci_files: list[Path]
    public_functions: list[str]
    key: str
    warnings: str = ""  # compiler diagnostics (empty for a clean build)
    reused: bool = False


@dataclass(frozen=True)
class SizeReport:
    """Section sizes in bytes.  flash = text + rodata + exidx + data (its
    initial image is stored in flash); static RAM = data + bss (no heap;
    the stack is separate, see peerfix.budget.stack)."""

    text: int
    rodata: int
    data: int
    bss: int
    exidx: int = 0
    functions: dict[str, int] = field(default_factory=dict)  # code bytes per function symbol
    objects: dict[str, int] = field(default_factory=dict)  # bytes per data symbol in flash (tables in .rodata / .data)

    @property
    def flash(self) -> int:
        return self.text + self.rodata + self.exidx + self.data

    @property
    def ram_static(self) -> int:
        return self.data + self.bss

    @property
    def flash_sections(self) -> dict[str, int]:
        return {"text": self.text, "rodata": self.rodata, "exidx": self.exidx, "data": self.data}

    @property
    def linked_functions(self) -> set[str]:
        """Functions with code of their own, gcc's clones (name.part.0, name.isra.0) as the function."""
        return {f.split(".")[0] for f in self.functions}


def toolchain_available() -> bool:
    return shutil.which(CC) is not None


def compiler_version() -> str:
    return _run([CC, "--version"]).splitlines()[0]


def public_functions(root: Path = ROOT) -> list[str]:
    """Every function prototype in the headers' cffi blocks (the public API)."""
    from peerfix.core._build import read_cdef  # plain import: builds nothing

    text = read_cdef(root / "c_core" / "include" / "peerfix.h")
    text = re.sub(r"/\*.*?\*/", " ", text, flags=re.S)
    text = re.sub(r"//[^\n]*", " ", text)
    names = re.findall(r"\b(pfx_\w+)\s*\(", text)
    return sorted(set(names))


# The functions a tag's firmware calls: settings, node set-up, the inbox,
# the update, broadcast, prediction and estimate, anchors' point beliefs and
# the radio frames.  These are the calls the fixed engine (the firmware loop
# on the host) makes; tests/budget/test_report.py holds the two lists
# together.  A link with only these as roots is what a tag image carries of
# the core; the rest of the public API (single-step products, moments,
# fixed-point helpers called on their own) serves tests and tools.
TAG_API = (
    "pfx_belief_point",
    "pfx_inbox_add",
    "pfx_inbox_clear",
    "pfx_node_broadcast",
    "pfx_node_estimate",
    "pfx_node_init",
    "pfx_node_predict",
    "pfx_node_update",
    "pfx_params_check",
    "pfx_params_default",
    "pfx_wire_decode",
    "pfx_wire_encode",
    "pfx_wire_quantise",
)
TAG_IMAGE_DIR = "target-tag"  # build/<this>/<config>/: the tag image's link


def _run(cmd: list[str], cwd: Path | None = None) -> str:
    if shutil.which(cmd[0]) is None:
        raise ToolchainMissing(f"{cmd[0]} not found on PATH; {INSTALL_HINT}")
    proc = subprocess.run(cmd, cwd=cwd, capture_output=True, text=True)
    if proc.returncode != 0:
        raise BuildError(f"{' '.join(cmd)}\n{proc.stdout}{proc.stderr}")
    return proc.stdout + proc.stderr


def _inputs(root: Path) -> tuple[list[Path], list[Path], Path, list[Path]]:
    core = root / "c_core"
    sources = sorted((core / "src").glob("*.c"))
    if not sources:
        raise BuildError(f"no C sources under {core / 'src'}")
    port_sources = sorted((core / "port").glob("*.c"))
    script = core / "port" / "pfx_port.ld"
    headers = sorted((core / "include").glob("*.h"))
    return sources, port_sources, script, headers


def _key(config: TargetConfig, root: Path, roots: list[str]) -> str:
    sources, port_sources, script, headers = _inputs(root)
    h = hashlib.sha256()
    h.update(compiler_version().encode())
    h.update(repr((config.cflags, PORT_STRING_CFLAGS, roots)).encode())
    h.update(Path(__file__).read_bytes())  # the build recipe itself
    h.update((Path(__file__).parent / "elfcode.py").read_bytes())  # and the image check it runs
    for path in sources + port_sources + [script] + headers:
        h.update(path.name.encode())
        h.update(path.read_bytes())
    return h.hexdigest()


def build(
    config: TargetConfig,
    root: Path = ROOT,
    out_root: Path | None = None,
    force: bool = False,
    roots: list[str] | None = None,
) -> BuildResult:
    """Cross-build the core for ``config`` (or reuse the cached build).

    ``roots``: the functions kept by --gc-sections (default: every public
    function); a smaller list gives the flash of a firmware that uses only those.
    """
    if not toolchain_available():
        raise ToolchainMissing(f"{CC} not found on PATH; {INSTALL_HINT}")
    roots = sorted(roots) if roots is not None else public_functions(root)
    out_root = out_root or root / "build" / "target"
    out_dir = out_root / config.name
    key = _key(config, root, roots)
    key_file = out_dir / KEY_NAME
    if not force and key_file.is_file():
        stamp = json.loads(key_file.read_text())
        if stamp.get("key") == key and (out_dir / ELF_NAME).is_file():
            return _result(config, out_dir, roots, key, stamp.get("warnings", ""), reused=True)

    # Build into a fresh directory and swap it in, so that an interrupted
    # build never leaves a directory that looks complete.
    tmp = out_root / f".{config.name}.tmp-{os.getpid()}"
    shutil.rmtree(tmp, ignore_errors=True)
    tmp.mkdir(parents=True)
    sources, port_sources, script, _headers = _inputs(root)
    include = root / "c_core" / "include"

    def compile_one(src: Path) -> str:
        extra = PORT_STRING_CFLAGS if src.name == "pfx_port_string.c" else ()
        obj = tmp / (src.stem + ".o")
        return _run([CC, *config.cflags, *extra, f"-I{include}", "-c", str(src), "-o", str(obj)], cwd=tmp)

    with ThreadPoolExecutor(max_workers=min(8, os.cpu_count() or 1)) as pool:
        warnings = "".join(pool.map(compile_one, sources + port_sources))
    objects = sorted(str(p) for p in tmp.glob("*.o"))
    link = [
        CC,
        *config.cpu_flags,
        f"-{config.opt}",
        "-nostartfiles",
        "-nostdlib",
        f"-T{script}",
        "-Wl,--gc-sections",
        f"-Wl,-Map,{tmp / MAP_NAME}",
        *[f"-Wl,--require-defined={name}" for name in roots],
        *objects,
        "-lgcc",
        "-o",
        str(tmp / ELF_NAME),
    ]
    warnings += _run(link, cwd=tmp)
    if config.cpu == "cortex-m0plus":
        # The multilib guard: a link that picked the wrong libgcc would put
        # Arm-state or Thumb-2 code into an image a Cortex-M0+ cannot run.
        bad = armv6m_violations(tmp / ELF_NAME)
        if bad:
            raise BuildError(f"{config.name}: code outside ARMv6-M in the linked image:\n  " + "\n  ".join(bad[:20]))
    (tmp / KEY_NAME).write_text(json.dumps({"key": key, "warnings": warnings, "roots": roots}, indent=1))
    shutil.rmtree(out_dir, ignore_errors=True)
    tmp.rename(out_dir)
    return _result(config, out_dir, roots, key, warnings, reused=False)


def _result(config: TargetConfig, out_dir: Path, roots: list[str], key: str, warnings: str, reused: bool) -> BuildResult:
    return BuildResult(
        config=config,
        out_dir=out_dir,
        elf=out_dir / ELF_NAME,
        map_file=out_dir / MAP_NAME,
        su_files=sorted(out_dir.glob("*.su")),
        ci_files=sorted(out_dir.glob("*.ci")),
        public_functions=roots,
        key=key,
        warnings=warnings,
        reused=reused,
    )


def sizes(elf: Path) -> SizeReport:
    """Flash and static RAM of a linked ELF, from its section headers."""
    with open(elf, "rb") as fh:
        f = ELFFile(fh)
        size = {s.name: s["sh_size"] for s in f.iter_sections()}
        funcs: dict[str, int] = {}
        objects: dict[str, int] = {}
        flash_data = {i for i, s in enumerate(f.iter_sections()) if s.name in (".rodata", ".data")}
        symtab = f.get_section_by_name(".symtab")
        for sym in symtab.iter_symbols():
            if sym["st_info"]["type"] == "STT_FUNC" and sym["st_size"] > 0:
                funcs[sym.name] = max(funcs.get(sym.name, 0), sym["st_size"])
            elif sym["st_info"]["type"] == "STT_OBJECT" and sym["st_size"] > 0 and sym["st_shndx"] in flash_data:
                objects[sym.name] = max(objects.get(sym.name, 0), sym["st_size"])
    return SizeReport(
        text=size.get(".text", 0),
        rodata=size.get(".rodata", 0),
        data=size.get(".data", 0),
        bss=size.get(".bss", 0),
        exidx=size.get(".ARM.exidx", 0),
        functions=funcs,
        objects=objects,
    )


def read_layout(elf: Path) -> dict[str, int]:
    """The struct layout table of c_core/port/pfx_port_layout.c, as the target sees it."""
    with open(elf, "rb") as fh:
        f = ELFFile(fh)
        sec = f.get_section_by_name(".pfx_layout")
        if sec is None:
            return {}
        data = sec.data()
    out: dict[str, int] = {}
    for off in range(0, len(data) - 43, 44):  # char name[40]; uint32_t value
        name = data[off : off + 40].split(b"\0", 1)[0].decode()
        out[name] = int.from_bytes(data[off + 40 : off + 44], "little")
    return out
