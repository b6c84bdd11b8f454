"""Fixed-point core against the float64 twin on the same scenario.

Both engines run through the same driver, schedule and links.  Per agent and
iteration the comparison records the position difference, the covariance
difference (log ratio of determinants and relative Frobenius norm), the
component counts and weights, and both errors against truth.
"""

from __future__ import annotations

import csv
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from ..reference import EstimatorParams
from ..runner import RunResult, run_scenario
from ..scenario.model import Scenario
from . import tolerances as tol

ROW_COLUMNS = [
    "t_s",
    "node_id",
    "iteration",
    "position_diff_m",
    "cov_log_det_ratio",
    "cov_rel_frobenius",
    "components_float",
    "components_fixed",
    "weight_diff_max",
    "modes_float",
    "modes_fixed",
    "mode_weight_diff",
    "error_float_m",
    "error_fixed_m",
]


@dataclass
class Comparison:
    rows: list[dict]
    summary: dict
    float_run: RunResult
    fixed_run: RunResult


def _weight_diff(a, b) -> float:
    """Largest difference of sorted normalised weights; NaN if the counts differ or either is empty."""
    if a is None or b is None or len(a) != len(b):
        return float("nan")
    return float(np.max(np.abs(np.sort(a.weights()) - np.sort(b.weights()))))


def _truth_by_agent(metrics: dict | None, n_agents: int) -> np.ndarray | None:
    """The epoch's true positions lined up with the agents (NaN where an agent was not scored:
    absent from the epoch or without truth), or None without truth."""
    if not metrics:
        return None
    truth = np.full((n_agents, 2), np.nan)
    truth[metrics["scored"]] = metrics["truth_xy_m"]
    return truth


def compare_runs(float_run: RunResult, fixed_run: RunResult) -> Comparison:
    """Per agent and iteration, over the agents present in each epoch (a moving scenario's tags
    that have not joined yet or have left keep a stale report in both engines: not compared)."""
    scenario = float_run.scenario
    rows: list[dict] = []
    for e_float, e_fixed, m in zip(float_run.epochs, fixed_run.epochs, float_run.metrics):
        truth = _truth_by_agent(m, len(scenario.agent_ids))
        present = e_float.took_part(len(scenario.agent_ids))
        for it_f, it_x in zip(e_float.iterations, e_fixed.iterations):
            diff = np.linalg.norm(it_f.mean - it_x.mean, axis=1)
            det_f = np.linalg.det(it_f.cov)
            det_x = np.linalg.det(it_x.cov)
            with np.errstate(divide="ignore", invalid="ignore"):
                log_det = np.abs(np.log(det_x / det_f))
                frob = np.linalg.norm(it_x.cov - it_f.cov, axis=(1, 2)) / np.linalg.norm(it_f.cov, axis=(1, 2))
            err_f = np.linalg.norm(it_f.mean - truth, axis=1) if truth is not None else np.full(len(diff), np.nan)
            err_x = np.linalg.norm(it_x.mean - truth, axis=1) if truth is not None else np.full(len(diff), np.nan)
            for i, a in enumerate(scenario.agent_ids):
                if not present[i]:
                    continue
                wf = it_f.beliefs[i] if it_f.beliefs is not None else None
                wx = it_x.beliefs[i] if it_x.beliefs is not None else None
                rows.append(
                    {
                        "t_s": e_float.t_s,
                        "node_id": a,
                        "iteration": it_f.iteration,
                        "position_diff_m": float(diff[i]),
                        "cov_log_det_ratio": float(log_det[i]),
                        "cov_rel_frobenius": float(frob[i]),
                        "components_float": int(it_f.components[i]),
                        "components_fixed": int(it_x.components[i]),
                        "weight_diff_max": _weight_diff(wf, wx),
                        "modes_float": int(it_f.mode_count[i]),
                        "modes_fixed": int(it_x.mode_count[i]),
                        "mode_weight_diff": float(abs(it_f.mode_weight[i] - it_x.mode_weight[i])),
                        "error_float_m": float(err_f[i]),
                        "error_fixed_m": float(err_x[i]),
                    }
                )
    return Comparison(rows, summarise(rows), float_run, fixed_run)


def summarise(rows: list[dict], final_only: bool = True) -> dict:
    """The figures the tolerances speak of, over the final iteration of every epoch."""
    if final_only and rows:
        last = max(r["iteration"] for r in rows)
        rows = [r for r in rows if r["iteration"] == last]
    d = np.array([r["position_diff_m"] for r in rows])
    ld = np.array([r["cov_log_det_ratio"] for r in rows])
    wd = np.array([r["weight_diff_max"] for r in rows])
    ef = np.array([r["error_float_m"] for r in rows])
    ex = np.array([r["error_fixed_m"] for r in rows])
    same_count = np.array([r["components_float"] == r["components_fixed"] for r in rows])
    same_modes = np.array([r["modes_float"] == r["modes_fixed"] for r in rows])
    mwd = np.array([r["mode_weight_diff"] for r in rows])
    # Accuracy against truth over the rows that have it (a log may lack truth for some tags).
    scored = np.isfinite(ef) & np.isfinite(ex)
    ef, ex = ef[scored], ex[scored]
    ok_f, ok_x = ef <= 1.0, ex <= 1.0
    has_truth = bool(scored.any())
    out = {
        "n": len(rows),
        "position_diff_median_m": float(np.median(d)) if d.size else float("nan"),
        "position_diff_p99_m": float(np.percentile(d, 99)) if d.size else float("nan"),
        "position_diff_max_m": float(np.max(d)) if d.size else float("nan"),
        "cov_log_det_ratio_median": float(np.nanmedian(ld)) if np.isfinite(ld).any() else float("nan"),
        "component_count_agreement": float(same_count.mean()) if same_count.size else float("nan"),
        "weight_diff_median": float(np.nanmedian(wd)) if np.isfinite(wd).any() else float("nan"),
        "mode_count_agreement": float(same_modes.mean()) if same_modes.size else float("nan"),
        "mode_weight_diff_p99": float(np.percentile(mwd, 99)) if mwd.size else float("nan"),
    }
    if has_truth:
        out.update(
            {
                "fraction_within_1m_float": float(ok_f.mean()),
                "fraction_within_1m_fixed": float(ok_x.mean()),
                "rmse_float_m": float(np.sqrt(np.mean(ef**2))),
                "rmse_fixed_m": float(np.sqrt(np.mean(ex**2))),
                "split_decisions": int(np.sum(ok_f != ok_x)),
                "split_decision_share": float(np.mean(ok_f != ok_x)),
            }
        )
    out["verdict"] = verdict(out)
    return out


def verdict(s: dict) -> dict:
    """Each tolerance of harness/tolerances.py: held or not."""
    checks = {
        "position_diff_median": s["position_diff_median_m"] <= tol.POSITION_MEDIAN_M,
        "position_diff_p99": s["position_diff_p99_m"] <= tol.POSITION_P99_M,
        "cov_log_det_ratio_median": not (s["cov_log_det_ratio_median"] > tol.COV_LOG_DET_RATIO_MEDIAN),
        "weight_diff_median": not (s["weight_diff_median"] > tol.WEIGHT_DIFF_MEDIAN),
        "mode_count_agreement": not (s["mode_count_agreement"] < tol.MODE_COUNT_AGREEMENT),
        "mode_weight_diff_p99": not (s["mode_weight_diff_p99"] > tol.MODE_WEIGHT_DIFF_P99),
    }
    if "fraction_within_1m_float" in s:
        checks["within_1m_share"] = abs(s["fraction_within_1m_float"] - s["fraction_within_1m_fixed"]) <= tol.WITHIN_1M_SHARE_DIFF
        checks["split_decisions"] = s["split_decision_share"] <= tol.SPLIT_DECISION_SHARE
    return {k: bool(v) for k, v in checks.items()}


def compare_scenario(
    scenario: Scenario,
    params: EstimatorParams | None = None,
    iterations: int = 4,
    schedule: str = "slot",
    cooperative: bool = True,
    air: bool = False,
) -> Comparison:
    """Both engines on one scenario.  air=False (default) compares the core with
    the twin alone; air=True adds the air format's quantisation to the core."""
    params = params or EstimatorParams()
    runs = [
        run_scenario(scenario, engine, params, iterations, schedule, cooperative, keep_beliefs=True, air=air)
        for engine in ("float", "fixed")
    ]
    return compare_runs(*runs)


def write_rows(rows: list[dict], path: Path) -> None:
    with open(path, "w", newline="") as f:
        w = csv.DictWriter(f, fieldnames=ROW_COLUMNS)
        w.writeheader()
        for r in rows:
            w.writerow({k: (f"{v:.6g}" if isinstance(v, float) else v) for k, v in r.items()})
