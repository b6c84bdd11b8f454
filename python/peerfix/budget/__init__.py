"""Target budget: will the core fit on the tag, and how long does a call take?

Answered by measurement on the same C that the host runs:

- :mod:`peerfix.budget.build`: cross build for Cortex-M4 / Cortex-M0+
  (arm-none-eabi-gcc), flash and static RAM from the linked ELF.
- :mod:`peerfix.budget.stack`: per-function frames (gcc .su) and the
  worst-case stack of each entry point over the call graph.
- :mod:`peerfix.budget.emulator`: the linked ELF run in unicorn, function by
  function: results (bit-exact against the host), instruction counts,
  stack high-water mark.
- :mod:`peerfix.budget.capture`: real inputs of the entry points recorded
  from scenario runs, replayed on the target and compared byte for byte.
- :mod:`peerfix.budget.report`: the `peerfix budget` report and the
  release budget (budget.toml).
- :mod:`peerfix.budget.timing`: the cycle model.  Cycle figures are an
  ESTIMATE (documented instruction timings, zero wait states; no flash wait
  states, bus contention, caches or interrupts).

Needs the cross compiler (tools/install_cross.sh) and the test extras
(unicorn, capstone, pyelftools).
"""

from __future__ import annotations

from peerfix.budget.build import CONFIGS, BuildResult, SizeReport, TargetConfig, build, sizes, toolchain_available
from peerfix.budget.stack import StackReport, analyse

__all__ = [
    "CONFIGS",
    "BuildResult",
    "SizeReport",
    "StackReport",
    "TargetConfig",
    "analyse",
    "build",
    "sizes",
    "summary",
    "toolchain_available",
]


def summary(result: BuildResult) -> dict:
    """Flash, static RAM and worst-case stack per entry point of one build (JSON-ready)."""
    size = sizes(result.elf)
    report = analyse(result.elf, result.su_files, result.ci_files, result.public_functions)
    return {
        "config": result.config.name,
        "flash_bytes": size.flash,
        "sections": {"text": size.text, "rodata": size.rodata, "data": size.data, "bss": size.bss,
                     "exidx": size.exidx},
        "ram_static_bytes": size.ram_static,
        "stack_worst_bytes": {name: path.total for name, path in sorted(report.entries.items())},
        "stack_deepest_path": {name: [f"{fn} ({frame} B, {src})" for fn, frame, src in path.path]
                               for name, path in sorted(report.entries.items())},
        "library_frames": {fn.name: fn.frame for fn in report.functions.values()
                           if fn.frame_source == "disassembly"},
    }
