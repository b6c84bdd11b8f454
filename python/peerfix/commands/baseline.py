"""`peerfix baseline record|check`: release regression against recorded reference estimates.

record: run every scenario with the float twin and the fixed core and store
their estimates, with the core's build info and the settings (docs/baseline.md).
check:  re-run the fixed core, compare bit-exact with the recorded core and
within tolerance with the recorded float twin; write report.md and junit.xml.
Exit status of check: 0 all checks hold, 1 a regression, 2 bad input.
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from ..baseline import (
    CHECKS,
    RunSettings,
    check_baseline,
    record_baseline,
    write_junit,
    write_report,
)
from .common import add_air_options, add_estimator_options, estimator_params

# check: options that name a recorded setting default to None ("as recorded").
_AS_RECORDED = {
    "iterations": None,
    "schedule": None,
    "components": None,
    "robust": None,
    "no_coop": None,
    "param": None,
    "no_air": None,
    "packet_loss": None,
    "bit_error_rate": None,
    "channel_seed": None,
}


def register(sub) -> None:
    p = sub.add_parser("baseline", help="record reference estimates of a scenario suite, or check a build against them", description=__doc__)
    bsub = p.add_subparsers(dest="baseline_command", required=True, metavar="ACTION")

    r = bsub.add_parser("record", help="run scenarios with both engines and store their estimates", description=record_baseline.__doc__)
    r.add_argument("scenarios", type=Path, nargs="+", metavar="SCENARIO_DIR")
    r.add_argument("--out", type=Path, required=True, metavar="BASELINE_DIR")
    r.add_argument("--replace", action="store_true", help="overwrite an existing baseline")
    r.add_argument("--final-only", action="store_true", help="store the final iteration of each epoch only (long logs); default: every iteration")
    add_estimator_options(r)
    add_air_options(r)
    r.set_defaults(handler=handle_record)

    c = bsub.add_parser(
        "check",
        help="re-run the fixed core and compare with a baseline (exit 0 holds, 1 regression, 2 bad input)",
        description="Re-run with the recorded settings; an estimator option given here must equal the recorded one.",
    )
    c.add_argument("scenarios", type=Path, nargs="+", metavar="SCENARIO_DIR")
    c.add_argument("--against", type=Path, required=True, metavar="BASELINE_DIR")
    c.add_argument("--report-out", type=Path, default=None, metavar="DIR", help="folder for report.md, plots/ and junit.xml")
    c.add_argument("--junit", type=Path, default=None, metavar="FILE", help="JUnit XML file (default: DIR/junit.xml with --report-out)")
    add_estimator_options(c)
    add_air_options(c)
    c.set_defaults(handler=handle_check, **_AS_RECORDED)


def _fail(message: str) -> int:
    print(f"peerfix: error: {message}", file=sys.stderr)
    return 2


def settings_from(args: argparse.Namespace) -> RunSettings:
    return RunSettings(
        iterations=args.iterations,
        schedule=args.schedule,
        cooperative=not args.no_coop,
        air=not args.no_air,
        packet_loss=args.packet_loss,
        bit_error_rate=args.bit_error_rate,
        channel_seed=args.channel_seed,
        params=estimator_params(args),
        stored_iterations="final" if args.final_only else "all",
    )


def handle_record(args) -> int:
    settings = settings_from(args)
    try:
        manifest = record_baseline(
            args.scenarios, args.out, settings, replace=args.replace, progress=lambda key, engine: print(f"recording {key}: {engine}", file=sys.stderr)
        )
    except ValueError as err:
        return _fail(str(err))
    for s in manifest["scenarios"]:
        verdict = s["tolerance_at_record"].get("verdict", {})
        outside = [k for k, ok in verdict.items() if not ok and k != "weight_diff_median"]
        print(f"{s['key']}: {len(s['agent_ids'])} agents, {s['epochs']} epochs -> {args.out / s['key']}")
        if outside:
            print(
                f"warning: {s['key']}: the fixed core is already outside tolerance of the float twin ({', '.join(outside)}); "
                "`baseline check` reports these as outside since record and fails fixed_within_tolerance only "
                "when one gets worse (or another leaves its tolerance)",
                file=sys.stderr,
            )
    stamp = manifest["core"].get("build_stamp")
    print(f"core {manifest['core']['library_sha256'][:12]} ({'defines: ' + (' '.join(stamp['defines']) or 'none') if stamp else 'build stamp unknown'})")
    return 0


def overrides_from(args: argparse.Namespace) -> dict[str, object]:
    """The settings given on the check's command line, by RunSettings name."""
    out: dict[str, object] = {}
    simple = {"iterations": "iterations", "schedule": "schedule", "packet_loss": "packet_loss", "bit_error_rate": "bit_error_rate", "channel_seed": "channel_seed"}
    for arg, name in simple.items():
        if getattr(args, arg) is not None:
            out[name] = getattr(args, arg)
    if args.no_coop:
        out["cooperative"] = False
    if args.no_air:
        out["air"] = False
    given = argparse.Namespace(components=args.components, robust=bool(args.robust), param=args.param or [])
    params = estimator_params(given)
    if args.components is not None:
        out["params.max_components"] = params.max_components
    if args.robust:
        out["params.robust"] = True
    for item in args.param or []:
        name = item.partition("=")[0]
        out[f"params.{name}"] = getattr(params, name)
    return out


def handle_check(args) -> int:
    try:
        result = check_baseline(args.scenarios, args.against, overrides_from(args), progress=lambda key: print(f"checking {key}", file=sys.stderr))
    except ValueError as err:
        return _fail(str(err))
    for sc in result.scenarios:
        for check in CHECKS:
            print(f"{sc.key} {check}: {'pass' if sc.held(check) else 'FAIL'}")
    for key in result.not_checked:
        print(f"{key}: in the baseline, not checked")
    if args.report_out is not None:
        print(f"report: {write_report(result, args.report_out)}")
    junit = args.junit or (args.report_out / "junit.xml" if args.report_out is not None else None)
    if junit is not None:
        junit.parent.mkdir(parents=True, exist_ok=True)
        print(f"junit: {write_junit(result, junit)}")
    print("baseline check: " + ("all checks hold" if result.passed else "REGRESSION"))
    return 0 if result.passed else 1
