"""The two comparisons of a baseline check.

- bit-exact: the fixed core now against the fixed core recorded; every
  position, covariance entry, mode weight and count must be identical.  The
  values are Q-format multiples, so float equality is integer equality.
- within tolerance: the fixed core now against the float64 twin recorded,
  with harness.compare's summary and verdict (harness/tolerances.py), over
  the final iteration of every epoch, as `peerfix compare` judges.  A
  release check asks what got worse: a tolerance already outside when the
  baseline was recorded fails only if its figure is now worse than then.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from ..harness import tolerances as tol
from ..harness.compare import summarise
from ..scenario.model import Scenario
from .estimates import Q_FORMATS, Estimates

# Tolerances that need the component weights of each belief; a baseline stores
# the reported estimates only, so a check cannot judge these.
NOT_JUDGED = ("weight_diff_median",)

# Tolerance name (harness.compare.verdict) -> (figure in the summary, limit, limit name, "max" or "min").
TOLERANCE_FIGURES = {
    "position_diff_median": (lambda s: s["position_diff_median_m"], tol.POSITION_MEDIAN_M, "POSITION_MEDIAN_M", "max"),
    "position_diff_p99": (lambda s: s["position_diff_p99_m"], tol.POSITION_P99_M, "POSITION_P99_M", "max"),
    "cov_log_det_ratio_median": (lambda s: s["cov_log_det_ratio_median"], tol.COV_LOG_DET_RATIO_MEDIAN, "COV_LOG_DET_RATIO_MEDIAN", "max"),
    "weight_diff_median": (lambda s: s["weight_diff_median"], tol.WEIGHT_DIFF_MEDIAN, "WEIGHT_DIFF_MEDIAN", "max"),
    "mode_count_agreement": (lambda s: s["mode_count_agreement"], tol.MODE_COUNT_AGREEMENT, "MODE_COUNT_AGREEMENT", "min"),
    "mode_weight_diff_p99": (lambda s: s["mode_weight_diff_p99"], tol.MODE_WEIGHT_DIFF_P99, "MODE_WEIGHT_DIFF_P99", "max"),
    "within_1m_share": (
        lambda s: abs(s["fraction_within_1m_float"] - s["fraction_within_1m_fixed"]),
        tol.WITHIN_1M_SHARE_DIFF,
        "WITHIN_1M_SHARE_DIFF",
        "max",
    ),
    "split_decisions": (lambda s: s["split_decision_share"], tol.SPLIT_DECISION_SHARE, "SPLIT_DECISION_SHARE", "max"),
}


def figure_of(summary: dict, name: str) -> float | None:
    """The figure tolerance `name` judges, from a harness.compare summary (None when absent)."""
    try:
        v = TOLERANCE_FIGURES[name][0](summary)
    except (KeyError, TypeError):
        return None
    return None if v is None else float(v)


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
    at_record: dict = field(default_factory=dict)  # the manifest's tolerance_at_record (same layout as summary)

    @property
    def verdict(self) -> dict[str, bool]:
        """Each judged tolerance: held now (the product's promise), whatever it was at record."""
        return {k: v for k, v in self.summary.get("verdict", {}).items() if k not in NOT_JUDGED}

    @property
    def outside_since_record(self) -> list[str]:
        """Tolerances outside now that were outside at record too, with a figure no worse than then."""
        was = {k: v for k, v in self.at_record.get("verdict", {}).items() if k not in NOT_JUDGED}
        out = []
        for name, ok in self.verdict.items():
            if ok or was.get(name, True):
                continue
            now, then = figure_of(self.summary, name), figure_of(self.at_record, name)
            if now is None or then is None or not (math.isfinite(now) and math.isfinite(then)):
                continue
            sense = TOLERANCE_FIGURES[name][3]
            if (now <= then) if sense == "max" else (now >= then):
                out.append(name)
        return out

    @property
    def regressed(self) -> list[str]:
        """Tolerances outside now that held at record, or got worse since: what fails the check."""
        known = set(self.outside_since_record)
        return [k for k, ok in self.verdict.items() if not ok and k not in known]

    @property
    def held(self) -> bool:
        return self.shape_error is None and not self.regressed


def _truth(scenario: Scenario, t_s: float, agent_ids: list[str]) -> np.ndarray | None:
    """True positions per agent at t_s (NaN for an agent without one), None without truth."""
    if scenario.truth is None:
        return None
    truth = scenario.truth.at(t_s)
    return np.array([truth[a] if a in truth else (np.nan, np.nan) for a in agent_ids], float)


def tolerance_rows(reference: Estimates, fixed: Estimates, scenario: Scenario) -> list[dict]:
    """Rows in harness.compare's layout: fixed now against the float reference, per agent and stored
    iteration, over the agents present in each epoch (as harness.compare: a tag that has not joined yet
    or has left keeps a stale report; fixed.present, from the run made now, tells which)."""
    rows = []
    for e, t_s in enumerate(reference.t_s):
        present = np.ones(len(reference.agent_ids), bool) if fixed.present is None else fixed.present[e]
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
                if not present[n]:
                    continue
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


def tolerance(reference: Estimates, fixed: Estimates, scenario: Scenario, at_record: dict | None = None) -> ToleranceResult:
    """at_record: the figures and verdict recorded with the baseline (what "worse" is measured from)."""
    shape_error = _line_up(reference, fixed)
    if shape_error:
        return ToleranceResult({}, [], shape_error, at_record or {})
    rows = tolerance_rows(reference, fixed, scenario)
    return ToleranceResult(summarise(rows, final_only=True), rows, at_record=at_record or {})
