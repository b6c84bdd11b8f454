"""Where the cycles of pfx_node_update go on the emulated target.

Replays the captured updates of the headline configuration (12 heard
broadcasts, K = 4) on the cross-built core and prints, for the median call,
the slowest call and the sum over all of them, the estimated cycles per
function (the emulator's per-block accounting; cycles are the same
TRM-table ESTIMATE as `peerfix budget`).  A working tool for speed work,
not a release figure.

    python tools/profile_update.py [--target cortex-m4] [--opt O2] [--quick] [--top 25]
"""

from __future__ import annotations

import argparse
import statistics

from peerfix.budget.build import TargetConfig, build
from peerfix.budget.capture import HEADLINE_BUCKET, capture
from peerfix.budget.report import FULL_CALLS, FULL_HEADLINE, QUICK_CALLS, QUICK_HEADLINE, replay_all


def _table(title: str, per_function: dict[str, tuple[int, int]], top: int) -> None:
    total = sum(c for _, c in per_function.values()) or 1
    print(f"\n{title}: {total:,} cycles")
    for name, (ins, cyc) in sorted(per_function.items(), key=lambda kv: -kv[1][1])[:top]:
        print(f"  {name:40s} {cyc:>11,} cycles {100 * cyc / total:5.1f} %  {ins:>10,} instructions")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--target", default="cortex-m4", choices=("cortex-m4", "cortex-m0plus"))
    ap.add_argument("--opt", default="O2", choices=("O2", "Os"))
    ap.add_argument("--quick", action="store_true", help="the quick capture (20 headline calls)")
    ap.add_argument("--top", type=int, default=25)
    args = ap.parse_args()

    result = build(TargetConfig(args.target, args.opt))
    sel = capture(*((QUICK_CALLS, QUICK_HEADLINE) if args.quick else (FULL_CALLS, FULL_HEADLINE)))
    calls = [c for c in sel.calls["pfx_node_update"] if c.bucket == HEADLINE_BUCKET]
    rows = replay_all(str(result.elf), result.key, args.target, tuple(calls))
    bad = [r for r in rows if not r.bit_exact]
    cycles = sorted(r.cycles for r in rows)
    print(f"{args.target}-{args.opt}: {len(rows)} headline updates, median {statistics.median(cycles):,.0f}, "
          f"max {cycles[-1]:,} cycles; {len(bad)} not bit-exact")
    by_cycles = sorted(rows, key=lambda r: r.cycles)
    _table("median call", by_cycles[len(by_cycles) // 2].per_function, args.top)
    _table("slowest call", by_cycles[-1].per_function, args.top)
    total: dict[str, list[int]] = {}
    for r in rows:
        for name, (ins, cyc) in r.per_function.items():
            acc = total.setdefault(name, [0, 0])
            acc[0] += ins
            acc[1] += cyc
    _table("all headline calls", {k: (v[0], v[1]) for k, v in total.items()}, args.top)


if __name__ == "__main__":
    main()
