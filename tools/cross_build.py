#!/usr/bin/env python3
"""Cross-build the C core for Cortex-M and print its flash / RAM / stack budget.

Usage:
  tools/cross_build.py                      # every configuration
  tools/cross_build.py cortex-m4-O2 --json  # one, as JSON
  tools/cross_build.py --force              # rebuild even when cached
  tools/cross_build.py --timing             # the cycle model's tables and sources

Outputs land in build/target/<cpu>-<opt>/ (ELF, map, .su, .ci); see
python/peerfix/budget/build.py.  Exit status 2 when the cross compiler is
missing (tools/install_cross.sh installs it), 1 on a build failure.
"""

from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "python"))

from peerfix.budget import CONFIGS, TargetConfig, build, summary  # noqa: E402
from peerfix.budget.build import BuildError, ToolchainMissing  # noqa: E402


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("configs", nargs="*", help="e.g. cortex-m4-O2 cortex-m0plus-Os (default: all)")
    parser.add_argument("--json", action="store_true", help="print the figures as JSON")
    parser.add_argument("--force", action="store_true", help="rebuild even when the cached build is current")
    parser.add_argument("--top", type=int, default=5, help="entry points with the deepest stack to list")
    parser.add_argument("--timing", action="store_true", help="print the cycle model (tables, sources) and exit")
    args = parser.parse_args(argv)
    if args.timing:
        print_timing()
        return 0
    try:
        configs = [TargetConfig.parse(c) for c in args.configs] or list(CONFIGS)
    except ValueError as err:
        parser.error(str(err))
    out = []
    try:
        for config in configs:
            result = build(config, force=args.force)
            if result.warnings.strip():
                print(result.warnings, file=sys.stderr)
            out.append(summary(result) | {"elf": str(result.elf)})
    except ToolchainMissing as err:
        print(f"cross_build: {err}", file=sys.stderr)
        return 2
    except BuildError as err:
        print(f"cross_build: build failed:\n{err}", file=sys.stderr)
        return 1
    if args.json:
        print(json.dumps(out, indent=1))
        return 0
    for s in out:
        sec = s["sections"]
        print(f"{s['config']}: flash {s['flash_bytes']} B (text {sec['text']}, rodata {sec['rodata']}, "
              f"data {sec['data']}), static RAM {s['ram_static_bytes']} B   [{s['elf']}]")
        deepest = sorted(s["stack_worst_bytes"].items(), key=lambda kv: -kv[1])[: args.top]
        for name, nbytes in deepest:
            print(f"  stack worst case {nbytes:5d} B  {name}: {' > '.join(s['stack_deepest_path'][name])}")
        if s["library_frames"]:
            frames = ", ".join(f"{k} {v} B" for k, v in sorted(s["library_frames"].items()))
            print(f"  frames measured from the linked code (no .su): {frames}")
    return 0


def print_timing() -> None:
    from peerfix.budget.timing import ESTIMATE_NOTE, MODELS

    print(f"Note: {ESTIMATE_NOTE}.")
    for model in MODELS.values():
        print(f"\n{model.name}: {model.source}")
        for cls, cycles in model.table():
            print(f"  {cls:58s} {cycles}")
        for note in model.notes:
            print(f"  - {note}")


if __name__ == "__main__":
    sys.exit(main())
