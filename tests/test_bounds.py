"""Tests of the Cramer-Rao position error bound (peerfix.harness.bounds)."""

from __future__ import annotations


import numpy as np
import pytest
from scipy.optimize import least_squares

from peerfix.harness.bounds import fisher_information, network_bounds, position_error_bound

SIGMA = 0.1
SQUARE = [(0.0, 0.0), (10.0, 0.0), (10.0, 10.0), (0.0, 10.0)]


def peb_of(agent_xy, anchor_xy, anchor_links, agent_links=()):
    return position_error_bound(fisher_information(agent_xy, anchor_xy, anchor_links, list(agent_links)))


def to_all(n_anchors: int, agent: int = 0, sigma: float = SIGMA):
    return [(agent, a, sigma) for a in range(n_anchors)]


# --- check-values table, "Position error bound" (Patwari et al., IEEE SPM 22(4), 2005;
# --- Shen, Wymeersch, Win, IEEE Trans. IT 56(10), 2010), sigma = 0.1 m, to 1e-4 m.

def test_square_centre():
    # check-values table: corners of a 10 m square, agent (5, 5) -> 0.10000 m
    assert peb_of([(5, 5)], SQUARE, to_all(4))[0] == pytest.approx(0.10000, abs=1e-4)


def test_square_off_centre():
    # check-values table: same anchors, agent (2, 3) -> 0.10210 m
    assert peb_of([(2, 3)], SQUARE, to_all(4))[0] == pytest.approx(0.10210, abs=1e-4)


def test_three_anchors():
    # check-values table: anchors (0,0), (10,0), (0,10); agent (5, 5) -> 0.12247 m
    anchors = [(0, 0), (10, 0), (0, 10)]
    assert peb_of([(5, 5)], anchors, to_all(3))[0] == pytest.approx(0.12247, abs=1e-4)


TWO_AGENTS = [(3.0, 5.0), (7.0, 5.0)]
TWO_ANCHOR_PAIRS = [(0.0, 0.0), (0.0, 10.0), (10.0, 0.0), (10.0, 10.0)]
TWO_LINKS = [(0, 0, SIGMA), (0, 1, SIGMA), (1, 2, SIGMA), (1, 3, SIGMA)]


def test_two_agents_without_peer_range():
    # check-values table: A (3,5) to (0,0),(0,10); B (7,5) to (10,0),(10,10) -> 0.16028 m each
    peb = peb_of(TWO_AGENTS, TWO_ANCHOR_PAIRS, TWO_LINKS)
    np.testing.assert_allclose(peb, [0.16028, 0.16028], atol=1e-4)


def test_two_agents_with_peer_range():
    # check-values table: same plus the A-B range -> 0.13499 m each
    peb = peb_of(TWO_AGENTS, TWO_ANCHOR_PAIRS, TWO_LINKS, [(0, 1, SIGMA)])
    np.testing.assert_allclose(peb, [0.13499, 0.13499], atol=1e-4)


# --- textbook identity: N anchors evenly spaced on a circle around the agent give
# --- sum u u^T = (N/2) I (N >= 3), so J = N/(2 sigma^2) I and PEB = 2 sigma / sqrt(N).

@pytest.mark.parametrize("n", [3, 4, 5, 7, 12])
@pytest.mark.parametrize("radius", [2.0, 25.0])
def test_symmetric_anchors_identity(n: int, radius: float):
    centre = np.array([4.0, -1.5])
    phase = 0.3
    ang = phase + 2 * np.pi * np.arange(n) / n
    anchors = centre + radius * np.column_stack([np.cos(ang), np.sin(ang)])
    peb = peb_of([centre], anchors, to_all(n, sigma=0.25))
    assert peb[0] == pytest.approx(2 * 0.25 / np.sqrt(n), rel=1e-10)


# --- independent build of J: Jacobian of the ranges by finite differences, J = H^T W H

def test_fisher_matches_numerical_jacobian():
    rng = np.random.default_rng(7)
    agents = rng.uniform(0, 20, (6, 2))
    anchors = rng.uniform(0, 20, (4, 2))
    a_links = [(i, a, rng.uniform(0.05, 0.3)) for i in range(6) for a in range(4) if rng.random() < 0.6]
    p_links = [(i, j, rng.uniform(0.05, 0.3)) for i in range(6) for j in range(i + 1, 6) if rng.random() < 0.5]

    def ranges(theta: np.ndarray) -> np.ndarray:
        xy = theta.reshape(-1, 2)
        r = [np.linalg.norm(xy[i] - anchors[a]) for i, a, _ in a_links]
        r += [np.linalg.norm(xy[i] - xy[j]) for i, j, _ in p_links]
        return np.array(r)

    theta = agents.ravel()
    h = 1e-6
    H = np.column_stack([(ranges(theta + h * e) - ranges(theta - h * e)) / (2 * h) for e in np.eye(theta.size)])
    w = 1.0 / np.array([s for *_, s in a_links + p_links]) ** 2
    J_num = H.T @ (w[:, None] * H)
    J = fisher_information(agents, anchors, a_links, p_links)
    np.testing.assert_allclose(J, J_num, rtol=1e-6, atol=1e-6 * np.abs(J).max())
    np.testing.assert_allclose(J, J.T, atol=0)


# --- singular information

def test_agent_with_one_anchor_is_unbounded_others_unchanged():
    # agent 0 as in the check-values table (square, (2,3)); agent 1 hears one anchor only
    links = to_all(4, agent=0) + [(1, 2, SIGMA)]
    peb = peb_of([(2, 3), (7, 6)], SQUARE, links)
    assert np.isinf(peb[1])
    assert peb[0] == pytest.approx(0.10210, abs=1e-4)


def test_agent_with_collinear_anchors_is_unbounded():
    # two anchors on one line through the agent: no information across the line
    peb = peb_of([(5, 0), (5, 5)], [(0, 0), (10, 0)] + SQUARE, [(0, 0, SIGMA), (0, 1, SIGMA)] + to_all(6, agent=1)[2:])
    assert np.isinf(peb[0])
    assert peb[1] == pytest.approx(0.10000, abs=1e-4)  # centre of the square, as in the table


def test_agents_without_anchors_are_unbounded():
    # a rigid triangle of agents with no anchor: translations and rotation are free
    peb = peb_of([(0, 0), (4, 0), (0, 3)], SQUARE, [], [(0, 1, SIGMA), (1, 2, SIGMA), (0, 2, SIGMA)])
    assert np.all(np.isinf(peb))


def test_no_links_at_all():
    assert np.all(np.isinf(peb_of([(1, 1), (2, 2)], SQUARE, [])))


def test_dangling_agent_neither_helps_nor_hurts():
    # B's single range to A only says where B is given A: A's bound stays its anchors-only one
    a_links = to_all(4, agent=0)
    alone = peb_of([(2, 3)], SQUARE, a_links)[0]
    peb = peb_of([(2, 3), (6, 8)], SQUARE, a_links, [(0, 1, SIGMA)])
    assert np.isinf(peb[1])
    assert peb[0] == pytest.approx(alone, rel=1e-9)


def test_peer_range_makes_agent_identifiable():
    # B has one anchor (10,10) and one range to A: two independent directions -> finite
    a_links = to_all(4, agent=0) + [(1, 2, SIGMA)]
    anchors_only = peb_of([(2, 3), (7, 4)], SQUARE, a_links)
    coop = peb_of([(2, 3), (7, 4)], SQUARE, a_links, [(0, 1, SIGMA)])
    assert np.isinf(anchors_only[1])
    assert np.isfinite(coop[1])
    assert coop[0] <= anchors_only[0] + 1e-12


def test_not_psd_is_rejected():
    with pytest.raises(ValueError, match="positive semi-definite"):
        position_error_bound(-np.eye(2))


# --- repeated measurements: each row counts, so doubling all rows doubles J

def test_repeated_measurements_halve_the_variance():
    links = to_all(4) + [(1, a, SIGMA) for a in (0, 1)]
    peer = [(0, 1, SIGMA)]
    agents = [(2, 3), (6, 4)]
    once = peb_of(agents, SQUARE, links, peer)
    twice = peb_of(agents, SQUARE, links * 2, peer * 2)
    np.testing.assert_allclose(twice**2, once**2 / 2, rtol=1e-10)
    np.testing.assert_allclose(
        fisher_information(agents, SQUARE, links * 2, peer * 2), 2 * fisher_information(agents, SQUARE, links, peer)
    )


# --- independent check: an efficient estimator reaches the bound

def test_maximum_likelihood_rmse_reaches_the_bound():
    """ML (scipy.optimize.least_squares) RMSE over 2000 draws within 5% of the PEB.

    Statistical tolerance: near the bound the ML error is close to N(0, J^-1),
    so the squared error is l1*X1 + l2*X2 with X ~ chi2(1) and l the eigenvalues
    of J^-1.  The mean of n such has relative standard deviation
    sqrt(2 (l1^2 + l2^2)) / (l1 + l2) / sqrt(n) <= sqrt(2 / n) = 3.2% at n = 2000,
    so the RMSE's is at most 1.6%: 5% is more than 3 standard deviations.  The
    bias from the curvature of the ranges is of order (sigma / distance)^2, ~1e-3.
    A fixed seed keeps the test deterministic.
    """
    anchors = np.array(SQUARE)
    truth = np.array([2.0, 3.0])
    n = 2000
    J = fisher_information([truth], anchors, to_all(4), [])
    peb = position_error_bound(J)[0]

    lam = np.linalg.eigvalsh(np.linalg.inv(J))
    rel_sd_rmse = 0.5 * np.sqrt(2 * np.sum(lam**2)) / np.sum(lam) / np.sqrt(n)
    assert 0.05 > 3 * rel_sd_rmse  # the tolerance really is > 3 sigma

    rng = np.random.default_rng(20240611)
    true_r = np.linalg.norm(anchors - truth, axis=1)
    sq_err = np.empty(n)
    for k in range(n):
        r = true_r + rng.normal(0.0, SIGMA, 4)
        fit = least_squares(lambda p: (np.linalg.norm(anchors - p, axis=1) - r) / SIGMA, truth, method="lm")
        sq_err[k] = np.sum((fit.x - truth) ** 2)
    rmse = np.sqrt(np.mean(sq_err))
    assert rmse == pytest.approx(peb, rel=0.05)


# --- information can only help

def random_network(seed: int, n_agents: int = 40, n_anchors: int = 5, size_m: float = 40.0, radio_m: float = 14.0):
    rng = np.random.default_rng(seed)
    agents = rng.uniform(0, size_m, (n_agents, 2))
    anchors = rng.uniform(0, size_m, (n_anchors, 2))
    sig = lambda: rng.uniform(0.05, 0.3)  # noqa: E731
    a_links = [
        (i, a, sig()) for i in range(n_agents) for a in range(n_anchors) if np.linalg.norm(agents[i] - anchors[a]) < radio_m
    ]
    p_links = [
        (i, j, sig())
        for i in range(n_agents)
        for j in range(i + 1, n_agents)
        if np.linalg.norm(agents[i] - agents[j]) < radio_m
    ]
    return agents, anchors, a_links, p_links


@pytest.mark.parametrize("seed", [1, 2, 3])
def test_anchors_only_bound_is_never_below_cooperative(seed: int):
    agents, anchors, a_links, p_links = random_network(seed)
    coop = peb_of(agents, anchors, a_links, p_links)
    alone = peb_of(agents, anchors, a_links)
    assert np.all(alone >= coop * (1 - 1e-9))
    # the comparison is not vacuous: cooperation bounds agents the anchors alone cannot
    assert np.count_nonzero(np.isfinite(coop)) > np.count_nonzero(np.isfinite(alone))
    assert np.any(np.isfinite(alone) & (alone > coop * 1.01))


# --- input checks

def test_bad_links_are_rejected():
    with pytest.raises(ValueError, match="out of range"):
        fisher_information([(1, 1)], SQUARE, [(0, 4, SIGMA)], [])
    with pytest.raises(ValueError, match="sigma_m"):
        fisher_information([(1, 1)], SQUARE, [(0, 1, 0.0)], [])
    with pytest.raises(ValueError, match="itself"):
        fisher_information([(1, 1)], SQUARE, [], [(0, 0, SIGMA)])
    with pytest.raises(ValueError, match="same position"):
        fisher_information([(0, 0)], SQUARE, [(0, 0, SIGMA)], [])


# --- network_bounds on an in-memory Scenario

def make_scenario(with_truth: bool = True, sigma_per_m: float = 0.0):
    from peerfix.scenario.model import RangeTable, RangingModel, Scenario, Site, Truth

    site = Site("test square", (0.0, 0.0, 10.0, 10.0), RangingModel(sigma_m=SIGMA, radio_range_m=30.0, sigma_per_m=sigma_per_m))
    anchor_ids = ["n0", "n1", "n2", "n3"]  # corners, ordered as SQUARE
    agent_ids = ["tagB", "tagA"]  # B first: the result must follow this order
    xy = {"tagA": (2.0, 3.0), "tagB": (7.0, 4.0)}
    rows = [(0.0, "tagA", a) for a in anchor_ids]  # A hears all four
    rows += [(0.0, "n2", "tagB")]  # B hears one anchor (written anchor first)
    rows += [(0.0, "tagB", "tagA"), (0.0, "n0", "n1"), (1.0, "tagB", "n0")]  # peer, anchor-anchor, other epoch
    table = RangeTable(
        t_s=np.array([r[0] for r in rows]),
        node_a=[r[1] for r in rows],
        node_b=[r[2] for r in rows],
        range_m=np.full(len(rows), 5.0),
    )
    truth = None
    if with_truth:
        ids = agent_ids * 2
        truth = Truth(t_s=np.array([0.0, 0.0, 1.0, 1.0]), node_id=ids, xy_m=np.array([xy[a] for a in ids]))
    return Scenario(site=site, anchor_ids=anchor_ids, anchor_xy_m=np.array(SQUARE), agent_ids=agent_ids, ranges=table, truth=truth)


def test_network_bounds_scenario():
    out = network_bounds(make_scenario(), t_s=0.0)
    assert out["agent_ids"] == ["tagB", "tagA"]
    assert (out["n_anchor_links"], out["n_agent_links"]) == (5, 1)
    # tagA alone: the check-values table row "agent at (2, 3)" (Patwari et al. 2005)
    assert out["peb_anchors_only_m"][1] == pytest.approx(0.10210, abs=1e-4)
    assert np.isinf(out["peb_anchors_only_m"][0])
    expected = peb_of([(7, 4), (2, 3)], SQUARE, [(1, a, SIGMA) for a in range(4)] + [(0, 2, SIGMA)], [(0, 1, SIGMA)])
    np.testing.assert_allclose(out["peb_m"], expected, rtol=1e-12)
    assert np.all(np.isfinite(out["peb_m"]))


def test_network_bounds_distance_dependent_sigma():
    out = network_bounds(make_scenario(sigma_per_m=0.01), t_s=0.0)
    d = np.linalg.norm(np.array(SQUARE) - (2.0, 3.0), axis=1)
    expected = peb_of([(2, 3)], SQUARE, [(0, a, SIGMA + 0.01 * d[a]) for a in range(4)])[0]
    assert out["peb_anchors_only_m"][1] == pytest.approx(expected, rel=1e-12)
    assert out["peb_anchors_only_m"][1] > 0.10210 + 1e-3  # the distance term is really used


def test_network_bounds_needs_epoch_and_truth():
    with pytest.raises(ValueError, match="epochs"):
        network_bounds(make_scenario())  # two epochs in the ranges, none chosen
    with pytest.raises(ValueError, match="no truth"):
        network_bounds(make_scenario(with_truth=False), t_s=0.0)
