"""Tests of the float64 range update (peerfix.reference.ranging).

Outside references: the exact Kalman update of a linearised range (derived
by hand below), scipy.stats.norm / multivariate_normal, and brute-force 2-D
quadrature of the ring likelihood N(r; ||x - c||, s^2).
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.stats import multivariate_normal, norm

from peerfix.reference.mixture import Mixture, logsumexp, max_eig2
from peerfix.reference.params import RING_DIRECTIONS, EstimatorParams
from peerfix.reference.ranging import (
    IEKF_STEP_TOL_M,
    Rings,
    broad_update,
    compact_update,
    first_ring,
    is_broad,
    multiply_by_rings,
    ring_gate,
    ring_messages,
    stride_for,
)

PARAMS = EstimatorParams()


def one(x) -> np.ndarray:
    return np.asarray(x, float)[None]


def mixture_pdf(m: Mixture, pts: np.ndarray) -> np.ndarray:
    """Unnormalised density sum_k exp(logw_k) N(x; mu_k, P_k) (scipy.stats)."""
    return sum(np.exp(m.logw[k]) * multivariate_normal.pdf(pts, m.mean[k], m.cov[k]) for k in range(len(m)))


def ring_pdf(pts: np.ndarray, centre, radius: float, var: float) -> np.ndarray:
    """The ring likelihood N(r; ||x - c||, s^2) (scipy.stats.norm)."""
    rho = np.hypot(pts[:, 0] - centre[0], pts[:, 1] - centre[1])
    return norm.pdf(radius, rho, np.sqrt(var))


def ring_points(centre, radius: float, angles: np.ndarray) -> np.ndarray:
    return np.stack([centre[0] + radius * np.cos(angles), centre[1] + radius * np.sin(angles)], axis=1)


# --- compact (iterated extended Kalman) update ---

NEAR_LINEAR = dict(
    mean=np.array([30.0, 4.0]),
    cov=np.array([[0.04, 0.01], [0.01, 0.02]]),
    centre=np.array([0.0, 0.0]),
    var=0.01,
)


def linear_kalman(mean, cov, centre, radius, var):
    """Textbook Kalman update with the range linearised at the prior mean:
    H = (mu - c)^T / ||mu - c||, S = H P H^T + s^2, K = P H^T / S,
    mu+ = mu + K (r - ||mu - c||), P+ = P - K S K^T."""
    d = mean - centre
    rho = np.linalg.norm(d)
    h = d / rho
    s = h @ cov @ h + var
    k = cov @ h / s
    return mean + k * (radius - rho), cov - s * np.outer(k, k), rho, s


def test_compact_update_one_iteration_is_linear_kalman():
    c = NEAR_LINEAR
    radius = float(np.linalg.norm(c["mean"])) + 0.15
    x, p, ll = compact_update(one(c["mean"]), one(c["cov"]), one(c["centre"]), one(radius), one(c["var"]), 1)
    mu_ref, p_ref, predicted, s = linear_kalman(c["mean"], c["cov"], c["centre"], radius, c["var"])
    np.testing.assert_allclose(x[0], mu_ref, rtol=0, atol=1e-12)
    np.testing.assert_allclose(p[0], p_ref, rtol=0, atol=1e-14)
    # Innovation likelihood (scipy.stats.norm reference).
    assert ll[0] == pytest.approx(norm.logpdf(radius, predicted, np.sqrt(s)), abs=1e-12)


def test_compact_update_iterated_near_linear_matches_kalman():
    # Far from the centre with a small covariance the range is nearly linear
    # over the component: the curvature term is about sigma_t^2 / rho =
    # 0.04 / 30 ~ 1e-3 of a sigma, so three relinearisations stay within 2e-4 m.
    c = NEAR_LINEAR
    radius = float(np.linalg.norm(c["mean"])) + 0.15
    x, p, _ = compact_update(one(c["mean"]), one(c["cov"]), one(c["centre"]), one(radius), one(c["var"]), 3)
    mu_ref, p_ref, _, _ = linear_kalman(c["mean"], c["cov"], c["centre"], radius, c["var"])
    np.testing.assert_allclose(x[0], mu_ref, atol=2e-4)
    np.testing.assert_allclose(p[0], p_ref, atol=2e-5)


def test_compact_update_loglik_at_last_linearisation_point():
    # Reference: scipy.stats.norm.logpdf(r, h(x_n) + H (mu - x_n), sqrt(H P H^T + s^2)),
    # with x_n the point the last (third) iteration linearised at, i.e. the
    # output of two iterations.
    rng = np.random.default_rng(2)
    for _ in range(10):
        mean = rng.uniform(-10, 10, 2)
        cov = np.diag(rng.uniform(0.05, 1.0, 2))
        centre = rng.uniform(-10, 10, 2)
        radius = float(np.linalg.norm(mean - centre)) + rng.normal(0.0, 1.0)
        var = rng.uniform(0.01, 0.2)
        args = (one(mean), one(cov), one(centre), one(radius), one(var))
        x_n = compact_update(*args, 2)[0][0]
        _, _, ll = compact_update(*args, 3)
        d = x_n - centre
        h = d / np.linalg.norm(d)
        predicted = np.linalg.norm(d) + h @ (mean - x_n)
        s = h @ cov @ h + var
        assert ll[0] == pytest.approx(norm.logpdf(radius, predicted, np.sqrt(s)), abs=1e-10)


def test_compact_update_moves_towards_ring():
    rng = np.random.default_rng(4)
    n = 200
    centre = rng.uniform(-5, 5, (n, 2))
    ang = rng.uniform(0, 2 * np.pi, n)
    rho = rng.uniform(5.0, 30.0, n)
    mean = centre + rho[:, None] * np.stack([np.cos(ang), np.sin(ang)], 1)
    cov = np.einsum("n,ij->nij", rng.uniform(0.05, 1.0, n), np.eye(2))
    radius = rho + rng.uniform(-2.0, 2.0, n)
    var = rng.uniform(0.01, 0.1, n)
    x, p, _ = compact_update(mean, cov, centre, radius, var, 3)
    before = np.abs(np.linalg.norm(mean - centre, axis=1) - radius)
    after = np.abs(np.linalg.norm(x - centre, axis=1) - radius)
    assert np.all(after < before)
    # Posterior is tighter than the prior along any direction (P - P+ PSD).
    assert np.all(np.linalg.eigvalsh(cov - p) > -1e-12)
    assert np.all(np.linalg.eigvalsh(p) > 0)



def test_compact_update_gate_keeps_the_one_step_update_far_off_the_ring():
    # Two pairs of one component: 0.15 m off the ring (first squared normalised
    # innovation 0.15^2 / S ~ 0.6) and 3 m off (~260, beyond the gate of 64).
    c = NEAR_LINEAR
    rho = float(np.linalg.norm(c["mean"]))
    radius = np.array([rho + 0.15, rho + 3.0])
    args = (np.tile(c["mean"], (2, 1)), np.tile(c["cov"], (2, 1, 1)), np.tile(c["centre"], (2, 1)), radius,
            np.full(2, c["var"]))  # fmt: skip
    full, one_step = compact_update(*args, 3), compact_update(*args, 1)
    gated = compact_update(*args, 3, gate_sigma2=64.0)
    _, _, predicted, s = linear_kalman(c["mean"], c["cov"], c["centre"], radius[1], c["var"])
    assert (radius[1] - predicted) ** 2 / s > 64.0 > (radius[0] - rho) ** 2 / s
    for g, f, o in zip(gated, full, one_step):
        np.testing.assert_array_equal(g[0], f[0])  # within the gate: relinearised
        np.testing.assert_array_equal(g[1], o[1])  # beyond it: the one-step (linear Kalman) update
    assert not np.allclose(full[0][1], one_step[0][1], rtol=0, atol=1e-4)  # the gate changed something
    # Its weight is that linearisation's innovation likelihood (scipy.stats.norm).
    assert gated[2][1] == pytest.approx(norm.logpdf(radius[1], predicted, np.sqrt(s)), abs=1e-10)


def test_compact_update_stops_relinearising_once_converged():
    # NEAR_LINEAR 0.15 m off the ring: the second iteration moves the estimate
    # by 3e-5 m, below the tolerance, so the third is skipped.  An elongated
    # component crossed obliquely moves by 0.2 m in its second iteration and
    # keeps all three.
    tol = IEKF_STEP_TOL_M
    c = NEAR_LINEAR
    rho = float(np.linalg.norm(c["mean"]))
    near = (one(c["mean"]), one(c["cov"]), one(c["centre"]), one(rho + 0.15), one(c["var"]))
    x1, x2, x3 = (compact_update(*near, k)[0][0] for k in (1, 2, 3))
    assert np.linalg.norm(x2 - x1) <= tol < np.linalg.norm(x1 - c["mean"])
    stopped = compact_update(*near, 3, step_tol_m=tol)
    for a, b in zip(stopped, compact_update(*near, 2)):
        np.testing.assert_array_equal(a, b)
    np.testing.assert_allclose(stopped[0][0], x3, rtol=0, atol=1e-6)  # what the skipped iteration would add
    elongated = (one(c["mean"]), one(np.diag([0.02, 4.0])), one(c["centre"]), one(rho + 0.5), one(c["var"]))
    for a, b in zip(compact_update(*elongated, 3, step_tol_m=tol), compact_update(*elongated, 3)):
        np.testing.assert_array_equal(a, b)


def test_multiply_by_rings_uses_the_products_gate():
    belief = Mixture(np.zeros(1), NEAR_LINEAR["mean"][None], NEAR_LINEAR["cov"][None])
    rho = float(np.linalg.norm(NEAR_LINEAR["mean"]))
    # 0.92 m off the ring: beyond the product gate (4 sigma of the innovation,
    # s = h'Ph + var = 0.0522 m^2: 0.914 m) but inside the ring gate (4 upper-
    # bound sigmas, lambda_max + var = 0.0541 m^2: 0.931 m), so the product is
    # formed and keeps the one-step update.
    rings = Rings(np.zeros(1), np.zeros((1, 2)), np.array([rho + 0.92]), np.array([NEAR_LINEAR["var"]]))
    one_step = compact_update(belief.mean, belief.cov, rings.centre, rings.radius, rings.var, 1)
    out = multiply_by_rings(belief, rings, PARAMS)
    np.testing.assert_array_equal(out.mean, one_step[0])
    assert out.logw[0] == one_step[2][0]
    ungated = multiply_by_rings(belief, rings, PARAMS.replace(product_gate_sigma2=0.0))
    assert not np.allclose(ungated.mean, one_step[0], rtol=0, atol=1e-4)


# --- ring messages ---


def test_ring_messages_variance_and_blocked_ring():
    nb = Mixture(np.log([0.25, 0.75]), np.array([[1.0, 2.0], [3.0, 4.0]]), np.array([np.diag([0.04, 0.09]), np.diag([0.5, 0.1])]))
    rings = ring_messages(nb, 7.0, 0.1, PARAMS)
    np.testing.assert_allclose(rings.var, 0.01 + np.array([0.09, 0.5]))  # s^2 = sigma^2 + largest variance
    np.testing.assert_allclose(rings.radius, 7.0)
    np.testing.assert_allclose(rings.logw, nb.logw)
    robust = ring_messages(nb, 7.0, 0.1, PARAMS, blocked_weight=0.2, blocked_bias_m=1.5)
    assert len(robust) == 4
    np.testing.assert_allclose(np.exp(robust.logw), [0.2, 0.6, 0.05, 0.15])
    np.testing.assert_allclose(robust.radius, [7.0, 7.0, 5.5, 5.5])
    np.testing.assert_allclose(robust.var[2:], robust.var[:2] + 1.5**2)


def test_is_broad_cases():
    centre = np.zeros((3, 2))
    mean = np.array([[20.0, 0.0], [20.0, 0.0], [0.5, 0.0]])
    cov = np.array([0.01 * np.eye(2), 25.0 * np.eye(2), 1.0 * np.eye(2)])
    b = is_broad(mean, cov, centre, np.array([20.0, 20.0, 3.0]), np.full(3, 0.01), PARAMS)
    # tight and far: compact; 5 m std on a 20 m ring: broad; on the centre: broad.
    assert b.tolist() == [False, True, True]


# --- arcs: the ring likelihood, pointwise ---


def test_first_ring_density_matches_ring_likelihood_on_ring():
    # The arcs stand for the ring likelihood times the flat prior 1/area, so
    # area * density on the ring should equal N(r; ||x - c||, s^2) there.
    # With s = 0.5 m on a 10 m ring (arc spacing 1.96 m) the straight arcs
    # stay within 2 % of the ring; the stated tolerance is 5 %.
    bounds = (0.0, 0.0, 40.0, 40.0)
    centre, radius, var = np.array([20.0, 20.0]), 10.0, 0.25
    rings = Rings(np.zeros(1), one(centre), one(radius), one(var))
    m = first_ring(rings, bounds, PARAMS)
    pts = ring_points(centre, radius, np.linspace(0, 2 * np.pi, 181))
    area = 40.0 * 40.0
    ratio = area * mixture_pdf(m, pts) / ring_pdf(pts, centre, radius, var)
    np.testing.assert_allclose(ratio, 1.0, atol=0.05)


def test_first_ring_sharp_ring_keeps_radial_mass():
    # For a sharp (s = 0.1 m) ring the straight arcs spread the mass radially
    # (outwards by about (0.6 spacing)^2 / 2r, measured 3-14 cm here, so the
    # density on the ring itself is only 60-90 % of the ring likelihood), but
    # the mass across the ring must still be right:
    # along any ray, integral of N(r; rho, s^2) rho / r drho = 1 (polar
    # Jacobian; exact for the ring likelihood).  Stated tolerance 1 %.
    bounds = (-20.0, -20.0, 20.0, 20.0)
    for radius in (3.0, 5.0, 10.0):
        rings = Rings(np.zeros(1), one([0.0, 0.0]), one(radius), one(0.01))
        m = first_ring(rings, bounds, PARAMS)
        rho = np.linspace(radius - 1.5, radius + 1.5, 3001)
        step = rho[1] - rho[0]
        for angle in np.linspace(0.0, np.pi / 4, 7):
            pts = ring_points((0.0, 0.0), 1.0, np.full(rho.size, angle)) * rho[:, None]
            radial = (mixture_pdf(m, pts) * 40.0 * 40.0 * rho / radius).sum() * step
            assert radial == pytest.approx(1.0, abs=0.01), (radius, angle)


def test_broad_update_density_is_component_times_ring():
    # Product of a broad component and the ring: density(x) / N(x; mu, P)
    # should be the ring likelihood on the ring, inside the window.  Points
    # are taken within 2 m of the mean, 4 m from the 6 m window edge
    # (3 sigma of a 2 m component), where the missing arcs weigh < 1 %.
    # Stated tolerance 5 % (s = 0.5 m, 10 m ring).
    centre, radius, var = np.array([0.0, 0.0]), 10.0, 0.25
    mean, cov = np.array([9.0, 1.0]), 4.0 * np.eye(2)
    m = broad_update(mean, cov, centre, radius, var, PARAMS)
    assert 1 < len(m) <= PARAMS.broad_max_arcs
    ang0 = np.arctan2(mean[1], mean[0])
    pts = ring_points(centre, radius, ang0 + np.linspace(-0.19, 0.19, 21))
    assert np.all(np.linalg.norm(pts - mean, axis=1) < 2.1)
    ratio = mixture_pdf(m, pts) / (multivariate_normal.pdf(pts, mean, cov) * ring_pdf(pts, centre, radius, var))
    np.testing.assert_allclose(ratio, 1.0, atol=0.05)


def test_broad_update_misses_far_ring():
    m = broad_update(np.array([0.0, 0.0]), 0.01 * np.eye(2), np.array([0.0, 50.0]), 10.0, 0.01, PARAMS)
    assert len(m) == 0


# --- first ring: bounds and mass ---


def test_first_ring_mass_well_inside_box():
    # Total mass = ring length / box area: the prior is 1/area and each arc
    # carries its arc length (2 pi r in all).
    bounds = (0.0, 0.0, 30.0, 20.0)
    for radius in (0.5, 2.0, 6.0, 9.0):
        rings = Rings(np.zeros(1), one([15.0, 10.0]), one(radius), one(0.01))
        m = first_ring(rings, bounds, PARAMS)
        assert np.exp(logsumexp(m.logw)) == pytest.approx(2 * np.pi * radius / 600.0, rel=1e-9)
        assert len(m) <= PARAMS.candidate_cap


def test_first_ring_drops_arcs_outside_box():
    bounds = (0.0, 0.0, 30.0, 20.0)
    radius = 8.0
    rings = Rings(np.zeros(1), one([0.0, 0.0]), one(radius), one(0.01))  # centred on a corner
    m = first_ring(rings, bounds, PARAMS)
    xmin, ymin, xmax, ymax = bounds
    assert np.all((m.mean[:, 0] >= xmin) & (m.mean[:, 0] <= xmax) & (m.mean[:, 1] >= ymin) & (m.mean[:, 1] <= ymax))
    stride = stride_for(radius, PARAMS.ring_arc_spacing_m, PARAMS.candidate_cap)
    n_full = RING_DIRECTIONS // stride
    # A quarter of the ring is inside, ends included (directions 0 and 90 deg).
    assert len(m) == n_full // 4 + 1
    # Off the corner by 0.3 m: the ring inside the box spans the angles
    # -asin(0.3/8) .. pi/2 + asin(0.3/8).  Mass ~ (that length) / area; each of
    # the two crossings keeps or drops at most half an arc, so within one arc.
    shifted = Rings(np.zeros(1), one([0.3, 0.3]), one(radius), one(0.01))
    m = first_ring(shifted, bounds, PARAMS)
    length_in = radius * (0.5 * np.pi + 2 * np.arcsin(0.3 / radius))
    spacing = 2 * np.pi * radius / n_full
    assert np.exp(logsumexp(m.logw)) == pytest.approx(length_in / 600.0, abs=spacing / 600.0)
    # A ring entirely outside the box leaves nothing.
    outside = Rings(np.zeros(1), one([-50.0, -50.0]), one(5.0), one(0.01))
    assert len(first_ring(outside, bounds, PARAMS)) == 0


def test_first_ring_cap_shared_between_rings():
    nb = Mixture(np.log(np.full(4, 0.25)), np.array([[10.0, 10.0], [12.0, 10.0], [10.0, 12.0], [14.0, 14.0]]), np.tile(0.01 * np.eye(2), (4, 1, 1)))
    rings = ring_messages(nb, 9.0, 0.1, PARAMS, blocked_weight=0.1, blocked_bias_m=1.0)
    m = first_ring(rings, (0.0, 0.0, 30.0, 30.0), PARAMS)
    assert 0 < len(m) <= PARAMS.candidate_cap


# --- compact vs broad: both approximate one integral ---


def ring_integral(mean, cov, centre, radius, var) -> float:
    """Brute-force quadrature of I = integral N(x; mu, P) N(r; ||x - c||, s^2) dx:
    midpoint rule on a 801 x 801 grid over +-7 sigma of the component (the
    integrand is smooth with scale >= s = 0.3 m >> step, so the rule is
    accurate to far better than the 6 % tolerance below)."""
    sd = float(np.sqrt(np.linalg.eigvalsh(cov)[-1]))
    g = np.linspace(-7 * sd, 7 * sd, 801)
    step = g[1] - g[0]
    xx, yy = np.meshgrid(mean[0] + g, mean[1] + g, indexing="ij")
    pts = np.stack([xx.ravel(), yy.ravel()], 1)
    f = multivariate_normal.pdf(pts, mean, cov) * ring_pdf(pts, centre, radius, var)
    return float(f.sum() * step * step)


@pytest.mark.parametrize(
    "mean, cov, radius, var",
    [
        ((10.0, 0.0), np.eye(2), 10.5, 0.09),
        ((8.0, 3.0), np.array([[1.0, 0.3], [0.3, 0.6]]), 9.0, 0.09),
        ((10.0, 0.0), np.diag([0.5, 1.0]), 9.5, 0.09),
        ((6.0, 6.0), 0.8 * np.eye(2), 8.0, 0.16),
    ],
)
def test_compact_and_broad_weights_match_quadrature(mean, cov, radius, var):
    # Moderate spread (about 1 m on a ~10 m ring): the compact update's
    # innovation likelihood (a linearisation) and the broad update's summed
    # arc weights (a discretisation, truncated at the 4-sigma window) each
    # came within 4.6 % of the quadrature (measured: compact 4.6 %, broad
    # 1.3 %); stated tolerance 6 %.
    mean = np.asarray(mean, float)
    centre = np.zeros(2)
    ref = ring_integral(mean, cov, centre, radius, var)
    _, _, ll = compact_update(one(mean), one(cov), one(centre), one(radius), one(var), PARAMS.iekf_iterations)
    arcs = broad_update(mean, cov, centre, radius, var, PARAMS)
    assert np.exp(ll[0]) == pytest.approx(ref, rel=0.06)
    assert np.exp(logsumexp(arcs.logw)) == pytest.approx(ref, rel=0.06)


# --- multiply_by_rings: structure ---


def test_multiply_by_rings_compact_pairs_in_fixed_order():
    belief = Mixture(np.log([0.6, 0.4]), np.array([[10.0, 0.0], [0.0, 10.0]]), np.tile(0.01 * np.eye(2), (2, 1, 1)))
    rings = Rings(np.log([0.5, 0.5]), np.array([[0.0, 0.0], [20.0, 0.0]]), np.array([10.1, 10.1]), np.full(2, 0.01))
    assert len(multiply_by_rings(belief, rings, PARAMS)) == 3  # (0, 10) is 12 m off the ring at (20, 0): gated out
    out = multiply_by_rings(belief, rings, PARAMS.replace(product_gate_sigma2=0.0))
    assert len(out) == 4  # all compact: one product per (component, ring), component major
    for k, (b, r) in enumerate([(0, 0), (0, 1), (1, 0), (1, 1)]):
        x, p, ll = compact_update(
            belief.mean[b : b + 1], belief.cov[b : b + 1], rings.centre[r : r + 1], rings.radius[r : r + 1], rings.var[r : r + 1], PARAMS.iekf_iterations
        )
        np.testing.assert_allclose(out.mean[k], x[0])
        assert out.logw[k] == pytest.approx(belief.logw[b] + rings.logw[r] + ll[0])


def test_multiply_by_rings_broad_component_expands_in_place():
    belief = Mixture(
        np.log([0.5, 0.5]), np.array([[10.0, 0.0], [0.0, 10.0]]), np.array([0.01 * np.eye(2), 9.0 * np.eye(2)])
    )
    rings = Rings(np.zeros(1), np.zeros((1, 2)), np.array([10.0]), np.array([0.01]))
    out = multiply_by_rings(belief, rings, PARAMS)
    arcs = broad_update(belief.mean[1], belief.cov[1], rings.centre[0], 10.0, 0.01, PARAMS)
    assert len(out) == 1 + len(arcs)
    np.testing.assert_allclose(out.mean[1:], arcs.mean)
    np.testing.assert_allclose(out.logw[1:], arcs.logw + belief.logw[1])
    assert max_eig2(out.cov).min() > 0


# --- the ring gate and the short-step stop of the compact update ---


def test_ring_gate_is_the_distance_of_the_ring_in_upper_bound_sigmas():
    # (rho - r)^2 against gate (s^2 + lambda_max(P)), worked by hand: a
    # component at (3, 4) (rho = 5 from the origin) with P = diag(0.09, 0.16)
    # (lambda_max 0.16) and ring variance 0.09: the bound sigma is 0.5 m, so
    # with gate 16 (4 sigma) the ring passes within 2 m: radii 3..7 pass.
    cov = np.diag([0.09, 0.16])
    radii = np.array([2.9, 3.1, 6.9, 7.1])
    n = radii.size
    keep = ring_gate(np.tile([3.0, 4.0], (n, 1)), np.tile(cov, (n, 1, 1)), np.zeros((n, 2)), radii,
                     np.full(n, 0.09), 16.0)  # fmt: skip
    assert keep.tolist() == [False, True, True, False]


def test_multiply_forms_no_product_for_a_gated_out_pair():
    near = Mixture.single([10.0, 0.0], np.eye(2) * 0.01)
    rings = Rings(np.zeros(2), np.zeros((2, 2)), np.array([10.05, 14.0]), np.full(2, 0.01))
    out = multiply_by_rings(near, rings, PARAMS)
    assert len(out) == 1  # the ring at 14 m passes 4 m (28 bound sigmas) away: no product
    off = multiply_by_rings(near, rings, PARAMS.replace(product_gate_sigma2=0.0))
    assert len(off) == 2
    np.testing.assert_array_equal(out.mean[0], off.mean[0])


def test_compact_update_short_step_stop_is_within_the_tolerance():
    # The short-step stop (|d|^2 <= 2 rho tol) ends the iteration early; the
    # estimate stays within 1 mm (the core's position LSB; measured worst of
    # these 300 pairs: 0.56 mm) of the fully iterated one, its log weight
    # within 5e-3.
    rng = np.random.default_rng(5)
    n = 300
    mean = rng.uniform(5, 30, (n, 2))
    cov = np.array([np.diag(rng.uniform(0.001, 0.05, 2)) for _ in range(n)])
    centre = np.zeros((n, 2))
    radius = np.hypot(mean[:, 0], mean[:, 1]) + rng.normal(0, 0.1, n)
    var = np.full(n, 0.01)
    x_stop, _, ll_stop = compact_update(mean, cov, centre, radius, var, 8, 0.0, IEKF_STEP_TOL_M)
    x_full, _, ll_full = compact_update(mean, cov, centre, radius, var, 8, 0.0, 0.0)
    assert np.max(np.hypot(*(x_stop - x_full).T)) <= 1e-3
    np.testing.assert_allclose(ll_stop, ll_full, atol=5e-3)  # measured worst 2.2e-3 (0.2 % of the weight)


# --- directional spread ------------------------------------------------------------------
# A neighbour's position c ~ N(0, P) makes the range likelihood at x the
# average of N(r; ||x - c||, s^2) over c.  To first order (the delta method,
# common practice) its variance is s^2 + h^T P h along the line of sight h;
# the bound rule uses s^2 + lambda_max(P) in every direction.  The reference
# density is that average by Gauss-Legendre quadrature (scipy.special) over
# +-7 standard deviations of c.  Tolerances: L1 distance of two densities in r
# (0 = equal, 2 = disjoint); the first-order rule misses only the curvature
# term (sd_perp^2 / 2 rho: 3 cm here) across the long axis.
DIRECTIONAL_L1_MAX = 0.2
DIRECTIONAL_GAIN_MIN = 5.0  # the bound rule's L1 over the directional rule's, off the long axis


def _marginal_range_density(x, neighbour_cov, sigma, rs):
    from scipy.special import roots_legendre

    sx, sy = np.sqrt(np.diag(neighbour_cov))  # axis-aligned neighbour covariance
    gx, wx = roots_legendre(400)
    gy, wy = roots_legendre(60)
    cx, cy = 7 * sx * gx, 7 * sy * gy
    weights = (7 * sx * wx * norm.pdf(cx, 0, sx))[:, None] * (7 * sy * wy * norm.pdf(cy, 0, sy))[None, :]
    d = np.hypot(x[0] - cx[:, None], x[1] - cy[None, :])
    return np.array([np.sum(weights * norm.pdf(r, d, sigma)) for r in rs])


@pytest.mark.parametrize("angle_deg", [0.0, 45.0, 90.0])
def test_directional_spread_follows_the_exact_marginal_likelihood(angle_deg):
    neighbour_cov = np.diag([0.8, 0.02])  # long axis along x
    sigma = 0.1
    a = np.radians(angle_deg)
    x = 12.0 * np.array([np.cos(a), np.sin(a)])
    rs = np.linspace(9.5, 14.5, 201)
    dr = rs[1] - rs[0]
    n = rs.size
    exact = _marginal_range_density(x, neighbour_cov, sigma, rs)
    point = np.repeat(x[None], n, 0), np.repeat(1e-9 * np.eye(2)[None], n, 0), np.zeros((n, 2)), rs
    directional = np.exp(compact_update(*point, np.full(n, sigma**2), 3, ncov=np.repeat(neighbour_cov[None], n, 0))[2])
    bound = np.exp(compact_update(*point, np.full(n, sigma**2 + max_eig2(neighbour_cov[None])[0]), 3)[2])
    l1_dir = np.abs(directional - exact).sum() * dr
    l1_bound = np.abs(bound - exact).sum() * dr
    assert l1_dir <= DIRECTIONAL_L1_MAX, l1_dir
    if angle_deg == 0.0:
        assert l1_dir == pytest.approx(l1_bound, abs=1e-9)  # along the long axis both rules are the same
    else:
        assert l1_bound >= DIRECTIONAL_GAIN_MIN * l1_dir, (l1_bound, l1_dir)


def test_directional_rings_keep_the_neighbour_covariance_and_the_bound():
    params = PARAMS.replace(directional_spread=True)
    m = Mixture(np.log([0.6, 0.4]), np.array([[1.0, 2.0], [3.0, 4.0]]),
                np.array([[[0.5, 0.1], [0.1, 0.05]], [[0.02, 0.0], [0.0, 0.3]]]))  # fmt: skip
    rings = ring_messages(m, 10.0, 0.1, params, 0.2, 1.0)
    np.testing.assert_allclose(rings.var, [0.01, 0.01, 0.01 + 1.0, 0.01 + 1.0])  # the range's own variance
    np.testing.assert_array_equal(rings.ncov, np.concatenate([m.cov, m.cov]))
    plain = ring_messages(m, 10.0, 0.1, PARAMS, 0.2, 1.0)
    assert plain.ncov is None
    # the bound of the variance in any direction, var + lambda_max(P), is the bound rule's ring variance
    np.testing.assert_allclose(rings.var_bound, rings.var + np.tile(max_eig2(m.cov), 2))
    np.testing.assert_allclose(rings.var_bound, plain.var)
    np.testing.assert_array_equal(plain.var_bound, plain.var)
    # an arc of a directional ring is the bound-free arc convolved with the neighbour's position
    arcs = first_ring(rings, (-50.0, -50.0, 50.0, 50.0), params)
    bare = first_ring(Rings(rings.logw, rings.centre, rings.radius, rings.var), (-50.0, -50.0, 50.0, 50.0), params)
    per_ring = len(arcs) // len(rings)
    np.testing.assert_allclose(arcs.cov - bare.cov, np.repeat(rings.ncov, per_ring, axis=0), atol=1e-12)
