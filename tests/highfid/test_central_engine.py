"""The centralised estimate: hand-checked trilateration and the Cramer-Rao bound by Monte Carlo.

Outside references: the Cramer-Rao position error bound (Patwari et al.,
IEEE SPM 22(4), 2005; Shen, Wymeersch, Win, IEEE Trans. IT 56(10), 2010),
whose check values are in /work/shared/reference/check-values.md; the solver
is scipy.optimize.least_squares (trust-region reflective).
"""

import numpy as np
from highfid_helpers import BAY_AGENTS, bay, network
from peerfix.harness import network_bounds
from peerfix.highfid.engine_central import (
    CentralEngine,
    gauss_newton_covariance,
    solve_positions,
)
from peerfix.reference import EstimatorParams
from peerfix.reference.node import BlockedModel
from peerfix.runner import ENGINES, make_engine, run_scenario

TRI_ANCHORS = np.array([[0.0, 0.0], [10.0, 0.0], [0.0, 10.0]])


def test_three_anchor_trilateration_by_hand():
    # Agent at (5, 5), exact ranges, sigma 0.1 m.  The unit vectors from the anchors
    # are (1,1)/sqrt2, (-1,1)/sqrt2, (1,-1)/sqrt2, so J^T J = [[1.5,-0.5],[-0.5,1.5]] / sigma^2
    # and its inverse sigma^2 [[0.75, 0.25], [0.25, 0.75]]: PEB = sigma sqrt(1.5) = 0.12247 m
    # (the check value for this case in check-values.md).
    r = np.linalg.norm(TRI_ANCHORS - [5.0, 5.0], axis=1)
    links = np.column_stack([np.zeros(3), np.arange(3), r, np.full(3, 0.1)])
    sol = solve_positions(np.array([[3.0, 6.0]]), TRI_ANCHORS, links, np.zeros((0, 4)))
    assert np.allclose(sol.mean[0], [5.0, 5.0], atol=1e-6)
    assert np.allclose(sol.cov[0], 0.01 * np.array([[0.75, 0.25], [0.25, 0.75]]), rtol=1e-6)
    assert np.isclose(np.sqrt(np.trace(sol.cov[0])), 0.12247, atol=1e-5)
    assert sol.solved[0]


def test_trilateration_through_the_engine():
    # Agent at (3, 4): ranges 5, sqrt(65), sqrt(45) to the three anchors, no noise.
    sc = network(TRI_ANCHORS, np.array([[3.0, 4.0]]), [(0, 0), (0, 1), (0, 2)], [], 0.1, bounds=(0.0, 0.0, 10.0, 10.0))
    res = run_scenario(sc, "central", iterations=2)
    assert np.allclose(res.epochs[0].iterations[-1].mean[0], [3.0, 4.0], atol=1e-6)


def test_covariance_is_the_fisher_inverse_of_the_network():
    # At exact ranges the Gauss-Newton J^T J is the Fisher information of harness.bounds.
    sc = bay()
    eng = CentralEngine(EstimatorParams())
    res = run_scenario(sc, eng, iterations=2)
    cov = res.epochs[0].iterations[-1].cov
    peb = network_bounds(sc)["peb_m"]
    assert np.allclose(np.sqrt(np.trace(cov, axis1=1, axis2=2)), peb, rtol=1e-4)
    assert np.allclose(res.epochs[0].iterations[-1].mean, BAY_AGENTS, atol=1e-5)


def test_rmse_meets_the_cooperative_bound_by_monte_carlo():
    # ML is asymptotically efficient: with noise small against the geometry its
    # RMSE over draws approaches the bound.  300 draws: relative std of each
    # agent's RMSE ~ 1/sqrt(2*2*300) ~ 3%; we allow 10%.
    rng = np.random.default_rng(99)
    sq = np.zeros(3)
    draws = 300
    for _ in range(draws):
        sc = bay(rng)
        res = run_scenario(sc, "central", iterations=1, score=False)
        sq += np.sum((res.epochs[0].iterations[-1].mean - BAY_AGENTS) ** 2, axis=1)
    ratio = np.sqrt(sq / draws) / network_bounds(bay())["peb_m"]
    assert np.all((ratio > 0.9) & (ratio < 1.1)), ratio


def test_an_agent_the_ranges_cannot_fix_keeps_the_twins_report():
    # Cart 1 hears one anchor only: its bearing is free (null space of J^T J).
    anchors = np.array([[0.0, 0.0], [24.0, 0.0], [24.0, 18.0]])
    agents = np.array([[8.0, 6.0], [20.0, 12.0]])
    sc = network(anchors, agents, [(0, 0), (0, 1), (0, 2), (1, 2)], [], 0.1, np.random.default_rng(2))
    eng = CentralEngine(EstimatorParams())
    res = run_scenario(sc, eng, iterations=2)
    twin = eng.twin.report("cart-1")
    assert np.array_equal(res.epochs[0].iterations[-1].mean[1], twin.mean)
    assert np.linalg.norm(res.epochs[0].iterations[-1].mean[0] - agents[0]) < 0.3


def test_null_space_rule():
    cov, fixed = gauss_newton_covariance(np.diag([4.0, 1.0, 0.0, 2.0]))
    assert fixed.tolist() == [True, False]
    assert np.allclose(cov[0], np.diag([0.25, 1.0]))


def test_robust_loss_resists_a_blocked_range():
    sc = bay(np.random.default_rng(5))
    row = next(i for i, (a, b) in enumerate(zip(sc.ranges.node_a, sc.ranges.node_b)) if a == "cart-0" and b == "wall-0")
    sc.ranges.range_m[row] += 2.0
    plain = run_scenario(sc, "central", iterations=2).epochs[0].iterations[-1].mean[0]
    robust = run_scenario(sc, CentralEngine(EstimatorParams(robust=True), BlockedModel(0.1, 1.0)), EstimatorParams(robust=True), iterations=2)
    est = robust.epochs[0].iterations[-1].mean[0]
    assert np.linalg.norm(est - BAY_AGENTS[0]) < 0.5 * np.linalg.norm(plain - BAY_AGENTS[0])


def test_registered_by_name():
    assert "central" in ENGINES
    eng = make_engine("central", EstimatorParams(), BlockedModel())
    assert isinstance(eng, CentralEngine) and eng.name == "central"


def test_peerfix_run_accepts_both_reference_engines(tmp_path, capsys):
    import json

    from peerfix.cli import main
    from peerfix.scenario.writer import write_scenario

    folder = write_scenario(bay(np.random.default_rng(1)), tmp_path / "bay")
    for engine in ("central", "particle"):
        out = tmp_path / f"out-{engine}"
        assert main(["run", str(folder), "--engine", engine, "--iterations", "2", "--out", str(out), "--json"]) == 0
        summary = json.loads(capsys.readouterr().out)
        assert summary["engine"] == engine
        assert summary["fraction_within_1m"] == 1.0
        assert (out / "estimates.csv").exists()
