#!/usr/bin/env python3
"""Print the open-field check: per-iteration figures over seeds for both schedules.

    python tools/open_field_check.py [--seeds 10] [--iterations 6] [--json]

The figures are the ones tests/test_open_field.py asserts; this prints the
whole per-iteration table (slot and broadcast, cooperative and anchors-only).
"""

from __future__ import annotations

import argparse
import json
import sys
import time

from peerfix.harness.study import run_study


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--seeds", type=int, default=10)
    ap.add_argument("--iterations", type=int, default=6)
    ap.add_argument("--json", action="store_true")
    args = ap.parse_args()
    runs = {}
    for schedule in ("slot", "broadcast"):
        for coop in (True, False):
            t0 = time.perf_counter()
            study = run_study(seeds=range(args.seeds), iterations=args.iterations, schedule=schedule, cooperative=coop)
            name = f"{schedule}-{'coop' if coop else 'anchors-only'}"
            runs[name] = {"seconds": time.perf_counter() - t0, "per_iteration": study.per_iteration}
    if args.json:
        json.dump(runs, sys.stdout, indent=2)
        print()
        return 0
    for name, run in runs.items():
        print(f"\n{name} ({args.seeds} seeds, {run['seconds']:.1f} s)")
        print("iter  within_1m  coverage_95  rmse_within_1m  peb_rms_within_1m  peb<0.33  msgs")
        for r in run["per_iteration"]:
            print(
                f"{r['iteration']:>4}  {r['fraction_within_1m']:9.4f}  {r['coverage_95']:11.4f}  "
                f"{r['rmse_within_1m_m']:14.4f}  {r['peb_rms_within_1m_m']:17.4f}  {r['fraction_peb_below_0_33m']:8.4f}  {r['messages_sent']:5.1f}"
            )
    return 0


if __name__ == "__main__":
    sys.exit(main())
