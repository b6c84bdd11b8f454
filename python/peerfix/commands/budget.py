"""`peerfix budget`: will the core fit on the tag, and how long does a call take?

Cross-builds the core, replays calls captured from scenario runs on the
emulated target, and reports cost (instructions, estimated cycles, time at a
clock), flash, RAM, stack and message size, and whether every call gave the
host's bytes.  Exit status 1 when any call mismatches or a [release] limit of
the budget file is exceeded; the [targets] only report met / not met.
With --robust the calls come from runs with the robust preset (blocked
paths, 20 iterations): its cost on the tag, which the budget file's limits
(set for the defaults) do not cover, so they are not checked; the same with
--param NAME=VALUE (estimator settings of every captured run, as in
`peerfix run`): what a setting costs on the tag.
--against an earlier release's budget.json lists what changed, figure by
figure and symbol by symbol (functions, tables); with --max-growth PCT the command also
fails (exit 1) when a compared figure grew by more than PCT percent.
"""

from __future__ import annotations

import sys
from pathlib import Path

from .common import param_overrides, print_json


def register(sub) -> None:
    p = sub.add_parser("budget", help="cost, size and bit-exactness of the C core on a Cortex-M target",
                       description=__doc__)
    p.add_argument("--target", choices=("cortex-m4", "cortex-m0plus"), default="cortex-m4", help="CPU (default cortex-m4)")
    p.add_argument("--opt", choices=("O2", "Os"), default="O2", help="optimisation level (default O2)")
    p.add_argument("--clock-mhz", type=float, default=64.0, metavar="MHZ", help="clock for the times (default 64)")
    p.add_argument("--json", action="store_true", help="print the report as JSON")
    p.add_argument("--out", type=Path, metavar="DIR", help="also write DIR/budget.md and DIR/budget.json")
    p.add_argument("--quick", action="store_true", help="100 captured calls per entry point instead of 1000")
    p.add_argument("--robust", action="store_true",
                   help="capture from runs with the robust preset (`peerfix run --robust`) on blocked paths; "
                        "the budget file is not checked")
    p.add_argument("--param", action="append", default=[], metavar="NAME=VALUE",
                   help="an estimator setting of every captured run (repeatable, as in `peerfix run`); "
                        "the budget file is not checked")
    p.add_argument("--budget", type=Path, metavar="FILE", default=None,
                   help="release budget to check (default: budget.toml of the repository)")
    p.add_argument("--against", type=Path, metavar="FILE",
                   help="an earlier release's budget.json (from `peerfix budget --out`): list what changed")
    p.add_argument("--max-growth", type=float, metavar="PCT",
                   help="with --against: exit 1 when a compared figure grew by more than PCT percent")
    p.set_defaults(handler=handle)


def handle(args) -> int:
    if args.clock_mhz <= 0:
        raise SystemExit("peerfix: error: --clock-mhz must be > 0")
    if args.max_growth is not None and (args.against is None or args.max_growth < 0):
        raise SystemExit("peerfix: error: --max-growth needs --against and a share >= 0")
    try:
        from peerfix.budget.build import TargetConfig, ToolchainMissing, toolchain_available
        from peerfix.budget.report import DEFAULT_BUDGET, attach_budget, budget_report, load_budget, \
            render_markdown, settings_label, write_report
    except ImportError as err:  # unicorn / capstone / pyelftools are test extras
        print(f"peerfix: error: {err}; install the target-budget extras: pip install -e '.[test]'", file=sys.stderr)
        return 2
    if not toolchain_available():
        print("peerfix: error: arm-none-eabi-gcc not found; run tools/install_cross.sh", file=sys.stderr)
        return 2
    from peerfix.budget.compare import check_comparable, compare_reports, load_report

    overrides = param_overrides(args.param)
    config = TargetConfig(args.target, args.opt)
    earlier = None
    if args.against is not None:  # bad input fails before the work
        earlier = load_report(args.against)
        check_comparable(earlier, args.against, config.name, settings_label(args.robust, overrides))
    budget_path = args.budget or DEFAULT_BUDGET
    if args.budget is not None and not budget_path.is_file():
        raise SystemExit(f"peerfix: error: budget file {budget_path} not found")
    try:
        doc = budget_report(config, clock_mhz=args.clock_mhz, quick=args.quick, robust=args.robust,
                            overrides=overrides)
    except ToolchainMissing as err:
        print(f"peerfix: error: {err}", file=sys.stderr)
        return 2
    checks = []
    if budget_path.is_file() and not args.robust and not overrides:
        try:
            budget = load_budget(budget_path)
        except ValueError as err:  # tomllib.TOMLDecodeError included
            print(f"peerfix: error: budget file {budget_path}: {err}", file=sys.stderr)
            return 2
        checks = attach_budget(doc, budget, budget_path)
    if earlier is not None:
        doc["against"] = compare_reports(earlier, doc, args.against, args.max_growth)
    if args.out is not None:
        write_report(doc, args.out)
    if args.json:
        print_json(doc)
    else:
        sys.stdout.write(render_markdown(doc))
        if args.out is not None:
            print(f"-> {args.out / 'budget.md'}, {args.out / 'budget.json'}")
    failed = doc["mismatched_calls"] > 0 or any(c.table == "release" and not c.ok for c in checks) \
        or bool(doc.get("against", {}).get("grew_beyond"))
    return 1 if failed else 0
