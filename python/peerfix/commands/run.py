"""`peerfix run SCENARIO_DIR --engine float --out OUT`: estimate every agent's position."""

from __future__ import annotations

from pathlib import Path

from ..runner import ENGINES, run_scenario, write_outputs
from ..scenario import read_scenario
from .common import add_air_options, add_estimator_options, channel_from, estimator_params, print_json


def register(sub) -> None:
    p = sub.add_parser("run", help="run an estimator on a scenario folder", description=__doc__)
    p.add_argument("scenario", type=Path, metavar="SCENARIO_DIR")
    p.add_argument("--engine", choices=ENGINES, default="float")
    p.add_argument("--out", type=Path, required=True, metavar="OUT", help="folder for estimates.csv and metrics.json")
    p.add_argument("--json", action="store_true", help="print the final-iteration summary as JSON")
    add_estimator_options(p)
    add_air_options(p)
    p.set_defaults(handler=handle)


def handle(args) -> int:
    params = estimator_params(args)
    channel = channel_from(args)
    if channel.bit_error_rate and (args.engine != "fixed" or args.no_air):
        raise SystemExit("peerfix: error: --bit-error-rate needs frames on the air (--engine fixed without --no-air)")
    scenario = read_scenario(args.scenario)  # strict: raises InputError before anything is written
    result = run_scenario(
        scenario,
        engine=args.engine,
        params=params,
        iterations=args.iterations,
        schedule=args.schedule,
        cooperative=not args.no_coop,
        air=not args.no_air,
        channel=channel,
    )
    doc = write_outputs(result, args.out)
    final = doc.get("final", {})
    if args.json:
        print_json({"engine": doc["engine"], "schedule": doc["schedule"], "cooperative": doc["cooperative"], **final})
    elif final:
        print(
            f"{scenario.site.name}: {final['n_agents']} agents, iteration {final['iteration']}: "
            f"{final['fraction_within_1m']:.3f} within 1 m, RMSE {final['rmse_m']:.3f} m, "
            f"95% coverage {final['coverage_95']:.3f}, bound RMS {final['peb_rms_m']:.3f} m -> {args.out}"
        )
    else:
        print(f"{scenario.site.name}: {len(scenario.agent_ids)} agents estimated (no truth to score) -> {args.out}")
    return 0
