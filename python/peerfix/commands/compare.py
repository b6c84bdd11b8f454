"""`peerfix compare SCENARIO_DIR`: the fixed-point core against the float64 twin."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np

from ..harness import tolerances
from ..harness.compare import compare_scenario, summarise, write_rows
from ..runner import _json_safe
from ..scenario import read_scenario
from .common import add_estimator_options, estimator_params, print_json


def register(sub) -> None:
    p = sub.add_parser("compare", help="run the fixed-point core and the float twin on one scenario and compare", description=__doc__)
    p.add_argument("scenario", type=Path, metavar="SCENARIO_DIR")
    p.add_argument("--out", type=Path, default=None, help="folder for compare.csv (per agent and iteration) and summary.json")
    p.add_argument("--json", action="store_true", help="print the summary as JSON")
    add_estimator_options(p)
    p.set_defaults(handler=handle)


def handle(args) -> int:
    params = estimator_params(args)
    scenario = read_scenario(args.scenario)
    cmp = compare_scenario(scenario, params, args.iterations, args.schedule, not args.no_coop)
    per_iteration = []
    for k in sorted({r["iteration"] for r in cmp.rows}):
        rows = [r for r in cmp.rows if r["iteration"] == k]
        s = summarise(rows, final_only=False)
        s["iteration"] = k
        per_iteration.append(s)
    doc = _json_safe({"final": cmp.summary, "per_iteration": per_iteration, "tolerances": _tolerance_table()})
    if args.out is not None:
        args.out.mkdir(parents=True, exist_ok=True)
        write_rows(cmp.rows, args.out / "compare.csv")
        (args.out / "summary.json").write_text(json.dumps(doc, indent=2))
    if args.json:
        print_json(doc)
        return 0
    print(f"{scenario.site.name}: fixed-point core vs float64 twin, {len(scenario.agent_ids)} agents")
    print("iter  diff_median_m  diff_p99_m  within_1m_float  within_1m_fixed  split")
    for s in per_iteration:
        print(
            f"{s['iteration']:>4}  {s['position_diff_median_m']:13.4f}  {s['position_diff_p99_m']:10.4f}  "
            f"{s.get('fraction_within_1m_float', np.nan):15.3f}  {s.get('fraction_within_1m_fixed', np.nan):15.3f}  "
            f"{s.get('split_decisions', 0):5d}"
        )
    failed = [k for k, ok in cmp.summary["verdict"].items() if not ok]
    print("tolerances: " + ("all hold" if not failed else "outside: " + ", ".join(failed)))
    return 0


def _tolerance_table() -> dict:
    return {k: getattr(tolerances, k) for k in dir(tolerances) if k.isupper()}
