"""The two comparisons of a baseline check.

- bit-exact: the fixed core now against the fixed core recorded; every
  position, covariance entry, mode weight and count must be identical.  The
  values are Q-format multiples, so float equality is integer equality.
- within tolerance: the fixed core now against the float64 twin recorded,
  with harness.compare's summary and verdict (harness/tolerances.py), over
  the final iteration of every epoch, as `peerfix compare` judges.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ..harness.compare import summarise
from ..scenario.model import Scenario
from .estimates import Q_FORMATS, Estimates

# Tolerances that need the component weights of each belief; a baseline stores
# the reported estimates only, so a check cannot judge these.
NOT_JUDGED = ("weight_diff_median",)


@dataclass
class Moved:
    """One estimate (epoch, iteration, agent) that is not what the baseline holds."""

    t_s: float
    node_id: str
    iteration: int
    dx_m: float
    dy_m: float
    position_m: float  # |(dx, dy)|
    position_lsb: int  # largest of |dx|, |dy| in position LSBs
    cov_lsb: int  # largest covariance entry change in area LSBs
    mode_weight_lsb: int
    mode_count: tuple[int, int]  # (baseline, now)
    components: tuple[int, int]
    x_m: float  # baseline position (for the map)
    y_m: float

    def largest_first(self) -> tuple:
        """Sort key: an estimate that appeared or vanished (NaN change) first, then by size."""
        size = math.inf if math.isnan(self.position_m) else self.position_m
        return (-size, -self.cov_lsb, self.t_s, self.iteration, self.node_id)


@dataclass
class ExactResult:
    compared: int
    moved: list[Moved]
    shape_error: str | None = None  # the runs do not even line up (epochs, iterations, agents)

    @property
    def held(self) -> bool:
        return self.shape_error is None and not self.moved

    def summary(self) -> dict:
        m = self.moved
        pos = np.array([x.position_m for x in m if x.position_m > 0])
        first = min(((x.t_s, x.iteration) for x in m), default=None)
        return {
            "compared": self.compared,
            "moved": len(m),
            "agents_moved": len({x.node_id for x in m}),
            "epochs_moved": len({x.t_s for x in m}),
            "first_moved": None if first is None else {"t_s": first[0], "iteration": first[1]},
            "position_moved": int(pos.size),
            "position_diff_max_m": float(pos.max()) if pos.size else 0.0,
            "position_diff_median_m": float(np.median(pos)) if pos.size else 0.0,
            "position_diff_max_lsb": max((x.position_lsb for x in m), default=0),
            "cov_changed": sum(1 for x in m if x.cov_lsb),
            "mode_weight_changed": sum(1 for x in m if x.mode_weight_lsb),
            "mode_count_changed": sum(1 for x in m if x.mode_count[0] != x.mode_count[1]),
            "components_changed": sum(1 for x in m if x.components[0] != x.components[1]),
        }


def _line_up(a: Estimates, b: Estimates) -> str | None:
    if a.agent_ids != b.agent_ids:
        return "the agents differ"
    if a.shape != b.shape:
        return f"baseline has (epochs, iterations, agents) {a.shape}, the run {b.shape}"
    if not np.array_equal(a.t_s, b.t_s):
        return "the epoch times differ"
    if not np.array_equal(a.iterations, b.iterations):
        return f"baseline stores iterations {a.iterations.tolist()}, the run {b.iterations.tolist()}"
    return None


def _unequal(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Elementwise a != b, where two NaNs (no estimate in either) are equal."""
    return (a != b) & ~(np.isnan(a) & np.isnan(b))


def _lsb(x: float, scale: float) -> int:
    """A change in LSBs; -1 when an estimate appeared or vanished (NaN on one side)."""
    return -1 if not math.isfinite(x) else round(x * scale)


def exact(recorded: Estimates, now: Estimates, q: dict[str, int] = Q_FORMATS) -> ExactResult:
    """Every estimate of the fixed core now against the recorded one, identical or listed."""
    shape_error = _line_up(recorded, now)
    if shape_error:
        return ExactResult(0, [], shape_error)
    p, a, f = (float(1 << q[k]) for k in ("position", "area", "fraction"))
    d_mean = now.mean_m - recorded.mean_m
    d_cov = np.abs(now.cov_m2 - recorded.cov_m2).max(axis=(-1, -2))
    d_w = np.abs(now.mode_weight - recorded.mode_weight)
    differs = (
        np.any(_unequal(now.mean_m, recorded.mean_m), axis=-1)
        | np.any(_unequal(now.cov_m2, recorded.cov_m2), axis=(-1, -2))
        | _unequal(now.mode_weight, recorded.mode_weight)
        | (now.mode_count != recorded.mode_count)
        | (now.components != recorded.components)
    )
    moved = []
    for e, s, n in zip(*np.nonzero(differs)):
        dx, dy = (float(v) for v in d_mean[e, s, n])
        moved.append(
            Moved(
                t_s=float(recorded.t_s[e]),
                node_id=recorded.agent_ids[n],
                iteration=int(recorded.iterations[s]),
                dx_m=dx,
                dy_m=dy,
                position_m=math.hypot(dx, dy),
                position_lsb=_lsb(max(abs(dx), abs(dy)), p),
                cov_lsb=_lsb(float(d_cov[e, s, n]), a),
                mode_weight_lsb=_lsb(float(d_w[e, s, n]), f),
                mode_count=(int(recorded.mode_count[e, s, n]), int(now.mode_count[e, s, n])),
                components=(int(recorded.components[e, s, n]), int(now.components[e, s, n])),
                x_m=float(recorded.mean_m[e, s, n, 0]),
                y_m=float(recorded.mean_m[e, s, n, 1]),
            )
        )
    return ExactResult(int(differs.size), moved)


@dataclass
class ToleranceResult:
    summary: dict  # harness.compare.summarise over the final iteration of every epoch
    rows: list[dict]
    shape_error: str | None = None

    @property
    def verdict(self) -> dict[str, bool]:
        return {k: v for k, v in self.summary.get("verdict", {}).items() if k not in NOT_JUDGED}

    @property
    def held(self) -> bool:
        return self.shape_error is None and all(self.verdict.values())


def _truth(scenario: Scenario, t_s: float, agent_ids: list[str]) -> np.ndarray | None:
    if scenario.truth is None:
        return None
    truth = scenario.truth.at(t_s)
    if not all(a in truth for a in agent_ids):
        return None
    return np.array([truth[a] for a in agent_ids], float)


def tolerance_rows(reference: Estimates, fixed: Estimates, scenario: Scenario) -> list[dict]:
    """Rows in harness.compare's layout: fixed now against the float reference, per agent and stored iteration."""
    rows = []
    for e, t_s in enumerate(reference.t_s):
        truth = _truth(scenario, float(t_s), reference.agent_ids)
        for s, iteration in enumerate(reference.iterations):
            mf, mx = reference.mean_m[e, s], fixed.mean_m[e, s]
            cf, cx = reference.cov_m2[e, s], fixed.cov_m2[e, s]
            diff = np.linalg.norm(mf - mx, axis=1)
            with np.errstate(divide="ignore", invalid="ignore"):
                log_det = np.abs(np.log(np.linalg.det(cx) / np.linalg.det(cf)))
                frob = np.linalg.norm(cx - cf, axis=(1, 2)) / np.linalg.norm(cf, axis=(1, 2))
            nan = np.full(len(diff), np.nan)
            err_f = np.linalg.norm(mf - truth, axis=1) if truth is not None else nan
            err_x = np.linalg.norm(mx - truth, axis=1) if truth is not None else nan
            for n, a in enumerate(reference.agent_ids):
                rows.append(
                    {
                        "t_s": float(t_s),
                        "node_id": a,
                        "iteration": int(iteration),
                        "position_diff_m": float(diff[n]),
                        "cov_log_det_ratio": float(log_det[n]),
                        "cov_rel_frobenius": float(frob[n]),
                        "components_float": int(reference.components[e, s, n]),
                        "components_fixed": int(fixed.components[e, s, n]),
                        "weight_diff_max": float("nan"),  # beliefs are not stored
                        "modes_float": int(reference.mode_count[e, s, n]),
                        "modes_fixed": int(fixed.mode_count[e, s, n]),
                        "mode_weight_diff": float(abs(reference.mode_weight[e, s, n] - fixed.mode_weight[e, s, n])),
                        "error_float_m": float(err_f[n]),
                        "error_fixed_m": float(err_x[n]),
                    }
                )
    return rows


def tolerance(reference: Estimates, fixed: Estimates, scenario: Scenario) -> ToleranceResult:
    shape_error = _line_up(reference, fixed)
    if shape_error:
        return ToleranceResult({}, [], shape_error)
    rows = tolerance_rows(reference, fixed, scenario)
    return ToleranceResult(summarise(rows, final_only=True), rows)
