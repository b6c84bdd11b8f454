"""The fixed-point core against the float64 twin on the open-field networks.

Seeds 0 to 9, four slot iterations, K = 4.  Tolerances (and why) live in
peerfix/harness/tolerances.py; this test pools the final iteration of all ten
networks (1000 agents).
"""

import numpy as np
import pytest

from peerfix.harness import tolerances as tol
from peerfix.harness.compare import compare_scenario, summarise
from peerfix.simulate import simulate

SEEDS = range(10)


@pytest.fixture(scope="module")
def pooled():
    rows = []
    for seed in SEEDS:
        rows += [r for r in compare_scenario(simulate("open-field", seed), iterations=4).rows if r["iteration"] == 4]
    return rows, summarise(rows)


def test_positions_agree(pooled):
    _, s = pooled
    assert s["position_diff_median_m"] <= tol.POSITION_MEDIAN_M
    assert s["position_diff_p99_m"] <= tol.POSITION_P99_M


def test_accuracy_against_truth_agrees(pooled):
    _, s = pooled
    assert abs(s["fraction_within_1m_float"] - s["fraction_within_1m_fixed"]) <= tol.WITHIN_1M_SHARE_DIFF
    assert s["split_decision_share"] <= tol.SPLIT_DECISION_SHARE


def test_covariances_modes_and_weights_agree(pooled):
    rows, s = pooled
    assert s["cov_log_det_ratio_median"] <= tol.COV_LOG_DET_RATIO_MEDIAN
    assert s["weight_diff_median"] <= tol.WEIGHT_DIFF_MEDIAN
    assert s["mode_count_agreement"] >= tol.MODE_COUNT_AGREEMENT
    assert s["mode_weight_diff_p99"] <= tol.MODE_WEIGHT_DIFF_P99
    assert all(s["verdict"].values()), s["verdict"]
    # Fixed covariances are symmetric positive definite wherever the float ones are.
    assert all(np.isfinite(r["cov_log_det_ratio"]) for r in rows)
