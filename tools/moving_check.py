#!/usr/bin/env python3
"""Full-length tracking check: the fixed-point core and the float twin over the whole
moving demo recording (cold-store-shift, 10 min at 5 Hz), with the issue's targets.

    python tools/moving_check.py --out moving-check            # 600 s, seed 4 (the demo's)
    python tools/moving_check.py --out /tmp/mc --duration-s 120 --seed 3

It runs the demo's moving part (peerfix.report.demo.run_moving) with the float
twin over the whole recording instead of its first minute, in a second process
next to the fixed core (about 8 min of CPU for the float twin on one core).
Writes OUT/moving/{scenario,runs}, OUT/tracks.png, OUT/error_over_time.png,
OUT/moving_check.md and OUT/moving_check.json; prints the figures.
Exit status 0 when both targets hold, 1 when one does not.
"""

from __future__ import annotations

import argparse
import json
import sys
import time
from pathlib import Path

from peerfix.report.demo import DEFAULT_SEED, MOVING_DURATION_S, run_moving


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("--out", type=Path, required=True, metavar="DIR")
    p.add_argument("--seed", type=int, default=DEFAULT_SEED)
    p.add_argument("--duration-s", type=float, default=MOVING_DURATION_S)
    p.add_argument("--serial", action="store_true", help="run the two engines one after the other")
    p.add_argument("--overwrite", action="store_true")
    args = p.parse_args(argv)

    args.out.mkdir(parents=True, exist_ok=True)
    start = time.perf_counter()
    part = run_moving(args.out, args.seed, args.duration_s, args.duration_s, overwrite=args.overwrite,
                      parallel=not args.serial, stage=lambda text: print(text, file=sys.stderr, flush=True))
    s = part.summary
    s["wall_total_s"] = time.perf_counter() - start
    (args.out / "moving_check.json").write_text(json.dumps(s, indent=2), encoding="utf-8")
    (args.out / "moving_check.md").write_text("\n".join(part.markdown), encoding="utf-8")

    fx, fl, d, tg = s["fixed"], s["float"], s["difference"], s["targets"]
    print(f"{s['preset']} seed {s['seed']}: {s['agents']} tags, {s['epochs']} epochs ({s['duration_s']:g} s), "
          f"{s['ranges']} ranges, {s['iterations_per_epoch']} iteration per epoch")
    print(f"fixed: RMSE {fx['whole']['rmse_m']:.4f} m, median {fx['whole']['median_m']:.4f} m, "
          f"p90 {fx['whole']['p90_m']:.4f} m; CPU {fx['cpu_s']:.1f} s = {fx['speed_vs_real_time']:.1f}x real time")
    print(f"float: RMSE {fl['head']['rmse_m']:.4f} m, median {fl['head']['median_m']:.4f} m, "
          f"p90 {fl['head']['p90_m']:.4f} m; CPU {fl['cpu_s']:.1f} s")
    print(f"RMSE fixed/float {s['rmse_ratio']:.4f} (target <= {tg['rmse_ratio_max']:g}: "
          f"{'met' if tg['rmse_ratio_met'] else 'NOT met'}); median |fixed - float| {d['median_m']:.5f} m, "
          f"p90 {d['p90_m']:.5f} m, max {d['max_m']:.3f} m (target <= {tg['median_difference_max_m']:g} m: "
          f"{'met' if tg['median_difference_met'] else 'NOT met'})")
    lat_x, lat_f = fx["latency"], fl["latency_head"]
    print(f"latency to first fix: fixed median {lat_x['median_s']} s, max {lat_x['max_s']} s "
          f"({lat_x['agents_fixed']}/{lat_x['agents_heard']} tags); float median {lat_f['median_s']} s, "
          f"max {lat_f['max_s']} s ({lat_f['agents_fixed']}/{lat_f['agents_heard']} tags)")
    return 0 if tg["rmse_ratio_met"] and tg["median_difference_met"] else 1


if __name__ == "__main__":
    sys.exit(main())
