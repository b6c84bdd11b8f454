"""`peerfix demo --out DIR`: simulate a built-in site, run the estimator three ways, track tags moving through
the cold store with the fixed-point core and the float twin, and write a report with pictures."""

from __future__ import annotations

import sys
from pathlib import Path

from ..report.demo import (
    DEFAULT_ITERATIONS,
    DEFAULT_PRESET,
    DEFAULT_SEED,
    FLOAT_DURATION_S,
    MOVING_DURATION_S,
    MOVING_PRESET,
    run_demo,
)
from ..report.markdown import metres, share
from ..simulate import list_presets
from .common import print_json


def register(sub) -> None:
    p = sub.add_parser("demo", help="end-to-end demo on a built-in site: runs, pictures, report.md",
                       description=__doc__)
    p.add_argument("--out", type=Path, required=True, metavar="DIR", help="folder for the scenario, runs, pictures and report.md")
    p.add_argument("--preset", choices=list_presets(), default=DEFAULT_PRESET, help=f"site to simulate (default {DEFAULT_PRESET})")
    p.add_argument("--seed", type=int, default=DEFAULT_SEED, help=f"simulation seed (default {DEFAULT_SEED})")
    p.add_argument("--iterations", type=int, default=DEFAULT_ITERATIONS, help=f"iterations per epoch (default {DEFAULT_ITERATIONS})")
    p.add_argument("--overwrite", action="store_true", help="replace DIR/scenario when it is already there")
    p.add_argument("--no-moving", action="store_true", help=f"leave out the moving part ({MOVING_PRESET})")
    p.add_argument("--moving-duration-s", type=float, default=MOVING_DURATION_S, metavar="T",
                   help=f"length of the moving recording the fixed-point core tracks (default {MOVING_DURATION_S:g})")
    p.add_argument("--float-duration-s", type=float, default=FLOAT_DURATION_S, metavar="T",
                   help=f"first part of it the float twin tracks too (default {FLOAT_DURATION_S:g})")
    p.add_argument("--serial", action="store_true", help="run the float twin in this process, not in a second one")
    p.add_argument("--quiet", action="store_true", help="no progress bar")
    p.add_argument("--json", action="store_true", help="print the summary (final metrics per run) as JSON")
    p.set_defaults(handler=handle)


def handle(args) -> int:
    if args.iterations < 1:
        print("peerfix: error: --iterations must be at least 1", file=sys.stderr)
        return 2
    try:
        summary = run_demo(args.out, seed=args.seed, preset=args.preset, iterations=args.iterations,
                           progress=not args.quiet, overwrite=args.overwrite, moving=not args.no_moving,
                           moving_duration_s=args.moving_duration_s, float_duration_s=args.float_duration_s,
                           parallel=not args.serial)
    except (FileExistsError, ValueError) as err:
        print(f"peerfix: error: {err}", file=sys.stderr)
        return 2
    if args.json:
        print_json(summary)
        return 0
    for name, run in summary["runs"].items():
        print(f"{run['label']:<30} {share(run['fraction_within_1m']):>6} within 1 m, "
              f"RMSE {metres(run['rmse_m'])} m  -> {args.out / 'runs' / name}")
    moving = summary.get("moving")
    if moving:
        fx, fl = moving["fixed"], moving["float"]
        print(f"{'moving, fixed-point core':<30} RMSE {metres(fx['whole']['rmse_m'])} m over {moving['duration_s']:g} s, "
              f"{fx['speed_vs_real_time']:.0f}x real time  -> {args.out / 'moving' / 'runs' / 'fixed'}")
        ratio = moving["rmse_ratio"]
        print(f"{'moving, float twin':<30} RMSE {metres(fl['head']['rmse_m'])} m over the first {moving['float_s']:g} s; "
              f"fixed/float RMSE {'n/a' if ratio is None else f'{ratio:.3f}'}, median |fixed - float| "
              f"{metres(moving['difference']['median_m'])} m  -> {args.out / 'moving' / 'runs' / 'float'}")
    print(f"report: {args.out / 'report.md'}")
    return 0
