"""The C core is integer-only, portable C99 with no undefined behaviour.

- Compiles with -mgeneral-regs-only (x86-64: any float or double use is a
  compile error) and strict warnings; a float snippet under the same flags
  must fail, so the check can fail.
- Object files reference no floating-point helper or libm symbol (host, and
  Cortex-M0+/M4 when arm-none-eabi-gcc is installed).
- Only the allowed headers; static stack frames only (no VLA/alloca); no
  recursion in the call graph.
- tests/core/c/fixed_vectors.c gives the same bits with -O0/-O2/-O3, with and
  without -fwrapv, -ftrapv, portable or builtin clz, UBSan, gcc or clang,
  and as Cortex-M0+/M4 builds run under qemu-arm, all equal to the Python
  mirror (peerfix.core.quantise).
"""

from __future__ import annotations

import re
import shutil
import subprocess
from pathlib import Path

import pytest

from . import vectors

ROOT = Path(__file__).resolve().parents[2]
INCLUDE = ROOT / "c_core" / "include"
SOURCES = sorted((ROOT / "c_core" / "src").glob("*.c"))
HEADERS = sorted(INCLUDE.glob("*.h"))
VECTORS_C = Path(__file__).parent / "c" / "fixed_vectors.c"

STRICT = [
    "-std=c99", "-pedantic", "-Wall", "-Wextra", "-Wconversion", "-Wsign-conversion",
    "-Wshadow", "-Wvla", "-Wdouble-promotion", "-Wfloat-equal", "-Werror",
]  # fmt: skip
ALLOWED_HEADERS = {"stdint.h", "stddef.h", "string.h"}
# Integer helpers a compiler may call (64-bit multiply/divide on 32-bit
# targets) and the <string.h> functions; anything else is a finding.
ALLOWED_UNDEFINED = re.compile(
    r"^(__aeabi_(lmul|uidiv|uidivmod|idiv|idivmod|uldivmod|ldivmod|llsl|llsr|lasr)"
    r"|__(u?div|u?mod)[sd]i3|__udivmoddi4|__divmoddi4|mem(cpy|set|move|cmp)|_GLOBAL_OFFSET_TABLE_)$"
)
FLOAT_SYMBOL = re.compile(
    r"__aeabi_[fd]|__aeabi_[il]2[fd]|__aeabi_u[il]2[fd]|__(add|sub|mul|div|neg|cmp|eq|ne|lt|le|gt|ge|unord)[sdxt]f[23]"
    r"|__float|__fix|__extend|__trunc|\b(sqrtf?|log2f?|exp2f?|powf?|floorf?|ceilf?|fabsf?|lrintf?|ldexpf?)$"
)


def run(cmd: list[str], cwd: Path | None = None) -> subprocess.CompletedProcess:
    return subprocess.run(cmd, cwd=cwd, capture_output=True, text=True)


def undefined_symbols(nm: str, obj: Path) -> list[str]:
    out = run([nm, "-u", str(obj)])
    assert out.returncode == 0, out.stderr
    return [line.split()[-1] for line in out.stdout.splitlines() if line.strip()]


def defined_symbols(nm: str, obj: Path) -> set[str]:
    out = run([nm, "--defined-only", "-g", str(obj)])
    assert out.returncode == 0, out.stderr
    return {line.split()[-1] for line in out.stdout.splitlines() if line.strip()}


def compile_all(cc: list[str], nm: str, tmp_path: Path) -> list[str]:
    """Compile every core source; return the undefined symbols that are neither
    defined by another core object nor an allowed integer helper."""
    objects = []
    for src in SOURCES:
        obj = tmp_path / (src.stem + ".o")
        out = run([*cc, "-I", str(INCLUDE), "-c", str(src), "-o", str(obj)])
        assert out.returncode == 0, f"{src.name}: {out.stderr}"
        objects.append(obj)
    ours = set().union(*(defined_symbols(nm, o) for o in objects))
    wanted = {s for o in objects for s in undefined_symbols(nm, o)}
    return sorted(s for s in wanted if FLOAT_SYMBOL.search(s) or not (s in ours or ALLOWED_UNDEFINED.match(s)))


def have(tool: str) -> bool:
    return shutil.which(tool) is not None


# --- integer only --------------------------------------------------------------


def test_sources_exist():
    assert SOURCES and (INCLUDE / "peerfix.h").is_file()


def test_compiles_with_general_registers_only(tmp_path):
    # -mgeneral-regs-only: on x86-64 any float or double is a compile error.
    assert compile_all(["gcc", *STRICT, "-O2", "-mgeneral-regs-only"], "nm", tmp_path) == []


def test_general_regs_only_rejects_floating_point(tmp_path):
    # Negative control: the flag set above really turns float use into an error.
    snippet = tmp_path / "uses_double.c"
    snippet.write_text("double half(int x) { return x * 0.5; }\n")
    out = run(["gcc", "-std=c99", "-O2", "-mgeneral-regs-only", "-c", str(snippet), "-o", str(tmp_path / "x.o")])
    assert out.returncode != 0


def test_float_symbol_pattern_catches_soft_float_helpers():
    for name in ("__aeabi_fmul", "__aeabi_dadd", "__aeabi_i2d", "__adddf3", "__mulsf3", "__floatsidf", "__fixdfsi",
                 "log2", "sqrtf"):  # fmt: skip
        assert FLOAT_SYMBOL.search(name), name
    for name in ("__aeabi_lmul", "__aeabi_uldivmod", "memcpy"):
        assert not FLOAT_SYMBOL.search(name) and ALLOWED_UNDEFINED.match(name)


@pytest.mark.skipif(not have("arm-none-eabi-gcc"), reason="arm-none-eabi-gcc not installed (apt: gcc-arm-none-eabi)")
@pytest.mark.parametrize("cpu", ["cortex-m0plus", "cortex-m4"])
def test_cortex_m_build_uses_no_float_helpers(cpu, tmp_path):
    # Soft-float ABI: any float use would show up as an __aeabi_f*/d* call.
    cc = ["arm-none-eabi-gcc", *STRICT, "-O2", f"-mcpu={cpu}", "-mthumb", "-mfloat-abi=soft", "-ffreestanding"]
    assert compile_all(cc, "arm-none-eabi-nm", tmp_path) == []


# --- C subset: headers, stack, recursion ---------------------------------------


@pytest.mark.parametrize("path", SOURCES + HEADERS, ids=lambda p: p.name)
def test_only_allowed_system_headers(path):
    system = re.findall(r'^\s*#\s*include\s*<([^>]+)>', path.read_text(), re.M)
    local = re.findall(r'^\s*#\s*include\s*"([^"]+)"', path.read_text(), re.M)
    assert set(system) <= ALLOWED_HEADERS
    assert all((INCLUDE / name).is_file() for name in local)


def test_static_stack_frames_and_no_recursion(tmp_path):
    edges: dict[str, set[str]] = {}
    for src in SOURCES:
        # -O0 keeps every call visible in the call graph.
        out = run(["gcc", "-std=c99", "-O0", "-fstack-usage", "-fcallgraph-info", "-I", str(INCLUDE), "-c", str(src),
                   "-o", str(tmp_path / (src.stem + ".o"))], cwd=tmp_path)  # fmt: skip
        assert out.returncode == 0, out.stderr
        su = (tmp_path / (src.stem + ".su")).read_text().splitlines()
        # "static" or "dynamic,bounded" (argument pushes); a VLA or alloca is plain "dynamic".
        assert su and [line for line in su if line.split("\t")[-1] not in ("static", "dynamic,bounded")] == []
        ci = (tmp_path / (src.stem + ".ci")).read_text()
        for a, b in re.findall(r'edge: \{ sourcename: "([^"]+)" targetname: "([^"]+)"', ci):
            edges.setdefault(a, set()).add(b)
    assert edges, "call graph is empty: -fcallgraph-info format changed?"

    def reaches(start: str, goal: str) -> bool:
        seen, todo = set(), [start]
        while todo:
            node = todo.pop()
            for nxt in edges.get(node, ()):
                if nxt == goal:
                    return True
                if nxt not in seen:
                    seen.add(nxt)
                    todo.append(nxt)
        return False

    assert [f for f in edges if reaches(f, f)] == []


def test_stack_usage_check_catches_a_vla(tmp_path):
    # Negative control for the frame check above.
    (tmp_path / "vla.c").write_text("int f(int n) { int a[n]; a[0] = n; return a[n - 1]; }\n")
    out = run(["gcc", "-std=c99", "-O0", "-fstack-usage", "-c", "vla.c"], cwd=tmp_path)
    assert out.returncode == 0, out.stderr
    assert (tmp_path / "vla.su").read_text().split("\t")[-1].strip() == "dynamic"


# --- same bits everywhere ---------------------------------------------------------

VARIANTS = [
    ("gcc", "-O0"),
    ("gcc", "-O2"),
    ("gcc", "-O0 -fwrapv"),
    ("gcc", "-O2 -fwrapv"),
    ("gcc", "-O3 -DPFX_USE_BUILTIN_CLZ"),
    ("gcc", "-O2 -fwrapv -DPFX_USE_BUILTIN_CLZ"),
    ("gcc", "-O1 -ftrapv"),
    ("gcc", "-O1 -fsanitize=undefined -fno-sanitize-recover=all"),
    ("clang", "-O2"),
    ("clang", "-O2 -fwrapv -DPFX_USE_BUILTIN_CLZ"),
    ("clang", "-O1 -fsanitize=undefined,integer,implicit-conversion -fno-sanitize-recover=all"),
]


ARM_VARIANTS = [
    ("cortex-m0plus", "-O2"),
    ("cortex-m0plus", "-Os"),
    ("cortex-m4", "-O2"),
    ("cortex-m4", "-O0"),
]
ARM_START_C = Path(__file__).parent / "c" / "arm_linux_start.c"


@pytest.fixture(scope="module")
def expected_lines() -> list[str]:
    return vectors.expected_folds()


@pytest.mark.parametrize(("cc", "flags"), VARIANTS, ids=[f"{cc} {fl}" for cc, fl in VARIANTS])
def test_same_bits_in_every_build(cc, flags, expected_lines, tmp_path):
    if not have(cc):
        pytest.skip(f"{cc} not installed")
    exe = tmp_path / "fixed_vectors"
    build = run([cc, *flags.split(), "-std=c99", "-Wall", "-Wextra", "-Werror", "-I", str(INCLUDE),
                 str(VECTORS_C), *map(str, SOURCES), "-o", str(exe)])  # fmt: skip
    if build.returncode != 0 and "-fsanitize" in flags and "cannot find" in build.stderr:
        pytest.skip(f"sanitizer runtime missing: {build.stderr.strip()[:200]}")
    assert build.returncode == 0, build.stderr
    result = run([str(exe)])
    assert result.returncode == 0, result.stderr  # UBSan and -ftrapv abort on a finding
    assert result.stderr == ""
    assert result.stdout.splitlines() == expected_lines


@pytest.mark.skipif(
    not (have("arm-none-eabi-gcc") and have("qemu-arm")),
    reason="needs arm-none-eabi-gcc and qemu-arm (apt: gcc-arm-none-eabi qemu-user)",
)
@pytest.mark.parametrize(("cpu", "opt"), ARM_VARIANTS, ids=[f"{c} {o}" for c, o in ARM_VARIANTS])
def test_same_bits_on_cortex_m(cpu, opt, expected_lines, tmp_path):
    # The target build itself (Thumb code, soft float, libgcc's 64-bit helpers;
    # no hardware divide on M0+), executed instruction by instruction by qemu.
    exe = tmp_path / "fixed_vectors.elf"
    build = run(["arm-none-eabi-gcc", opt, f"-mcpu={cpu}", "-mthumb", "-mfloat-abi=soft", "-std=c99", "-Wall",
                 "-Wextra", "-Werror", "-ffreestanding", "-nostdlib", "-static", "-DPFX_VECTORS_NO_LIBC",
                 "-I", str(INCLUDE), str(VECTORS_C), str(ARM_START_C), *map(str, SOURCES), "-lgcc",
                 "-o", str(exe)])  # fmt: skip
    assert build.returncode == 0, build.stderr
    result = subprocess.run(["qemu-arm", str(exe)], capture_output=True, text=True, timeout=300)
    assert result.returncode == 0, result.stderr
    assert result.stdout.splitlines() == expected_lines
