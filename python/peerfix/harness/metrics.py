"""Accuracy of a position estimate against the truth, and against the bound.

One function turns estimates, their covariances, the true positions and
(optionally) the position error bound into a flat dict of plain Python
numbers, ready for a report or `json.dumps`.

Conventions:
- "within 1 m" means a horizontal error of at most 1.0 m (<=).
- A figure with nothing to average over is NaN (float('nan')): e.g.
  rmse_within_1m_m when no agent is within 1 m, every PEB field when no
  bound is given.  `json.dumps` writes NaN as the token NaN, which Python's
  json reads back but strict JSON parsers do not.
- Percentiles use numpy's default ("linear", Hyndman and Fan type 7).
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np
from numpy.typing import ArrayLike
from scipy.stats import chi2

WITHIN_M = 1.0  # an agent "within 1 m" has error <= this
PEB_GOOD_M = 0.33  # threshold of fraction_peb_below_0_33m
# Squared Mahalanobis radius of the 95% ellipse of a 2-D Gaussian:
# chi-square with 2 degrees of freedom, 0.95 quantile (scipy.stats.chi2),
# = -2 ln(0.05) = 5.991...
CHI2_2DOF_95 = float(chi2.ppf(0.95, df=2))


def _rms(x: np.ndarray) -> float:
    return float(np.sqrt(np.mean(x**2))) if x.size else math.nan


def _mahalanobis2(resid: np.ndarray, cov: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Squared Mahalanobis distance per agent and a mask of usable covariances.

    A covariance is usable when it is finite and (its symmetric part) positive
    definite; the distance of an unusable one is +inf.
    """
    a = cov[:, 0, 0]
    d = cov[:, 1, 1]
    b = 0.5 * (cov[:, 0, 1] + cov[:, 1, 0])
    det = a * d - b * b
    finite = np.all(np.isfinite(cov.reshape(-1, 4)), axis=1)
    # 2x2 symmetric positive definite  <=>  a > 0 and det > 0 (Sylvester).
    good = finite & (a > 0) & (det > 0)
    m2 = np.full(len(cov), np.inf)
    rx, ry = resid[good, 0], resid[good, 1]
    m2[good] = (d[good] * rx**2 - 2 * b[good] * rx * ry + a[good] * ry**2) / det[good]
    return m2, good


def accuracy_metrics(
    est_xy: ArrayLike,
    est_cov: ArrayLike,
    truth_xy: ArrayLike,
    peb: ArrayLike | None = None,
) -> dict[str, Any]:
    """Accuracy figures of N agents.

    est_xy (N, 2) and truth_xy (N, 2) in metres, finite; est_cov (N, 2, 2) in
    m^2 (may be singular or non-finite: such an agent counts as not covered
    and in n_bad_covariance); peb (N,) in metres, >= 0, +inf allowed, or None.

    Keys (plain int / float):
      n_agents, fraction_within_1m, rmse_m, rmse_within_1m_m,
      peb_rms_within_1m_m (bound over the same agents, finite bounds only),
      coverage_95 (share whose truth lies in the 95% ellipse of the estimate),
      n_bad_covariance, peb_rms_m (agents with finite bound),
      fraction_peb_below_0_33m (inf counts as not below; share of all agents),
      n_peb_infinite, error_p50_m, error_p90_m, error_p99_m.
    Without a bound the four PEB figures are NaN (n_peb_infinite included).
    """
    est = np.asarray(est_xy, dtype=float)
    truth = np.asarray(truth_xy, dtype=float)
    cov = np.asarray(est_cov, dtype=float)
    if est.ndim != 2 or est.shape[1] != 2 or truth.shape != est.shape:
        raise ValueError(f"est_xy and truth_xy must both be (N, 2); got {est.shape} and {truth.shape}")
    n = est.shape[0]
    if cov.shape != (n, 2, 2):
        raise ValueError(f"est_cov must be ({n}, 2, 2); got {cov.shape}")
    if not (np.all(np.isfinite(est)) and np.all(np.isfinite(truth))):
        raise ValueError("est_xy and truth_xy must be finite")

    resid = truth - est
    err = np.hypot(resid[:, 0], resid[:, 1])
    within = err <= WITHIN_M

    m2, good_cov = _mahalanobis2(resid, cov)
    covered = m2 <= CHI2_2DOF_95

    out: dict[str, Any] = {
        "n_agents": int(n),
        "fraction_within_1m": float(np.mean(within)) if n else math.nan,
        "rmse_m": _rms(err),
        "rmse_within_1m_m": _rms(err[within]),
        "peb_rms_within_1m_m": math.nan,
        "coverage_95": float(np.mean(covered)) if n else math.nan,
        "n_bad_covariance": int(np.count_nonzero(~good_cov)),
        "peb_rms_m": math.nan,
        "fraction_peb_below_0_33m": math.nan,
        "n_peb_infinite": math.nan,
    }

    if peb is not None:
        bound = np.asarray(peb, dtype=float)
        if bound.shape != (n,):
            raise ValueError(f"peb must be ({n},); got {bound.shape}")
        if np.any(np.isnan(bound)) or np.any(bound < 0):
            raise ValueError("peb must be >= 0 (+inf allowed), not NaN")
        finite = np.isfinite(bound)
        out["peb_rms_within_1m_m"] = _rms(bound[within & finite])
        out["peb_rms_m"] = _rms(bound[finite])
        out["fraction_peb_below_0_33m"] = float(np.mean(bound < PEB_GOOD_M)) if n else math.nan
        out["n_peb_infinite"] = int(np.count_nonzero(~finite))

    for p in (50, 90, 99):
        out[f"error_p{p}_m"] = float(np.percentile(err, p)) if n else math.nan
    return out


def error_cdf(errors: ArrayLike) -> tuple[np.ndarray, np.ndarray]:
    """Empirical CDF for plotting: (sorted errors, share of errors <= each).

    cdf[k] = (k + 1) / n, so the curve steps up at every sample and ends at 1.
    """
    e = np.sort(np.asarray(errors, dtype=float).ravel())
    return e, np.arange(1, e.size + 1) / max(e.size, 1)
