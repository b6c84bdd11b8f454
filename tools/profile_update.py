"""Where the cycles of pfx_node_update go on the emulated target.

Replays the captured updates of the headline configuration (12 heard
broadcasts, K = 4) on the cross-built core and prints, for the median call,
the slowest call and the sum over all of them, the estimated cycles per
function (the emulator's per-block accounting; cycles are the same
TRM-table ESTIMATE as `peerfix budget`).  A working tool for speed work,
not a release figure.

--steps also prints, for the slowest calls, the cycles of the update cut
after 1, 2, ... broadcasts in update order (the inbox sorted as the core
sorts it, then truncated): what each neighbour step adds.

    python tools/profile_update.py [--target cortex-m4] [--opt O2] [--quick] [--top 25] [--steps 3]
                                   [--prior any|acquisition|tracking] [--param NAME=VALUE ...]
"""

from __future__ import annotations

import argparse
import dataclasses
import statistics

from peerfix.budget.build import TargetConfig, build
from peerfix.budget.capture import RUNS, capture, from_tracking_prior, is_headline, with_overrides
from peerfix.budget.report import FULL_CALLS, FULL_HEADLINE, QUICK_CALLS, QUICK_HEADLINE, replay_all
from peerfix.commands.common import param_overrides
from peerfix.core._pfx import ffi, lib


PRIOR_LABEL = {"any": "either prior", "acquisition": "the uniform prior", "tracking": "a tracking prior"}


def _table(title: str, per_function: dict[str, tuple[int, int]], top: int) -> None:
    total = sum(c for _, c in per_function.values()) or 1
    print(f"\n{title}: {total:,} cycles")
    for name, (ins, cyc) in sorted(per_function.items(), key=lambda kv: -kv[1][1])[:top]:
        print(f"  {name:40s} {cyc:>11,} cycles {100 * cyc / total:5.1f} %  {ins:>10,} instructions")


def _update_order(call) -> list[int]:
    """The order the core takes the call's broadcasts in: the host build's own update run on a copy of
    the call's inputs, read from its workspace (pfx_workspace_t.order)."""
    node = ffi.new("pfx_node_t *")
    ffi.memmove(node, call.args[0].data, ffi.sizeof("pfx_node_t"))
    inbox = ffi.from_buffer("pfx_inbox_t *", bytearray(call.args[1].data))
    ws = ffi.new("pfx_workspace_t *")
    if lib.pfx_node_update(node, inbox, ws) != lib.PFX_OK:
        raise RuntimeError(f"captured update from {call.source} fails on the host")
    return list(ws.order[0:inbox.count])


def _prefix(call, order: list[int], n: int):
    """The call with its inbox in update order cut to n broadcasts (a sorted inbox keeps its order:
    the core's sort is stable)."""
    data = bytearray(call.args[1].data)
    inbox = ffi.from_buffer("pfx_inbox_t *", data)
    size = ffi.sizeof("pfx_heard_t")
    heard = [bytes(ffi.buffer(ffi.addressof(inbox.heard[i]), size)) for i in range(inbox.count)]
    for j, i in enumerate(order):
        ffi.memmove(ffi.addressof(inbox.heard[j]), heard[i], size)
    inbox.count = n
    args = (call.args[0], dataclasses.replace(call.args[1], data=bytes(data))) + call.args[2:]
    return dataclasses.replace(call, args=args)


def _steps(result, target: str, rows, count: int) -> None:
    print("\nthrough n broadcasts (update order): cumulative cycles; + what broadcast n adds (n >= 3: the final"
          "\nreduction is then of a working mixture already at the cap; n = 1 includes reducing the first ring)")
    for row in sorted(rows, key=lambda r: -r.cycles)[:count]:
        order = _update_order(row.call)
        cut = tuple(_prefix(row.call, order, n) for n in range(1, len(order) + 1))
        cum = [r.cycles for r in replay_all(str(result.elf), result.key, target, cut)]
        steps = "  ".join(f"{n + 1}:{c:,}" if n < 2 else f"{c - cum[n - 1]:+,}" for n, c in enumerate(cum))
        print(f"  call of {row.cycles:,} cycles ({row.call.source}): {steps}")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--target", default="cortex-m4", choices=("cortex-m4", "cortex-m0plus"))
    ap.add_argument("--opt", default="O2", choices=("O2", "Os"))
    ap.add_argument("--quick", action="store_true", help="the quick capture (20 headline calls)")
    ap.add_argument("--top", type=int, default=25)
    ap.add_argument("--steps", type=int, default=0, metavar="N", help="per-step cycles of the N slowest calls")
    ap.add_argument("--param", action="append", default=[], metavar="NAME=VALUE",
                    help="an estimator setting of the captured runs (as in `peerfix budget --param`)")
    ap.add_argument("--prior", default="any", choices=("any", "acquisition", "tracking"),
                    help="only the updates from the uniform prior (acquisition) or from a tracking prior")
    args = ap.parse_args()

    result = build(TargetConfig(args.target, args.opt))
    overrides = param_overrides(args.param)
    sel = capture(*((QUICK_CALLS, QUICK_HEADLINE) if args.quick else (FULL_CALLS, FULL_HEADLINE)),
                  runs=with_overrides(RUNS, overrides))
    calls = [c for c in sel.calls["pfx_node_update"] if is_headline(c)
             and (args.prior == "any" or from_tracking_prior(c) == (args.prior == "tracking"))]
    rows = replay_all(str(result.elf), result.key, args.target, tuple(calls))
    bad = [r for r in rows if not r.bit_exact]
    cycles = sorted(r.cycles for r in rows)
    print(f"{args.target}-{args.opt}: {len(rows)} headline updates (from {PRIOR_LABEL[args.prior]}), median {statistics.median(cycles):,.0f}, "
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
    if args.steps:
        _steps(result, args.target, rows, args.steps)


if __name__ == "__main__":
    main()
