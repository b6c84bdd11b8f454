"""Cross build, flash / RAM figures and the static stack analysis, on the real core."""

from __future__ import annotations

import shutil
import subprocess
from pathlib import Path

import pytest

from .support import needs_cross, target_build, target_emulator

pytestmark = needs_cross

ROOT = Path(__file__).resolve().parents[2]
ALL = ["cortex-m4-O2", "cortex-m4-Os", "cortex-m0plus-O2", "cortex-m0plus-Os"]


@pytest.mark.parametrize("name", ALL)
def test_build_outputs_and_sizes(name):
    from peerfix.budget.build import sizes

    result = target_build(name)
    assert result.out_dir == ROOT / "build" / "target" / name
    for path in [result.elf, result.map_file]:
        assert path.is_file() and path.stat().st_size > 0, path
    # a .su and a .ci per core unit, each naming functions (the layout table has none)
    for unit in (p.stem for p in (ROOT / "c_core" / "src").glob("*.c")):
        su, ci = result.out_dir / f"{unit}.su", result.out_dir / f"{unit}.ci"
        assert su in result.su_files and ci in result.ci_files
        assert "\tstatic" in su.read_text() and "node:" in ci.read_text()
    assert result.warnings.strip() == "", result.warnings  # the core is warning-free on the target too
    s = sizes(result.elf)
    assert s.text > 1000 and s.rodata > 0
    assert s.flash == s.text + s.rodata + s.exidx + s.data
    assert s.ram_static == s.data + s.bss
    # Every public function is linked (--require-defined) and has code.
    for fn in result.public_functions:
        assert s.functions.get(fn, 0) > 0, fn
    # The text section holds at least the functions' code.
    assert s.text >= sum(s.functions.values()) // 2
    # The linker script's free-RAM mark (where the harness puts buffers) is in RAM, past .data/.bss.
    from peerfix.budget.emulator import RAM_BASE

    em = target_emulator(name)
    assert RAM_BASE + s.ram_static <= em.scratch_base == em.symbols["__pfx_ram_free"] < em.stack_bottom


def test_optimisation_levels_differ_as_expected():
    from peerfix.budget.build import sizes

    for cpu in ("cortex-m4", "cortex-m0plus"):
        o2, os_ = sizes(target_build(f"{cpu}-O2").elf), sizes(target_build(f"{cpu}-Os").elf)
        assert os_.text < o2.text  # -Os is smaller
        assert os_.rodata == o2.rodata  # same tables


def test_build_is_cached_by_content(tmp_path):
    from peerfix.budget.build import TargetConfig, build

    root = tmp_path / "repo"
    shutil.copytree(ROOT / "c_core", root / "c_core")
    cfg = TargetConfig("cortex-m4", "Os")
    first = build(cfg, root=root)
    assert not first.reused
    assert build(cfg, root=root).reused
    src = root / "c_core" / "src" / "pfx_fixed.c"
    src.write_text(src.read_text() + "\n/* touched */\n")
    again = build(cfg, root=root)
    assert not again.reused and again.key != first.key


@pytest.mark.parametrize("name", ALL)
def test_stack_report_covers_every_public_function(name):
    from peerfix.budget.stack import analyse

    result = target_build(name)
    report = analyse(result.elf, result.su_files, result.ci_files, result.public_functions)
    assert set(report.entries) == set(result.public_functions)
    for entry, path in report.entries.items():
        fn = report.function(entry)
        assert fn.frame_source == "su", entry  # gcc reported its frame
        assert path.path[0][0] == entry
        assert path.total == sum(frame for _, frame, _ in path.path)
        assert path.total >= fn.frame >= 0
    # The update is the deepest public call and goes through the range and mixture code.
    deepest = max(report.entries.values(), key=lambda p: p.total)
    assert deepest.total > 200
    assert report.entries["pfx_node_update"].total >= report.entries["pfx_range_multiply"].total


@pytest.mark.parametrize("name", ALL)
def test_disassembly_frames_and_calls_agree_with_gcc(name):
    """The two ways of reading the image cross-check each other: for every
    function gcc reported, the frame measured from its linked code (PUSH +
    sub sp, the method used for libgcc's helpers) equals the .su figure, and
    every call found in its code is in gcc's .ci call graph."""
    from peerfix.budget.elfcode import read_image
    from peerfix.budget.stack import analyse, scan

    result = target_build(name)
    report = analyse(result.elf, result.su_files, result.ci_files, result.public_functions)
    image = read_image(result.elf)
    checked = 0
    for addr, fn in report.functions.items():
        if fn.frame_source != "su":
            continue
        frame, _, _ = scan(image, image.functions[addr])
        assert frame == fn.frame, (fn.name, frame, fn.frame)
        missing = {report.functions[a].name for a in fn.code_calls - fn.ci_calls}
        assert not missing, (fn.name, missing)
        checked += 1
    assert checked > 50
    helpers = {fn.name: fn.frame for fn in report.functions.values() if fn.frame_source == "disassembly"}
    assert "__udivmoddi4" in helpers and helpers["__udivmoddi4"] > 0  # 64-bit division helper, counted


def _mini_root(tmp_path: Path, source: str) -> Path:
    root = tmp_path / "mini"
    shutil.copytree(ROOT / "c_core" / "include", root / "c_core" / "include")
    shutil.copytree(ROOT / "c_core" / "port", root / "c_core" / "port")
    (root / "c_core" / "src").mkdir(parents=True)
    (root / "c_core" / "src" / "mini.c").write_text(source)
    return root


def test_recursion_is_refused(tmp_path):
    from peerfix.budget.build import TargetConfig, build
    from peerfix.budget.stack import CallGraphCycle, analyse

    root = _mini_root(tmp_path, "int even(unsigned n);\nint odd(unsigned n) { return n ? even(n - 1u) : 0; }\n"
                                "int even(unsigned n) { return n ? odd(n - 1u) : 1; }\n")
    # Mutual recursion survives as calls or tail calls (b even / b odd); both are edges.
    result = build(TargetConfig("cortex-m0plus", "Os"), root=root, roots=["even", "odd"])
    with pytest.raises(CallGraphCycle, match="even.*odd|odd.*even"):
        analyse(result.elf, result.su_files, result.ci_files, ["even"])


def test_indirect_call_is_refused(tmp_path):
    from peerfix.budget.build import TargetConfig, build
    from peerfix.budget.stack import UnboundedStack, analyse

    root = _mini_root(tmp_path, "int apply(int (*f)(int), int x) { return f(x) + 1; }\n")
    result = build(TargetConfig("cortex-m4", "O2"), root=root, roots=["apply"])
    with pytest.raises(UnboundedStack, match="apply"):
        analyse(result.elf, result.su_files, result.ci_files, ["apply"])


def test_m0plus_image_is_armv6m_and_needs_the_cpu_flags_at_link(tmp_path):
    """The linked Cortex-M0+ image holds only ARMv6-M code, libgcc's helpers
    included.  The same object linked without -mcpu/-mthumb links fine but
    silently takes the default multilib: Arm-state helpers that a Cortex-M0+
    cannot run.  The check catches that."""
    from peerfix.budget.elfcode import armv6m_violations, read_image

    result = target_build("cortex-m0plus-O2")
    assert armv6m_violations(result.elf) == []
    names = {n for f in read_image(result.elf).functions.values() for n in {f.name} | f.aliases}
    assert {"__aeabi_uidiv", "__aeabi_uldivmod", "__aeabi_lmul"} <= names  # M0+ has no divide, no 64-bit mul

    src = tmp_path / "div.c"
    src.write_text("unsigned quot(unsigned a, unsigned b) { return a / b; }\n")
    obj = tmp_path / "div.o"
    subprocess.run(["arm-none-eabi-gcc", "-mcpu=cortex-m0plus", "-mthumb", "-O2", "-c", str(src), "-o", str(obj)],
                   check=True)  # fmt: skip
    script = ROOT / "c_core" / "port" / "pfx_port.ld"
    common = ["-nostartfiles", "-nostdlib", f"-T{script}", "-Wl,--require-defined=quot", str(obj), "-lgcc"]
    good, bad = tmp_path / "good.elf", tmp_path / "bad.elf"
    subprocess.run(["arm-none-eabi-gcc", "-mcpu=cortex-m0plus", "-mthumb", *common, "-o", str(good)], check=True)
    subprocess.run(["arm-none-eabi-gcc", *common, "-o", str(bad)], check=True)  # no CPU flags: links "fine"
    assert armv6m_violations(good) == []
    bad_list = armv6m_violations(bad)
    assert any("__udivsi3" in v or "__aeabi_uidiv" in v for v in bad_list), bad_list


def test_m4_image_is_all_thumb():
    from peerfix.budget.elfcode import read_image

    image = read_image(target_build("cortex-m4-O2").elf)
    assert image.functions and all(f.thumb for f in image.functions.values())


def test_target_struct_layout_matches_host():
    """Structs are copied byte for byte between host and emulator: the cross
    compiler must lay them out as the host does (table: c_core/port/pfx_port_layout.c)."""
    from peerfix.budget.build import read_layout
    from peerfix.core._pfx import ffi

    for name in ("cortex-m4-O2", "cortex-m0plus-O2"):
        layout = read_layout(target_build(name).elf)
        assert len(layout) >= 20
        for key, value in layout.items():
            what, ctype, *member = key.split()
            host = ffi.sizeof(ctype) if what == "sizeof" else ffi.offsetof(ctype, member[0])
            assert value == host, (name, key, value, host)


def test_summary_and_cli(tmp_path):
    import json
    import sys

    proc = subprocess.run([sys.executable, str(ROOT / "tools" / "cross_build.py"), "cortex-m4-O2", "--json"],
                          capture_output=True, text=True, check=True)  # fmt: skip
    (s,) = json.loads(proc.stdout)
    assert s["config"] == "cortex-m4-O2" and s["flash_bytes"] > 0 and s["ram_static_bytes"] >= 0
    assert s["stack_worst_bytes"]["pfx_node_update"] > 0
    bad = subprocess.run([sys.executable, str(ROOT / "tools" / "cross_build.py"), "cortex-m3-O2"],
                         capture_output=True, text=True)  # fmt: skip
    assert bad.returncode == 2 and "unknown cpu" in bad.stderr
