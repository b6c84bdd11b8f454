"""Tests of the accuracy metrics (peerfix.harness.metrics)."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from scipy.stats import binom

from peerfix.harness.metrics import CHI2_2DOF_95, accuracy_metrics, error_cdf

KEYS = [
    "n_agents",
    "fraction_within_1m",
    "rmse_m",
    "rmse_within_1m_m",
    "peb_rms_within_1m_m",
    "coverage_95",
    "n_bad_covariance",
    "peb_rms_m",
    "fraction_peb_below_0_33m",
    "n_peb_infinite",
    "error_p50_m",
    "error_p90_m",
    "error_p99_m",
]


def hand_case():
    """Four agents with errors 0.0, 0.6 (x), 0.8 (y), 3.0 (x); unit covariances."""
    truth = np.array([[1.0, 1.0], [2.0, 2.0], [3.0, 3.0], [4.0, 4.0]])
    est = truth - np.array([[0.0, 0.0], [0.6, 0.0], [0.0, 0.8], [3.0, 0.0]])
    cov = np.tile(np.eye(2), (4, 1, 1))
    peb = np.array([0.2, 0.4, np.inf, 0.1])
    return est, cov, truth, peb


def test_chi2_threshold():
    # scipy.stats.chi2.ppf(0.95, 2) against the closed form of the 2-dof quantile, -2 ln(1 - p)
    assert CHI2_2DOF_95 == pytest.approx(-2 * math.log(0.05), rel=1e-12)
    assert CHI2_2DOF_95 == pytest.approx(5.991464547, abs=1e-8)


def test_hand_computed_values():
    m = accuracy_metrics(*hand_case())
    assert list(m) == KEYS
    assert m["n_agents"] == 4
    assert m["fraction_within_1m"] == 0.75  # 0.0, 0.6, 0.8 are within; 3.0 is not
    assert m["rmse_m"] == pytest.approx(math.sqrt((0 + 0.36 + 0.64 + 9.0) / 4), rel=1e-12)  # sqrt(2.5)
    assert m["rmse_within_1m_m"] == pytest.approx(math.sqrt((0 + 0.36 + 0.64) / 3), rel=1e-12)
    # bound over the agents within 1 m, finite only: 0.2 and 0.4 (the third is inf)
    assert m["peb_rms_within_1m_m"] == pytest.approx(math.sqrt((0.04 + 0.16) / 2), rel=1e-12)
    # unit covariance: Mahalanobis^2 = error^2; 9.0 > 5.99 is outside the ellipse
    assert m["coverage_95"] == 0.75
    assert m["n_bad_covariance"] == 0
    assert m["peb_rms_m"] == pytest.approx(math.sqrt((0.04 + 0.16 + 0.01) / 3), rel=1e-12)
    assert m["fraction_peb_below_0_33m"] == 0.5  # 0.2 and 0.1; inf is not below
    assert m["n_peb_infinite"] == 1
    # numpy linear percentiles of sorted errors (0, 0.6, 0.8, 3.0): position p/100 * 3
    assert m["error_p50_m"] == pytest.approx(0.7, rel=1e-12)
    assert m["error_p90_m"] == pytest.approx(0.8 + 0.7 * 2.2, rel=1e-12)
    assert m["error_p99_m"] == pytest.approx(0.8 + 0.97 * 2.2, rel=1e-12)


def test_values_are_plain_and_json_serialisable():
    m = accuracy_metrics(*hand_case())
    for key, value in m.items():
        assert type(value) in (int, float), key  # not numpy scalars
    assert json.loads(json.dumps(m)) == m


def test_coverage_uses_the_full_covariance():
    # error (1, 1) against a covariance stretched along (1, 1): inside; along (1, -1): outside
    along = np.array([[5.0, 4.9], [4.9, 5.0]])  # variance 9.9 along (1,1), 0.1 across
    across = np.array([[5.0, -4.9], [-4.9, 5.0]])
    truth = np.array([[1.0, 1.0], [1.0, 1.0]])
    est = np.zeros((2, 2))
    m = accuracy_metrics(est, np.stack([along, across]), truth)
    # hand: |(1,1)|^2 = 2 over variance 9.9 -> 0.202 (in); over 0.1 -> 20 (out)
    assert m["coverage_95"] == 0.5


def test_bad_covariances_are_not_covered_and_counted():
    truth = np.zeros((5, 2))
    est = np.zeros((5, 2))  # zero error: any usable covariance covers it
    cov = np.stack(
        [
            np.eye(2),
            np.zeros((2, 2)),  # singular
            np.array([[1.0, 1.0], [1.0, 1.0]]),  # singular, rank 1
            np.array([[np.nan, 0.0], [0.0, 1.0]]),  # non-finite
            -np.eye(2),  # negative definite
        ]
    )
    m = accuracy_metrics(est, cov, truth)
    assert m["coverage_95"] == pytest.approx(0.2)
    assert m["n_bad_covariance"] == 4


def test_coverage_of_samples_from_the_stated_gaussian():
    """Truth drawn from N(est, P) lies in the 95% ellipse for about 95% of agents.

    Tolerance: the covered count is Binomial(n, 0.95); accept the central
    99.9% interval from scipy.stats.binom.interval (fixed seed: deterministic).
    """
    rng = np.random.default_rng(11)
    n = 4000
    A = rng.normal(0.0, 0.5, (n, 2, 2))
    cov = A @ np.swapaxes(A, 1, 2) + 0.01 * np.eye(2)  # random SPD covariances
    est = rng.uniform(-50, 50, (n, 2))
    truth = est + np.einsum("nij,nj->ni", np.linalg.cholesky(cov), rng.standard_normal((n, 2)))
    m = accuracy_metrics(est, cov, truth)
    lo, hi = binom.interval(0.999, n, 0.95)
    assert lo / n <= m["coverage_95"] <= hi / n
    # an overconfident covariance (half the spread) must fall clearly short
    m_small = accuracy_metrics(est, cov / 4.0, truth)
    assert m_small["coverage_95"] < lo / n


def test_undefined_figures_are_nan():
    est, cov, truth, _ = hand_case()
    far = est - 5.0  # nobody within 1 m
    m = accuracy_metrics(far, cov, truth, peb=None)
    assert m["fraction_within_1m"] == 0.0
    assert math.isnan(m["rmse_within_1m_m"])
    for key in ("peb_rms_within_1m_m", "peb_rms_m", "fraction_peb_below_0_33m", "n_peb_infinite"):
        assert math.isnan(m[key]), key
    assert math.isfinite(m["rmse_m"])


def test_all_bounds_infinite():
    est, cov, truth, _ = hand_case()
    m = accuracy_metrics(est, cov, truth, peb=np.full(4, np.inf))
    assert m["n_peb_infinite"] == 4
    assert m["fraction_peb_below_0_33m"] == 0.0
    assert math.isnan(m["peb_rms_m"])
    assert math.isnan(m["peb_rms_within_1m_m"])


def test_no_agents():
    m = accuracy_metrics(np.zeros((0, 2)), np.zeros((0, 2, 2)), np.zeros((0, 2)), np.zeros(0))
    assert m["n_agents"] == 0
    assert math.isnan(m["rmse_m"]) and math.isnan(m["coverage_95"]) and math.isnan(m["error_p50_m"])


def test_percentiles_on_a_ramp():
    # errors 0, 1, ..., 100 m along x: numpy's linear percentile hits the samples exactly
    truth = np.zeros((101, 2))
    est = np.column_stack([np.arange(101.0), np.zeros(101)])
    m = accuracy_metrics(est, np.tile(np.eye(2), (101, 1, 1)), truth)
    assert (m["error_p50_m"], m["error_p90_m"], m["error_p99_m"]) == (50.0, 90.0, 99.0)


def test_input_checks():
    est, cov, truth, peb = hand_case()
    with pytest.raises(ValueError, match="est_cov"):
        accuracy_metrics(est, cov[:3], truth)
    with pytest.raises(ValueError, match="peb"):
        accuracy_metrics(est, cov, truth, peb[:3])
    with pytest.raises(ValueError, match="NaN"):
        accuracy_metrics(est, cov, truth, np.array([0.1, np.nan, 0.1, 0.1]))
    bad = est.copy()
    bad[0, 0] = np.nan
    with pytest.raises(ValueError, match="finite"):
        accuracy_metrics(bad, cov, truth)


def test_error_cdf():
    e, c = error_cdf([0.3, 0.1, 0.2, 0.2])
    np.testing.assert_array_equal(e, [0.1, 0.2, 0.2, 0.3])
    np.testing.assert_array_equal(c, [0.25, 0.5, 0.75, 1.0])
    e, c = error_cdf([])
    assert e.size == 0 and c.size == 0
