"""Tests of one node's update in float64 (peerfix.reference.node).

Outside references: the Cramer-Rao position error bound formula of
check-values.md (Patwari et al., IEEE SPM 22(4), 2005) for "a few sigma",
the closed-form intersection of two circles, and the variance of a uniform
distribution (w^2 / 12, common knowledge).
"""

from __future__ import annotations

import numpy as np
import pytest

from peerfix.reference.mixture import Mixture, logsumexp, modes, moments
from peerfix.reference.node import (
    BlockedModel,
    Received,
    anchor_message,
    is_informative,
    message_belief,
    order_for_update,
    outgoing,
    predict,
    prior_moments,
    read_estimate,
    spread_m,
    update,
)
from peerfix.reference.params import EstimatorParams

PARAMS = EstimatorParams()
BOX = (0.0, 0.0, 20.0, 20.0)
SIGMA = 0.1


def anchor_inbox(truth, anchors, noise_m=None, sigma=SIGMA) -> list[Received]:
    truth = np.asarray(truth, float)
    out = []
    for k, a in enumerate(anchors):
        r = float(np.linalg.norm(truth - np.asarray(a, float)))
        if noise_m is not None:
            r += float(noise_m[k])
        out.append(Received(f"anchor-{k}", anchor_message(a), r, sigma, True))
    return out


def peb(truth, anchors, sigma=SIGMA) -> float:
    """Position error bound, sqrt(trace(J^-1)), J = sum u u^T / sigma^2 (Patwari et al. 2005)."""
    u = np.asarray(truth, float) - np.asarray(anchors, float)
    u /= np.linalg.norm(u, axis=1)[:, None]
    return float(np.sqrt(np.trace(np.linalg.inv(u.T @ u / sigma**2))))


def circle_intersections(c1, r1, c2, r2) -> np.ndarray:
    """The two crossing points of two circles (closed form: the chord through
    the foot a = (d^2 + r1^2 - r2^2) / 2d along the centre line, half-height
    h = sqrt(r1^2 - a^2))."""
    c1, c2 = np.asarray(c1, float), np.asarray(c2, float)
    d = float(np.linalg.norm(c2 - c1))
    e = (c2 - c1) / d
    a = (d * d + r1 * r1 - r2 * r2) / (2 * d)
    h = np.sqrt(r1 * r1 - a * a)
    foot = c1 + a * e
    n = np.array([-e[1], e[0]])
    return np.array([foot + h * n, foot - h * n])


# --- well-determined and ambiguous cases ---

THREE_ANCHORS = [(0.0, 0.0), (20.0, 0.0), (10.0, 20.0)]


@pytest.mark.parametrize("seed", range(8))
def test_three_anchors_localise_within_a_few_sigma(seed):
    rng = np.random.default_rng(seed)
    truth = rng.uniform(4.0, 16.0, 2)
    noise = rng.normal(0.0, SIGMA, 3)
    belief = update(None, anchor_inbox(truth, THREE_ANCHORS, noise), BOX, PARAMS)
    assert belief is not None and 1 <= len(belief) <= PARAMS.max_components
    est = read_estimate(belief, BOX, PARAMS)
    assert est.mode_count == 1
    # "A few sigma": 4 x the position error bound (an efficient estimator's
    # error is ~ PEB; 4 PEB is passed by chance with prob. ~ e^-8 in 2-D).
    assert np.linalg.norm(est.mean - truth) < 4.0 * peb(truth, THREE_ANCHORS)


def test_two_anchors_give_two_modes_at_the_intersections():
    anchors = [(4.0, 10.0), (16.0, 9.0)]
    truth = np.array([10.0, 14.0])
    inbox = anchor_inbox(truth, anchors)
    belief = update(None, inbox, BOX, PARAMS)
    est = read_estimate(belief, BOX, PARAMS)
    assert est.mode_count == 2
    found = modes(belief, PARAMS.mode_gate_sigma2, PARAMS.mode_min_weight)
    assert len(found) == 2
    points = circle_intersections(anchors[0], inbox[0].range_m, anchors[1], inbox[1].range_m)
    assert np.linalg.norm(points[0] - truth) < 1e-9 or np.linalg.norm(points[1] - truth) < 1e-9
    mode_means = [moments(belief.take(idx))[0] for _, idx in found]
    # Each mode near one intersection (1.5 sigma; measured ~5 cm with exact ranges).
    for p in points:
        assert min(np.linalg.norm(mm - p) for mm in mode_means) < 1.5 * SIGMA
    # The two weights are about equal (mirror images); the estimate is the heavier one.
    assert found[0][0] >= found[1][0]
    assert found[0][0] == pytest.approx(0.5, abs=0.1)
    np.testing.assert_allclose(est.mean, mode_means[0], atol=1e-12)
    assert est.mode_weight == pytest.approx(found[0][0])
    # Each mode is sharp, so the bimodal belief is still sent (censoring per component).
    assert is_informative(belief, PARAMS)


def test_mirror_outside_box_gives_one_mode():
    # Same ranging geometry, but the mirror intersection lies below the box.
    anchors = [(0.0, 0.0), (20.0, 0.0)]
    truth = np.array([7.0, 9.0])
    belief = update(None, anchor_inbox(truth, anchors), BOX, PARAMS)
    est = read_estimate(belief, BOX, PARAMS)
    assert est.mode_count == 1
    assert np.linalg.norm(est.mean - truth) < 1.5 * SIGMA


# --- censoring and the outgoing message ---


def test_one_anchor_ring_is_censored_sharp_belief_is_sent():
    # A 7 m ring reduced to K = 4 components: each is a ~4 m long quarter.
    # (Rings shorter than about 3.7 m pass the 2 m rule: their quarters are short.)
    ring = update(None, anchor_inbox((15.0, 15.0), [(10.0, 10.0)]), BOX, PARAMS)
    assert ring is not None and len(ring) == PARAMS.max_components
    assert spread_m(ring) > PARAMS.censor_spread_m
    assert not is_informative(ring, PARAMS)
    assert outgoing(ring, PARAMS) is None
    sharp = update(None, anchor_inbox((12.0, 9.0), THREE_ANCHORS), BOX, PARAMS)
    assert spread_m(sharp) < 0.2
    assert is_informative(sharp, PARAMS)


def test_censoring_threshold_and_empty_beliefs():
    at_limit = Mixture.single([1.0, 1.0], np.diag([PARAMS.censor_spread_m**2, 0.1]))
    above = Mixture.single([1.0, 1.0], np.diag([(PARAMS.censor_spread_m * 1.01) ** 2, 0.1]))
    assert is_informative(at_limit, PARAMS)
    assert not is_informative(above, PARAMS)
    assert not is_informative(None, PARAMS)
    assert not is_informative(Mixture.empty(), PARAMS)
    assert outgoing(None, PARAMS) is None


def test_spread_judged_on_heaviest_component():
    m = Mixture(np.log([0.8, 0.2]), np.zeros((2, 2)), np.array([0.04 * np.eye(2), 100.0 * np.eye(2)]))
    assert spread_m(m) == pytest.approx(0.2)
    assert is_informative(m, PARAMS)


def test_outgoing_inflates_covariance():
    m = Mixture(np.log([0.3, 0.7]), np.array([[1.0, 2.0], [3.0, 4.0]]), np.array([np.diag([0.01, 0.02]), np.diag([0.03, 0.01])]))
    for factor in (1.0, 2.0, 3.5):
        p = PARAMS.replace(broadcast_inflation=factor)
        out = outgoing(m, p)
        np.testing.assert_allclose(out.cov, factor * m.cov)
        np.testing.assert_array_equal(out.mean, m.mean)
        np.testing.assert_array_equal(out.logw, m.logw)
    out.cov[0, 0, 0] = 99.0  # the message is a copy, not a view of the belief
    assert m.cov[0, 0, 0] == 0.01


# --- nothing heard ---


def test_empty_inbox_returns_prior():
    assert update(None, [], BOX, PARAMS) is None
    est = read_estimate(None, BOX, PARAMS)
    assert est.mode_count == 0
    mean, cov = prior_moments(BOX)
    np.testing.assert_allclose(est.mean, [10.0, 10.0])
    # Uniform on [0, 20]: variance 20^2 / 12 (common knowledge).
    np.testing.assert_allclose(est.cov, np.diag([400.0 / 12.0, 400.0 / 12.0]))
    np.testing.assert_allclose(mean, est.mean)
    np.testing.assert_allclose(cov, est.cov)


def test_ring_outside_box_leaves_prior():
    # One anchor far outside the box, with a range that never reaches it.
    inbox = [Received("far", anchor_message((100.0, 100.0)), 5.0, SIGMA, True)]
    assert update(None, inbox, BOX, PARAMS) is None


def test_tracking_prior_with_empty_inbox_is_kept():
    prior = Mixture(np.log([0.4, 0.6]), np.array([[3.0, 3.0], [15.0, 15.0]]), np.tile(0.05 * np.eye(2), (2, 1, 1)))
    out = update(prior, [], BOX, PARAMS)
    np.testing.assert_allclose(out.mean, prior.mean)
    np.testing.assert_allclose(np.exp(out.logw), [0.4, 0.6])


def test_predict_grows_covariance():
    b = Mixture.single([5.0, 5.0], 0.01 * np.eye(2))
    p = predict(b, 2.0, 0.05)
    np.testing.assert_allclose(p.cov[0], 0.11 * np.eye(2))
    np.testing.assert_allclose(b.cov[0], 0.01 * np.eye(2))  # input untouched
    assert predict(None, 1.0, 0.1) is None
    np.testing.assert_allclose(predict(b, -1.0, 0.05).cov, b.cov)  # no negative time


# --- order of use ---


def test_order_for_update_anchors_first_then_by_spread_stable():
    sharp = Mixture.single([1.0, 1.0], 0.01 * np.eye(2))
    wide = Mixture.single([1.0, 1.0], 1.0 * np.eye(2))
    inbox = [
        Received("t-wide", wide, 3.0, SIGMA, False),
        Received("a-1", anchor_message((0, 0)), 3.0, SIGMA, True),
        Received("t-sharp", sharp, 3.0, SIGMA, False),
        Received("a-0", anchor_message((9, 9)), 3.0, SIGMA, True),
        Received("t-sharp2", sharp, 3.0, SIGMA, False),
    ]
    assert [m.sender for m in order_for_update(inbox)] == ["a-1", "a-0", "t-sharp", "t-sharp2", "t-wide"]


def test_agent_neighbour_resolves_two_anchor_ambiguity():
    # Two anchors leave a mirror pair; a sharp agent neighbour breaks the tie.
    anchors = [(4.0, 10.0), (16.0, 9.0)]
    truth = np.array([10.0, 14.0])
    friend_xy = np.array([10.0, 19.0])
    friend = outgoing(Mixture.single(friend_xy, 0.01 * np.eye(2)), PARAMS)
    inbox = anchor_inbox(truth, anchors) + [Received("tag-2", friend, float(np.linalg.norm(truth - friend_xy)), SIGMA, False)]
    belief = update(None, inbox, BOX, PARAMS)
    est = read_estimate(belief, BOX, PARAMS)
    assert est.mode_count == 1
    assert np.linalg.norm(est.mean - truth) < 1.5 * SIGMA
    assert logsumexp(belief.logw) == pytest.approx(0.0, abs=1e-9)


def test_robust_likelihood_keeps_blocked_range_from_breaking_fix():
    # Four anchors, one range blocked (+1.5 m, 15 sigma).  The plain
    # likelihood's ring gate leaves that range out once the other anchors fix
    # the tag (measured 4 mm off; before the ring gate it was pulled 0.71 m
    # off); the two-ring likelihood (blocked share 0.1, bias 1 m) uses it
    # through its wide blocked ring and stays within a few sigmas of the truth
    # (measured 0.21 m).
    anchors = [(0.0, 0.0), (20.0, 0.0), (20.0, 20.0), (0.0, 20.0)]
    truth = np.array([6.0, 8.0])
    noise = np.array([0.0, 0.0, 1.5, 0.0])
    inbox = anchor_inbox(truth, anchors, noise)
    plain = read_estimate(update(None, inbox, BOX, PARAMS), BOX, PARAMS)
    robust = read_estimate(update(None, inbox, BOX, PARAMS, BlockedModel(0.1, 1.0)), BOX, PARAMS)
    assert np.linalg.norm(plain.mean - truth) < 0.05
    assert np.linalg.norm(robust.mean - truth) < 0.3
    # Without the gate the plain likelihood is pulled off by the blocked range.
    ungated = read_estimate(update(None, inbox, BOX, PARAMS.replace(product_gate_sigma2=0.0)), BOX, PARAMS)
    assert np.linalg.norm(ungated.mean - truth) > 0.3


def test_at_most_max_neighbours_used_most_informative_first():
    # Three anchors fix the tag; a wide, wrong agent broadcast comes last in
    # the order, so with max_neighbours = 3 it must not be used at all.
    truth = np.array([8.0, 6.0])
    liar = outgoing(Mixture.single([18.0, 18.0], 0.5 * np.eye(2)), PARAMS)
    # 1.5 m too long: wrong, yet inside the ring gate (4 x 1.005 m upper-bound sigma)
    wrong = float(np.linalg.norm(truth - np.array([18.0, 18.0]))) + 1.5
    inbox = [Received("tag-x", liar, wrong, SIGMA, False)] + anchor_inbox(truth, THREE_ANCHORS)
    capped = PARAMS.replace(max_neighbours=3)
    a = update(None, inbox, BOX, capped)
    b = update(None, inbox[1:], BOX, capped)
    np.testing.assert_array_equal(a.mean, b.mean)
    np.testing.assert_array_equal(a.logw, b.logw)
    # With room for it, the wrong range does change the belief.
    assert not np.array_equal(update(None, inbox, BOX, PARAMS).mean, b.mean)


def test_message_of_a_one_mode_neighbour_is_its_read_off_mode():
    # Two components 0.1 m apart (one mode under the 3-sigma gate): one
    # component with the mode's moments (peerfix.reference.mixture.moments);
    # two components 8 m apart are two modes: every component stays a ring.
    one = Mixture(np.log([0.6, 0.4]), np.array([[5.0, 5.0], [5.1, 5.0]]), np.array([np.eye(2) * 0.02] * 2))
    got = message_belief(one, PARAMS)
    mean, cov = moments(one)
    assert len(got) == 1 and got.logw[0] == 0.0
    np.testing.assert_allclose(got.mean[0], mean)
    np.testing.assert_allclose(got.cov[0], cov)
    two = Mixture(one.logw, np.array([[5.0, 5.0], [13.0, 5.0]]), one.cov)
    assert message_belief(two, PARAMS) is two
    single = Mixture.single([1.0, 2.0], np.eye(2))
    assert message_belief(single, PARAMS) is single
