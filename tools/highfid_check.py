#!/usr/bin/env python3
"""Open field, many seeds: the Gaussian-mixture engines against the high-fidelity references.

    python tools/highfid_check.py [--seeds 10] [--iterations 4] [--refine 2] [--json]

Per seed a fresh open-field network (peerfix.simulate, preset open-field);
every engine runs the same network through the same driver and schedule
(slot).  Figures, pooled over all seeds at the last iteration:

- RMSE over agents within 1 m, and the share within 1 m, per engine;
- the GM engines' RMSE against the particle reference's (target: at most 15%
  above it);
- message size: bytes per broadcast as the driver counts them, and the
  particle message against a full K = 4 frame (45 B, docs/wire-format.md)
  (target: the frame at least 50 times smaller);
- CPU seconds per network and engine (process time: other jobs on the
  machine do not inflate it).

--refine R also runs the particle reference at twice the particles and
proposals on the first R seeds and reports the change (the resolution check
on the full network).
"""

from __future__ import annotations

import argparse
import json
import sys
import time

import numpy as np
from peerfix.highfid import ParticleEngine, ParticleParams
from peerfix.reference import EstimatorParams
from peerfix.runner import run_scenario
from peerfix.simulate import simulate

ENGINES = ("float", "fixed", "particle", "central")
K4_FRAME_BYTES = 13 + 8 * 4  # docs/wire-format.md
TARGET_RMSE_RATIO = 1.15
TARGET_BYTES_RATIO = 50.0


def run_one(scenario, engine, iterations: int) -> dict:
    t0 = time.process_time()
    res = run_scenario(scenario, engine, EstimatorParams(), iterations=iterations)
    cpu = time.process_time() - t0
    last = res.epochs[0].iterations[-1]
    truth = res.metrics[0]["truth_xy_m"]
    return {
        "errors_m": np.linalg.norm(last.mean - truth, axis=1),
        "bytes_sent": last.bytes_sent,
        "messages_sent": last.messages_sent,
        "cpu_s": cpu,
    }


def pooled(errors: list[np.ndarray]) -> dict:
    e = np.concatenate(errors)
    ok = e <= 1.0
    return {
        "rmse_within_1m_m": float(np.sqrt(np.mean(e[ok] ** 2))) if ok.any() else float("nan"),
        "fraction_within_1m": float(np.mean(ok)),
        "rmse_m": float(np.sqrt(np.mean(e**2))),
    }


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--seeds", type=int, default=10)
    ap.add_argument("--iterations", type=int, default=4)
    ap.add_argument("--refine", type=int, default=0, metavar="R", help="seeds to rerun at 2x particles")
    ap.add_argument("--json", action="store_true")
    args = ap.parse_args()

    runs: dict[str, list[dict]] = {e: [] for e in ENGINES}
    fine_runs: list[dict] = []
    for seed in range(args.seeds):
        scenario = simulate("open-field", seed)
        for e in ENGINES:
            runs[e].append(run_one(scenario, e, args.iterations))
        if seed < args.refine:
            fine = ParticleEngine(EstimatorParams(), particle_params=ParticleParams(particles=512, proposals=1024))
            fine_runs.append(run_one(scenario, fine, args.iterations))
        if not args.json:
            print(f"seed {seed} done", file=sys.stderr, flush=True)

    out: dict = {"seeds": args.seeds, "iterations": args.iterations, "engines": {}}
    for e, rs in runs.items():
        msgs = sum(r["messages_sent"] for r in rs)
        out["engines"][e] = {
            **pooled([r["errors_m"] for r in rs]),
            "bytes_per_message": sum(r["bytes_sent"] for r in rs) / max(1, msgs),
            "cpu_s_per_network": float(np.mean([r["cpu_s"] for r in rs])),
        }
    ref = out["engines"]["particle"]
    for e in ("float", "fixed", "central"):
        out["engines"][e]["rmse_vs_particle"] = out["engines"][e]["rmse_within_1m_m"] / ref["rmse_within_1m_m"]
    out["particle_bytes_vs_k4_frame"] = ref["bytes_per_message"] / K4_FRAME_BYTES
    out["particle_bytes_vs_fixed_mean_frame"] = ref["bytes_per_message"] / out["engines"]["fixed"]["bytes_per_message"]
    out["targets_met"] = {
        "float_rmse_within_15pct": out["engines"]["float"]["rmse_vs_particle"] <= TARGET_RMSE_RATIO,
        "fixed_rmse_within_15pct": out["engines"]["fixed"]["rmse_vs_particle"] <= TARGET_RMSE_RATIO,
        "bytes_at_least_50x": out["particle_bytes_vs_k4_frame"] >= TARGET_BYTES_RATIO,
    }
    if fine_runs:
        n = len(fine_runs)
        base = [r["errors_m"] for r in runs["particle"][:n]]
        fine = [r["errors_m"] for r in fine_runs]
        out["refinement"] = {
            "seeds": n,
            "base": pooled(base),
            "fine_2x": pooled(fine),
            "fine_cpu_s_per_network": float(np.mean([r["cpu_s"] for r in fine_runs])),
        }

    if args.json:
        json.dump(out, sys.stdout, indent=2)
        print()
        return 0
    print(f"\nopen field, {args.seeds} seeds, {args.iterations} iterations (slot schedule), pooled over seeds")
    print("engine    rmse_within_1m  within_1m  vs_particle  bytes/msg  cpu_s/network")
    for e, m in out["engines"].items():
        vs = m.get("rmse_vs_particle", 1.0)
        print(
            f"{e:<9} {m['rmse_within_1m_m']:14.4f}  {m['fraction_within_1m']:9.4f}  {vs:11.3f}  "
            f"{m['bytes_per_message']:9.1f}  {m['cpu_s_per_network']:13.2f}"
        )
    print(
        f"particle message / K=4 frame ({K4_FRAME_BYTES} B): {out['particle_bytes_vs_k4_frame']:.1f}x; "
        f"/ mean fixed frame: {out['particle_bytes_vs_fixed_mean_frame']:.1f}x"
    )
    print("targets:", ", ".join(f"{k}={v}" for k, v in out["targets_met"].items()))
    if fine_runs:
        r = out["refinement"]
        print(
            f"refinement on {r['seeds']} seeds: rmse_within_1m {r['base']['rmse_within_1m_m']:.4f} m (N=256) -> "
            f"{r['fine_2x']['rmse_within_1m_m']:.4f} m (N=512), within_1m {r['base']['fraction_within_1m']:.3f} -> "
            f"{r['fine_2x']['fraction_within_1m']:.3f}; {r['fine_cpu_s_per_network']:.1f} CPU s per network at N=512"
        )
    return 0


if __name__ == "__main__":
    sys.exit(main())
