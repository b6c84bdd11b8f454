"""`peerfix run SCENARIO_DIR --engine float --out OUT`: estimate every agent's position."""

from __future__ import annotations

import sys
from pathlib import Path

from ..reference.params import ROBUST_ITERATIONS, ROBUST_PRESET
from ..runner import ENGINES, run_scenario, write_outputs
from ..scenario import read_scenario
from .common import (
    add_air_options,
    add_estimator_options,
    add_log_options,
    add_time_options,
    channel_from,
    estimator_params,
    log_summary_lines,
    print_json,
    time_options,
)


def register(sub) -> None:
    preset = ", ".join(f"{k} {v:g}" for k, v in ROBUST_PRESET.items())
    p = sub.add_parser(
        "run",
        help="run an estimator on a scenario folder",
        description=__doc__,
        epilog=(
            f"--robust also picks the robust preset ({preset}; peerfix.reference.params.ROBUST_PRESET, "
            f"docs/estimator.md); --param NAME=VALUE still overrides any of them. The preset is measured "
            f"with --iterations {ROBUST_ITERATIONS}. Without --robust the defaults are unchanged."
        ),
    )
    p.add_argument("scenario", type=Path, metavar="SCENARIO_DIR")
    p.add_argument("--engine", choices=ENGINES, default="float")
    p.add_argument("--out", type=Path, required=True, metavar="OUT", help="folder for estimates.csv and metrics.json")
    p.add_argument("--json", action="store_true", help="print the final-iteration summary as JSON")
    p.add_argument("--plots", action="store_true",
                   help="also draw tracks.png and error_over_time.png into OUT (needs truth and several epochs)")
    add_estimator_options(p)
    add_air_options(p)
    add_time_options(p)
    add_log_options(p)
    p.set_defaults(handler=handle)


def handle(args) -> int:
    params = estimator_params(args)
    channel = channel_from(args)
    if channel.bit_error_rate and (args.engine != "fixed" or args.no_air):
        raise SystemExit("peerfix: error: --bit-error-rate needs frames on the air (--engine fixed without --no-air)")
    timing = time_options(args)
    # Strict unless asked: raises InputError before anything is written.
    scenario = read_scenario(args.scenario, set_aside_bad_rows=args.set_aside_bad_rows)
    result = run_scenario(
        scenario,
        engine=args.engine,
        params=params,
        iterations=args.iterations,
        schedule=args.schedule,
        cooperative=not args.no_coop,
        air=not args.no_air,
        channel=channel,
        **timing,
    )
    doc = write_outputs(result, args.out)
    if args.plots:
        from ..report.tracks import write_run_pictures

        try:
            for path in write_run_pictures(result, args.out).values():
                print(f"picture: {path}", file=sys.stderr)
        except ValueError as why:
            print(f"peerfix: no pictures: {why}", file=sys.stderr)
    final = doc.get("final", {})
    for line in log_summary_lines(doc):
        print(line, file=sys.stderr)
    if args.json:
        log = doc["log"]
        print_json(
            {
                "engine": doc["engine"],
                "schedule": doc["schedule"],
                "cooperative": doc["cooperative"],
                **final,
                "log_rules": {k: v["count"] for k, v in log["rules"].items()},
                "set_aside": {k: v["count"] for k, v in log["set_aside"].items()},
                "latency": {k: v for k, v in doc["latency"].items() if k != "agents"},
            }
        )
    elif final:
        print(
            f"{scenario.site.name}: {final['n_agents']} agents, iteration {final['iteration']}: "
            f"{final['fraction_within_1m']:.3f} within 1 m, RMSE {final['rmse_m']:.3f} m, "
            f"95% coverage {final['coverage_95']:.3f}, bound RMS {final['peb_rms_m']:.3f} m -> {args.out}"
        )
    else:
        print(f"{scenario.site.name}: {len(scenario.agent_ids)} agents estimated (no truth to score) -> {args.out}")
    return 0
