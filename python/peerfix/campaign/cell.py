"""Run one cell: simulate the network, run the engine, score it.

`run_cell` takes and returns plain dicts so it can run in a worker process or
on a Dask worker; it never raises for a failing run (the error comes back in
the result, and the campaign goes on without storing it).
"""

from __future__ import annotations

import math
import platform
import time
import traceback

import numpy as np

from .grid import Cell
from .table import ITERATION_METRICS


def _finite(x) -> float | None:
    x = float(x)
    return x if math.isfinite(x) else None


def run_cell(doc: dict) -> dict:
    """The result document of one cell (see table.METRIC_COLUMNS for its metrics)."""
    from threadpoolctl import threadpool_limits

    cell = Cell.from_doc(doc)
    try:
        # One BLAS thread: a campaign already runs one cell per core, and BLAS threads on
        # top of that make the bound's small solves (harness.bounds) 10 to 50 times slower.
        with threadpool_limits(limits=1):
            return _run(cell)
    except Exception:  # noqa: BLE001 - reported back, the campaign goes on
        return {"key": cell.key, "cell": cell.as_doc(), "error": traceback.format_exc()}


def _run(cell: Cell) -> dict:
    from ..channel import Channel
    from ..runner import run_scenario, score_epoch
    from ..simulate import simulate

    c0, t0 = time.process_time(), time.perf_counter()
    scenario = simulate(cell.preset, cell.seed, **dict(cell.scenario))
    t1 = time.perf_counter()
    # The channel's draws are seeded by the network's seed: engines see the same losses.
    channel = Channel(cell.packet_loss, cell.bit_error_rate, cell.seed) if (cell.packet_loss or cell.bit_error_rate) else None
    params = cell.params()
    result = run_scenario(
        scenario,
        cell.engine,
        params,
        cell.iterations,
        cell.schedule,
        cell.cooperative,
        score=False,  # timed apart: run_s is the estimator alone
        air=cell.air,
        channel=channel,
        hold_last_heard=cell.hold_last_heard,
    )
    t2 = time.perf_counter()
    record = result.epochs[-1]  # simulated networks are static: one epoch
    scored = score_epoch(getattr(result, "scenario", scenario), record, cell.cooperative)
    t3, c3 = time.perf_counter(), time.process_time()
    if not scored:
        raise ValueError("the scenario has no truth to score against")
    its = scored["iterations"]
    final = its[-1]
    rows = scored.get("scored", slice(None))  # the agents that were scored (all, on a simulated network)
    errors = np.linalg.norm(record.iterations[-1].mean[rows] - scored["truth_xy_m"], axis=1)
    within = [m["fraction_within_1m"] for m in its]
    metrics = {
        "n_agents": len(scenario.agent_ids),
        "n_anchors": len(scenario.anchor_ids),
        **{k: final[k] for k in ("fraction_within_1m", "rmse_m", "rmse_within_1m_m", "error_p50_m", "error_p90_m",
                                 "error_p99_m", "coverage_95", "peb_rms_m", "fraction_peb_below_0_33m")},
        "within_1m_best": max(within),
        "within_1m_drop": max(within) - within[-1],  # > 0: it was better at an earlier iteration
        "bytes_per_agent_per_iteration": float(np.mean([m["bytes_per_agent"] for m in its])),
        "bytes_per_network": int(sum(m["bytes_sent"] for m in its)),
        "messages_per_iteration": float(np.mean([m["messages_sent"] for m in its])),
        "frames_lost": int(sum(m["frames_lost"] for m in its)),
        "frames_corrupted": int(sum(m["frames_corrupted"] for m in its)),
        "frames_rejected": int(sum(m["frames_rejected"] for m in its)),
        "simulate_s": t1 - t0,
        "run_s": t2 - t1,
        "score_s": t3 - t2,
        "cpu_s": c3 - c0,  # CPU time of the whole cell: its cost on a machine others share too
    }
    return {
        "key": cell.key,
        "cell": cell.as_doc(),
        "resolved": cell.resolved(),  # what the key hashes: every setting in force, for provenance
        "metrics": {k: (_finite(v) if isinstance(v, float) else v) for k, v in metrics.items()},
        "iterations": [{k: (_finite(m[k]) if isinstance(m[k], float) else m[k]) for k in ("iteration", *ITERATION_METRICS)}
                       for m in its],
        # Final per-agent errors, for figures pooled over networks (percentiles, RMSE).
        "errors_m": [round(float(e), 5) for e in errors],
        "host": platform.node(),
    }
