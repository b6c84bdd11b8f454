#!/usr/bin/env python3
"""Fixed-point core against the float64 twin on the open-field networks, pooled.

    python tools/compare_open_field.py [--seeds 10] [--iterations 4] [--air]

Prints the pooled final-iteration summary of peerfix.harness.compare (the
figures tests/core/test_fixed_vs_float_open_field.py asserts) and, per
iteration, the median and 99th percentile of the position difference.
"""

from __future__ import annotations

import argparse
import json
import sys

from peerfix.harness.compare import compare_scenario, summarise
from peerfix.runner import _json_safe
from peerfix.simulate import simulate


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--seeds", type=int, default=10)
    ap.add_argument("--iterations", type=int, default=4)
    ap.add_argument("--air", action="store_true", help="the core with frames on the air")
    args = ap.parse_args()
    rows = []
    for seed in range(args.seeds):
        rows += compare_scenario(simulate("open-field", seed), iterations=args.iterations, air=args.air).rows
    per_iteration = {}
    for k in range(1, args.iterations + 1):
        s = summarise([r for r in rows if r["iteration"] == k], final_only=False)
        per_iteration[k] = {key: s[key] for key in ("position_diff_median_m", "position_diff_p99_m", "fraction_within_1m_float", "fraction_within_1m_fixed", "split_decisions")}
    final = summarise([r for r in rows if r["iteration"] == args.iterations], final_only=False)
    json.dump(_json_safe({"final": final, "per_iteration": per_iteration}), sys.stdout, indent=2)
    print()
    return 0 if all(final["verdict"].values()) else 1


if __name__ == "__main__":
    sys.exit(main())
