"""The estimator of the fixed-point C core (pfx_mixture.c, pfx_range.c, pfx_node.c)
against its float64 twin (peerfix.reference), through cffi.

Every comparison feeds both engines the same quantised inputs (the Q10 /
Q20 / Q16 values the core holds, converted back to float64), so that what
is measured is the core's arithmetic, not the input rounding.

Outside references: the Runnalls rows of check-values.md (Runnalls, "Kullback-
Leibler approach to Gaussian mixture reduction", IEEE Trans. AES 43(3),
2007); exact rational arithmetic (fractions.Fraction, Python integers) for
the wide multiply, the Mahalanobis gate and the direction table; numpy's
eigvalsh for the largest eigenvalue.
"""

from __future__ import annotations

import math
import subprocess
import sys
from fractions import Fraction
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from peerfix.core import Status
from peerfix.core._pfx import ffi, lib
from peerfix.reference import mixture as M
from peerfix.reference import node as N
from peerfix.reference import ranging as R
from peerfix.reference.mixture import Mixture
from peerfix.reference.params import EstimatorParams, robust_preset

ROOT = Path(__file__).resolve().parents[2]
LN2 = math.log(2.0)

# --- tolerances (C against the float twin on the same quantised inputs) -------
# Means: the result is rounded once to Q10 (0.49 mm); 0.6 mm leaves 0.1 mm for arithmetic.
MEAN_M = 0.0006
# Gaussian product covariance: one rounding to Q20 after Q30 intermediates (measured 0.53 LSB).
PRODUCT_COV_LSB = 2
# Log weights of single products, nats: Q16 log2 (1.06e-5 nats per LSB), log2 0.7 LSB + a few roundings.
PRODUCT_LOGW = 1e-4
# Compact (IEKF) covariance, relative to its largest entry: Q30 intermediates, unit vectors to ~2^-29
# (Newton reciprocal square root), Q20 result; P - ph g^T cancels in the range direction (measured 1.4e-4).
COMPACT_COV_REL = 2e-4
# Log weights that hold a large Mahalanobis term q: the Q20 rounding of the inputs moves q by a
# relative ~1e-5 (measured 1.25e-5); absolute part as for products.
LOGW_REL = 3e-5
# Arc covariances (first ring, broad products): the tangential std is rounded to Q20 before squaring.
ARC_COV_LSB = 4
ARC_COV_REL = 2e-5
# Runnalls / gate merge: merged means are stored in Q10 and re-enter later merges (the spread
# terms a_i a_j d d^T), so a merged covariance carries ~ |d| * 1 mm with |d| <~ sqrt(|P|):
# tolerance 1 mm * sqrt(max |P|) (+ 4 LSB); means 2 mm.
MERGE_MEAN_M = 0.002
MERGE_COV_SQRT_M = 0.001
# A Runnalls step counts as "well separated" when the best cost beats the runner-up by this much (relative).
RUNNALLS_SEPARATION = 1e-3
# Whole update, 3-6 anchors (+ 0-3 agents), position: measured median 0.65 mm, p99 1.7 mm, worst 2.7 mm
# over 1000 cases; 1 cm is the product target (tolerances.POSITION_MEDIAN_M).
UPDATE_POSITION_M = 0.01
UPDATE_MEDIAN_M = 0.002

OK = Status.OK
STATUSES = {int(s) for s in Status}
PARAMS = EstimatorParams()


# --- conversion helpers -------------------------------------------------------


def rq(v: float, frac: int) -> int:
    """Round to nearest, ties up (the core's rule), saturated to int32."""
    return max(-(1 << 31), min((1 << 31) - 1, math.floor(v * (1 << frac) + 0.5)))


def comp_set(c, logw: float, mean, cov) -> None:
    c.log2w = rq(logw / LN2, 16)
    c.x, c.y = rq(mean[0], 10), rq(mean[1], 10)
    c.pxx, c.pxy, c.pyy = rq(cov[0][0], 20), rq(cov[0][1], 20), rq(cov[1][1], 20)


def to_c(m: Mixture, arr=None):
    if arr is None:
        arr = ffi.new("pfx_component_t[]", max(len(m), 1))
    for k in range(len(m)):
        comp_set(arr[k], m.logw[k], m.mean[k], m.cov[k])
    return arr


def from_c(arr, n: int) -> Mixture:
    if n == 0:
        return Mixture.empty()
    cs = [arr[k] for k in range(n)]
    return Mixture(
        np.array([c.log2w for c in cs], float) * (LN2 / 65536),
        np.array([[c.x, c.y] for c in cs], float) / 1024,
        np.array([[[c.pxx, c.pxy], [c.pxy, c.pyy]] for c in cs], float) / 2**20,
    )


def quantised(m: Mixture) -> Mixture:
    return from_c(to_c(m), len(m))


def belief_c(m: Mixture):
    b = ffi.new("pfx_belief_t *")
    b.count = len(m)
    to_c(m, b.comp)
    return b


def params_c(p: EstimatorParams = PARAMS, blocked_weight: float = 0.0, blocked_bias: float = 1.0,
             max_range: float = 1000.0):  # fmt: skip
    c = ffi.new("pfx_params_t *")
    lib.pfx_params_default(c)
    c.max_components, c.working_cap, c.candidate_cap = p.max_components, p.working_cap, p.candidate_cap
    c.broad_max_arcs, c.iekf_iterations = p.broad_max_arcs, p.iekf_iterations
    c.ring_arc_spacing = rq(p.ring_arc_spacing_m, 10)
    c.arc_tangential_ratio = rq(p.arc_tangential_ratio, 30)
    c.broad_window_sigmas = rq(p.broad_window_sigmas, 16)
    c.broad_sagitta_ratio = rq(p.broad_sagitta_ratio, 16)
    c.merge_gate = rq(p.merge_gate_sigma2, 16)
    c.prune_log2_ratio = rq(p.prune_log_ratio / LN2, 16)
    c.broadcast_inflation = rq(p.broadcast_inflation, 16)
    c.censor_spread = rq(p.censor_spread_m, 10)
    c.mode_gate = rq(p.mode_gate_sigma2, 16)
    c.mode_min_weight = rq(p.mode_min_weight, 30)
    c.blocked_weight = rq(blocked_weight, 30)
    c.blocked_bias = rq(blocked_bias, 10)
    c.max_range = rq(max_range, 10)
    c.product_gate = rq(p.product_gate_sigma2, 16)
    c.directional_spread = int(p.directional_spread)
    assert lib.pfx_params_check(c) == OK
    return c


def ring_c(centre, radius: float, var: float, logw: float = 0.0, ncov=None):
    """A pfx_ring_t and its float image (centre, radius, var); ncov: the centre's
    covariance of a directional ring (its float image is in ring_ncov(g))."""
    g = ffi.new("pfx_ring_t *")
    g.log2w = rq(logw / LN2, 16)
    g.cx, g.cy = rq(centre[0], 10), rq(centre[1], 10)
    g.radius, g.var = rq(radius, 10), rq(var, 20)
    if ncov is not None:
        n = quantised(Mixture.single(np.zeros(2), ncov))
        c = to_c(n)
        g.nxx, g.nxy, g.nyy = c[0].pxx, c[0].pxy, c[0].pyy
    g.var_bound = g.var + (lib.pfx_mixture_max_eig(c) if ncov is not None else 0)
    return g, np.array([g.cx, g.cy]) / 1024, g.radius / 1024, g.var / 2**20


def ring_ncov(g) -> np.ndarray:
    """The float image of a ring's centre covariance N."""
    return np.array([[g.nxx, g.nxy], [g.nxy, g.nyy]]) / 2**20


def random_cov(rng, scale: float, floor: float = 0.05) -> np.ndarray:
    a = rng.normal(size=(2, 2))
    return (a @ a.T + floor * np.eye(2)) * scale


def assert_spd(m: Mixture) -> None:
    """Covariances as the core stores them: symmetric by construction, diagonals > 0, det > 0."""
    for p in m.cov:
        raw = np.rint(p * 2**20).astype(np.int64)
        assert raw[0, 0] > 0 and raw[1, 1] > 0
        assert int(raw[0, 0]) * int(raw[1, 1]) - int(raw[0, 1]) ** 2 > 0


def node_bytes(node) -> bytes:
    return bytes(ffi.buffer(node))


# --- wide arithmetic against exact integers --------------------------------------

# Full int64, int32-sized (the two- and one-multiply paths) and the edges.
I64 = st.one_of(st.integers(-(1 << 63), (1 << 63) - 1), st.integers(-(1 << 31), (1 << 31) - 1),
                st.sampled_from([-(1 << 63), -(1 << 31) - 1, -(1 << 31), -1, 0, 1, (1 << 31) - 1, 1 << 31,
                                 (1 << 63) - 1]))  # fmt: skip


def exact_mul64(a: int, b: int, s: int) -> int:
    v = Fraction(a * b, 1 << s)
    return max(-(1 << 63), min((1 << 63) - 1, math.floor(v + Fraction(1, 2))))


@settings(max_examples=4000, deadline=None)
@given(I64, I64, st.integers(0, 130))
def test_mul64_is_the_exactly_rounded_saturated_product(a, b, s):
    assert lib.pfx_mixture_mul64(a, b, s) == exact_mul64(a, b, s)


@settings(max_examples=500, deadline=None)
@given(*[st.integers(0, (1 << 64) - 1)] * 4)
def test_cmp_products_is_exact(a, b, c, d):
    want = (a * b > c * d) - (a * b < c * d)
    assert lib.pfx_mixture_cmp_products(a, b, c, d) == want


def test_direction_table_is_exactly_rounded_and_up_to_date():
    # Generated block matches its generator (which uses 60-digit decimals: exact rounding).
    out = subprocess.run([sys.executable, str(ROOT / "tools" / "gen_direction_table.py"), "--check"],
                         capture_output=True, text=True)  # fmt: skip
    assert out.returncode == 0, out.stderr
    ux, uy = ffi.new("int32_t *"), ffi.new("int32_t *")
    for k in range(256):
        lib.pfx_range_direction(k, ux, uy)
        ang = 2.0 * math.pi * k / 256
        # float64 cos/sin are within 1e-16 of exact: the Q30 rounding error is at most 0.5 LSB.
        assert abs(ux[0] - math.cos(ang) * 2**30) <= 0.5 + 1e-6
        assert abs(uy[0] - math.sin(ang) * 2**30) <= 0.5 + 1e-6
        assert (ux[0], uy[0]) == (round(R.DIRECTIONS[k, 0] * 2**30), round(R.DIRECTIONS[k, 1] * 2**30))


def test_largest_eigenvalue_within_one_lsb():
    rng = np.random.default_rng(1)
    c = ffi.new("pfx_component_t *")
    for _ in range(3000):
        p = random_cov(rng, 10.0 ** rng.uniform(-4, 2.5), floor=0.0)
        comp_set(c, 0.0, (0, 0), p)
        q = np.array([[c.pxx, c.pxy], [c.pxy, c.pyy]], float)
        want = min(np.linalg.eigvalsh(q)[-1], 2**31 - 1)  # numpy.linalg reference, saturated to Q20
        assert abs(lib.pfx_mixture_max_eig(c) - want) <= 1.0


# --- mixture algebra ------------------------------------------------------------------


def test_normalise_matches_log_sum_exp():
    rng = np.random.default_rng(2)
    for _ in range(300):
        n = int(rng.integers(1, 65))
        m = quantised(Mixture(rng.normal(0, 6, n), rng.uniform(0, 9, (n, 2)), np.array([np.eye(2)] * n)))
        arr = to_c(m)
        assert lib.pfx_mixture_normalise(arr, n) == OK
        got = from_c(arr, n)
        np.testing.assert_allclose(got.logw, m.normalised().logw, atol=PRODUCT_LOGW)


def test_gaussian_product_matches_twin():
    rng = np.random.default_rng(3)
    out = ffi.new("pfx_component_t *")
    for _ in range(2000):
        m1 = rng.uniform(-50, 50, 2)
        a = quantised(Mixture.single(m1, random_cov(rng, rng.uniform(0.001, 3))))
        b = quantised(Mixture.single(m1 + rng.normal(0, 2, 2), random_cov(rng, rng.uniform(0.001, 3))))
        assert lib.pfx_mixture_product(to_c(a), to_c(b), out) == OK
        mu, p, logz = M.gaussian_product(a.mean, a.cov, b.mean, b.cov)
        got = from_c(out, 1)
        assert_spd(got)
        np.testing.assert_allclose(got.mean[0], mu[0], atol=MEAN_M)
        np.testing.assert_allclose(got.cov[0] * 2**20, p[0] * 2**20, atol=PRODUCT_COV_LSB)
        assert abs(got.logw[0] - logz[0]) <= PRODUCT_LOGW


def test_product_of_singular_sum_is_degenerate():
    a = to_c(Mixture.single((1.0, 2.0), np.zeros((2, 2))))
    out = ffi.new("pfx_component_t *")
    assert lib.pfx_mixture_product(a, a, out) == Status.ERR_DEGENERATE


@pytest.mark.parametrize("row", [
    # check-values.md, "Gaussian mixture reduction" (Runnalls 2007): w, mu, P, merged mu, merged P
    (0.5, 0.5, (-1.0, 0.0), (1.0, 0.0), np.eye(2), np.eye(2), (0.0, 0.0), np.diag([2.0, 1.0])),
    (0.3, 0.7, (0.0, 0.0), (2.0, 0.0), np.eye(2), 2 * np.eye(2), (1.4, 0.0), np.diag([2.54, 1.7])),
], ids=["equal-pair", "unequal-pair"])  # fmt: skip
def test_merge_check_values(row):
    w_i, w_j, mu_i, mu_j, p_i, p_j, mu_ref, p_ref = row
    a = to_c(Mixture(np.log([w_i]), np.array([mu_i]), p_i[None]))
    b = to_c(Mixture(np.log([w_j]), np.array([mu_j]), p_j[None]))
    out = ffi.new("pfx_component_t *")
    assert lib.pfx_mixture_merge(a, b, out) == OK
    got = from_c(out, 1)
    np.testing.assert_allclose(got.mean[0], mu_ref, atol=MEAN_M)  # Runnalls 2007 via check-values.md
    np.testing.assert_allclose(got.cov[0], p_ref, atol=2 / 2**20)  # Runnalls 2007 via check-values.md
    assert abs(got.logw[0]) <= PRODUCT_LOGW  # w_i + w_j = 1


def test_merge_matches_twin():
    rng = np.random.default_rng(4)
    out = ffi.new("pfx_component_t *")
    for _ in range(1000):
        m = quantised(Mixture(rng.normal(0, 2, 2), rng.uniform(0, 30, (2, 2)),
                              np.array([random_cov(rng, rng.uniform(0.01, 3)) for _ in range(2)])))  # fmt: skip
        arr = to_c(m)
        assert lib.pfx_mixture_merge(arr + 0, arr + 1, out) == OK
        w = np.exp(m.logw)
        wm, mu, p = M.merge_moments(w[0], m.mean[0], m.cov[0], w[1], m.mean[1], m.cov[1])
        got = from_c(out, 1)
        assert_spd(got)
        np.testing.assert_allclose(got.mean[0], mu, atol=MEAN_M)
        np.testing.assert_allclose(got.cov[0], p, atol=4 / 2**20 + 1e-6 * np.abs(p).max())
        assert abs(got.logw[0] - np.log(wm)) <= PRODUCT_LOGW


def test_moments_match_twin():
    rng = np.random.default_rng(5)
    out = ffi.new("pfx_component_t *")
    for _ in range(500):
        n = int(rng.integers(1, 20))
        m = quantised(Mixture(rng.normal(0, 2, n), rng.uniform(0, 30, (n, 2)),
                              np.array([random_cov(rng, rng.uniform(0.01, 3)) for _ in range(n)])))  # fmt: skip
        assert lib.pfx_mixture_moments(to_c(m), n, out) == OK
        mean, cov = M.moments(m)
        got = from_c(out, 1)
        np.testing.assert_allclose(got.mean[0], mean, atol=MEAN_M)
        np.testing.assert_allclose(got.cov[0], cov, atol=4 / 2**20 + 1e-6 * np.abs(cov).max())
        assert abs(got.logw[0] - M.logsumexp(m.logw)) <= PRODUCT_LOGW


def test_prune_and_stream_equal_keep_heaviest_then_prune():
    rng = np.random.default_rng(6)
    buf = ffi.new("pfx_component_t[64]")
    count = ffi.new("uint32_t *")
    for _ in range(400):
        n, cap = int(rng.integers(1, 120)), int(rng.integers(1, 65))
        # Weights on a coarse grid so that ties are common (the tie rule is what is tested).
        logw = rng.integers(-20, 1, n) * 0.5
        m = quantised(Mixture(logw, rng.uniform(0, 9, (n, 2)), np.array([np.eye(2)] * n)))
        arr = to_c(m)
        count[0] = 0
        for k in range(n):
            assert lib.pfx_mixture_stream_push(buf, count, cap, arr + k) == OK
        want = M.keep_heaviest(m, cap)
        got = from_c(buf, count[0])
        np.testing.assert_array_equal(got.mean, want.mean)  # same components, same (arrival) order
        np.testing.assert_array_equal(got.logw, want.logw)
        ratio = rq(PARAMS.prune_log_ratio / LN2, 16)
        assert lib.pfx_mixture_prune(buf, count, ratio) == OK
        pruned = M.prune(want, ratio / 65536 * LN2)
        np.testing.assert_array_equal(from_c(buf, count[0]).mean, pruned.mean)


def exact_within_gate(a, b, gate_q16: int) -> bool:
    """d^T (Pa + Pb)^-1 d <= gate in exact rationals (False when singular)."""
    sa, sb, sc = a.pxx + b.pxx, a.pxy + b.pxy, a.pyy + b.pyy
    det = sa * sc - sb * sb
    if det <= 0:
        return False
    dx, dy = Fraction(b.x - a.x, 1024), Fraction(b.y - a.y, 1024)
    q = (sc * dx * dx - 2 * sb * dx * dy + sa * dy * dy) * (1 << 20) / det
    return q <= Fraction(gate_q16, 1 << 16)


@settings(max_examples=1500, deadline=None)
@given(st.integers(0, 2**31 - 1), st.integers(0, 2**31 - 1), st.floats(-1, 1), st.integers(0, 2**31 - 1),
       st.integers(0, 2**31 - 1), st.floats(-1, 1), st.integers(-3000, 3000), st.integers(-3000, 3000),
       st.integers(0, 20 << 16))  # fmt: skip
def test_within_gate_is_exact(axx, ayy, ar, bxx, byy, br, dx, dy, gate):
    a, b = ffi.new("pfx_component_t *"), ffi.new("pfx_component_t *")
    a.pxx, a.pyy, a.pxy = axx >> (axx % 23), ayy >> (ayy % 23), 0
    a.pxy = int(ar * math.isqrt(a.pxx * a.pyy))
    b.pxx, b.pyy = bxx >> (bxx % 23), byy >> (byy % 23)
    b.pxy = int(br * math.isqrt(b.pxx * b.pyy))
    b.x, b.y = dx, dy
    assert lib.pfx_mixture_within_gate(a, b, gate) == exact_within_gate(a, b, gate)


def runnalls_gaps(m: Mixture, cap: int) -> float:
    """Smallest relative gap between the best and the runner-up cost over the twin's greedy steps."""
    n = len(m)
    w = np.exp(m.logw - m.logw.max())
    w = w / w.sum()
    mu, p, alive = m.mean.copy(), m.cov.copy(), np.ones(n, bool)
    gap = np.inf
    for _ in range(n - cap):
        idx = np.flatnonzero(alive)
        ii, jj = np.triu_indices(len(idx), 1)
        i_, j_ = idx[ii], idx[jj]
        _, _, p_ij = M.merge_moments(w[i_], mu[i_], p[i_], w[j_], mu[j_], p[j_])
        c = M.runnalls_cost(w[i_], p[i_], w[j_], p[j_], p_ij)
        o = np.sort(c)
        if len(o) > 1:
            gap = min(gap, (o[1] - o[0]) / max(abs(o[1]), 1e-12))
        k = int(np.argmin(c))
        i, j = i_[k], j_[k]
        w[i], mu[i], p[i] = M.merge_moments(w[i], mu[i], p[i], w[j], mu[j], p[j])
        alive[j] = False
    return gap


def test_runnalls_matches_twin_on_well_separated_costs():
    rng = np.random.default_rng(7)
    s = ffi.new("pfx_mixture_scratch_t *")
    n_ptr = ffi.new("uint32_t *")
    compared = 0
    for _ in range(150):
        n = int(rng.integers(3, 24))
        cap = int(rng.integers(1, n))
        m = quantised(Mixture(rng.normal(0, 1.5, n), rng.uniform(0, 20, (n, 2)),
                              np.array([random_cov(rng, rng.uniform(0.01, 1)) for _ in range(n)])).normalised())  # fmt: skip
        if runnalls_gaps(m, cap) < RUNNALLS_SEPARATION:
            continue
        compared += 1
        arr = to_c(m)
        n_ptr[0] = n
        assert lib.pfx_mixture_runnalls(arr, n_ptr, cap, s) == OK
        want, got = M.runnalls_reduce(m, cap), from_c(arr, n_ptr[0])
        assert len(got) == len(want) == cap
        assert_spd(got)
        np.testing.assert_allclose(got.mean, want.mean, atol=MERGE_MEAN_M)
        np.testing.assert_allclose(got.cov, want.cov, atol=4 / 2**20 + MERGE_COV_SQRT_M * np.sqrt(np.abs(want.cov).max()))
        np.testing.assert_allclose(got.logw, want.logw, atol=PRODUCT_LOGW)
    assert compared >= 100  # the separation filter must leave most cases in


def test_runnalls_ties_go_to_the_first_pair():
    # Four identical components: every cost is equal; the first pair (0, 1) merges, then (0, 2).
    m = quantised(Mixture(np.zeros(4), np.array([[0, 0], [0, 0], [0, 0], [5, 5]], float), np.array([np.eye(2)] * 4)))
    arr = to_c(m)
    n_ptr = ffi.new("uint32_t *", 4)
    assert lib.pfx_mixture_runnalls(arr, n_ptr, 3, ffi.new("pfx_mixture_scratch_t *")) == OK
    got = from_c(arr, n_ptr[0])
    np.testing.assert_allclose(got.mean, [[0, 0], [0, 0], [5, 5]])
    np.testing.assert_allclose(np.exp(got.logw), [0.5, 0.25, 0.25], atol=1e-4)


def test_gate_merge_matches_twin():
    rng = np.random.default_rng(8)
    s = ffi.new("pfx_mixture_scratch_t *")
    n_ptr = ffi.new("uint32_t *")
    for t in range(300):
        n = int(rng.integers(2, 64))
        m = quantised(Mixture(rng.normal(0, 1.5, n), rng.uniform(0, 6, (n, 2)),
                              np.array([random_cov(rng, rng.uniform(0.01, 1)) for _ in range(n)])))  # fmt: skip
        gate = [1.0, 4.0][t % 2]
        arr = to_c(m)
        n_ptr[0] = n
        assert lib.pfx_mixture_gate_merge(arr, n_ptr, rq(gate, 16), s) == OK
        want, got = M.gate_merge(m, gate), from_c(arr, n_ptr[0])
        assert len(got) == len(want)
        assert_spd(got)
        np.testing.assert_allclose(got.mean, want.mean, atol=MEAN_M)
        np.testing.assert_allclose(got.cov, want.cov, atol=4 / 2**20 + 1e-6 * np.abs(want.cov).max())
        np.testing.assert_allclose(got.logw, want.logw, atol=PRODUCT_LOGW)


def test_point_estimate_matches_twin():
    rng = np.random.default_rng(9)
    est = ffi.new("pfx_estimate_t *")
    for _ in range(800):
        n = int(rng.integers(1, 9))
        m = quantised(Mixture(rng.normal(0, 1.5, n), rng.uniform(0, 12, (n, 2)),
                              np.array([random_cov(rng, rng.uniform(0.01, 1)) for _ in range(n)])).normalised())  # fmt: skip
        assert lib.pfx_mixture_point_estimate(to_c(m), n, rq(9.0, 16), rq(0.05, 30), est) == OK
        want = M.point_estimate(m, 9.0, 0.05)
        if abs(want.mode_weight - 0.05) < 1e-4:
            continue  # a mode right at the min_weight line: either side is right
        assert est.mode_count == want.mode_count
        assert est.components == n
        np.testing.assert_allclose([est.x / 1024, est.y / 1024], want.mean, atol=MEAN_M)
        np.testing.assert_allclose(np.array([[est.pxx, est.pxy], [est.pxy, est.pyy]]) / 2**20, want.cov,
                                   atol=4 / 2**20 + 1e-6 * np.abs(want.cov).max())  # fmt: skip
        assert abs(est.mode_weight / 2**30 - want.mode_weight) <= 1e-5


# --- range update ------------------------------------------------------------------------


def test_rings_match_twin_plain_and_robust():
    rng = np.random.default_rng(10)
    rings = ffi.new("pfx_ring_t[16]")
    n_ptr = ffi.new("uint32_t *")
    for blocked, directional in [(0.0, False), (0.1, False), (0.3, False), (0.0, True), (0.3, True)]:
        params = PARAMS.replace(directional_spread=directional)
        pc = params_c(params, blocked_weight=blocked, blocked_bias=1.5)
        for _ in range(100):
            k = int(rng.integers(1, 9))
            m = quantised(Mixture(rng.normal(0, 1, k), rng.uniform(0, 30, (k, 2)),
                                  np.array([random_cov(rng, rng.uniform(0.001, 2)) for _ in range(k)])))  # fmt: skip
            r, s = rq(rng.uniform(0, 30), 10), rq(rng.uniform(0.05, 0.5), 10)
            assert lib.pfx_range_rings(belief_c(m), r, s, pc, rings, n_ptr) == OK
            want = R.ring_messages(m, r / 1024, s / 1024, params, blocked, 1.5 if blocked else 0.0)
            assert n_ptr[0] == len(want)
            for q in range(len(want)):
                g = rings[q]
                assert abs(g.log2w / 65536 * LN2 - want.logw[q]) <= PRODUCT_LOGW
                assert (g.cx / 1024, g.cy / 1024) == tuple(want.centre[q])
                assert g.radius / 1024 == pytest.approx(want.radius[q], abs=1e-12)
                assert abs(g.var - want.var[q] * 2**20) <= 1.5  # sigma^2 exact + lambda_max within 1 LSB
                assert abs(g.var_bound - want.var_bound[q] * 2**20) <= 1.5  # sigma^2 exact + lambda_max within 1 LSB
                want_ncov = np.zeros((2, 2)) if want.ncov is None else want.ncov[q]
                np.testing.assert_array_equal(ring_ncov(g), want_ncov)  # the component's covariance, exactly (or 0)


def test_stride_matches_twin():
    rng = np.random.default_rng(11)
    for _ in range(3000):
        r = rq(rng.choice([0.0, rng.uniform(0, 2), rng.uniform(0, 60), rng.uniform(0, 3000)]), 10)
        spacing = rq(rng.uniform(0.05, 4), 10)
        cap = int(rng.choice([1, 3, 16, 64, 256]))
        assert lib.pfx_range_stride(r, spacing, cap) == R.stride_for(r / 1024, spacing / 1024, cap)


@pytest.mark.parametrize("directional", [False, True])
def test_first_ring_matches_twin(directional):
    rng = np.random.default_rng(12)
    bounds = (0.0, 0.0, 30.0, 20.0)
    bq = ffi.new("pfx_len_q10_t[4]", [rq(b, 10) for b in bounds])
    out = ffi.new("pfx_component_t[64]")
    n_ptr = ffi.new("uint32_t *")
    rings = ffi.new("pfx_ring_t[16]")
    pc = params_c()
    for _ in range(400):
        nr = int(rng.integers(1, 6))
        for k in range(nr):
            ncov = random_cov(rng, rng.uniform(0.001, 1.0), floor=0.01) if directional else None
            g, *_ = ring_c(rng.uniform(-5, 35, 2), rng.choice([0.0, rng.uniform(0, 25)]), rng.uniform(0.005, 0.5),
                           rng.normal(0, 1), ncov=ncov)  # fmt: skip
            rings[k] = g[0]
        fr = R.Rings(np.array([rings[k].log2w * LN2 / 65536 for k in range(nr)]),
                     np.array([[rings[k].cx / 1024, rings[k].cy / 1024] for k in range(nr)]),
                     np.array([rings[k].radius / 1024 for k in range(nr)]),
                     np.array([rings[k].var / 2**20 for k in range(nr)]),
                     np.array([ring_ncov(rings[k]) for k in range(nr)]))  # fmt: skip
        assert lib.pfx_range_first_ring(rings, nr, bq, pc, out, n_ptr) == OK
        want, got = R.first_ring(fr, bounds, PARAMS), from_c(out, n_ptr[0])
        assert len(got) == len(want)  # same arcs kept (same directions, same box drops)
        if len(want):
            assert_spd(got)
            np.testing.assert_allclose(got.mean, want.mean, atol=MEAN_M)
            np.testing.assert_allclose(got.cov, want.cov, atol=(ARC_COV_LSB + ARC_COV_REL * np.abs(want.cov).max() * 2**20) / 2**20)
            np.testing.assert_allclose(got.logw, want.logw, atol=PRODUCT_LOGW)


@pytest.mark.parametrize("directional", [False, True])
def test_is_broad_and_compact_update_match_twin(directional):
    rng = np.random.default_rng(13)
    pc = params_c()
    out = ffi.new("pfx_component_t *")
    broad = compact = 0
    for _ in range(3000):
        c = quantised(Mixture.single(rng.uniform(0, 40, 2), random_cov(rng, rng.uniform(0.001, 2))))
        ncov = random_cov(rng, rng.uniform(0.001, 1.0), floor=0.01) if directional else None
        g, cen, rad, var = ring_c(rng.uniform(0, 40, 2), rng.uniform(0, 25), rng.uniform(0.005, 0.5), ncov=ncov)
        nq = ring_ncov(g)[None]
        bound = var + R.max_eig2(nq)  # the broad test's bound of the ring's variance
        want_broad = bool(R.is_broad(c.mean, c.cov, cen[None], np.array([rad]), bound, PARAMS)[0])
        assert bool(lib.pfx_range_is_broad(to_c(c), g, pc)) == want_broad
        if want_broad:
            broad += 1
            continue
        compact += 1
        assert lib.pfx_range_compact(to_c(c), g, PARAMS.iekf_iterations, out) == OK
        x, p, ll = R.compact_update(c.mean, c.cov, cen[None], np.array([rad]), np.array([var]), PARAMS.iekf_iterations,
                                    ncov=nq if directional else None)  # fmt: skip
        got = from_c(out, 1)
        assert_spd(got)
        np.testing.assert_allclose(got.mean[0], x[0], atol=MEAN_M)
        np.testing.assert_allclose(got.cov[0], p[0], atol=COMPACT_COV_REL * np.abs(p[0]).max())
        assert abs(got.logw[0] - ll[0]) <= PRODUCT_LOGW + LOGW_REL * abs(ll[0])
    assert broad > (100 if directional else 300) and compact > 300  # both branches exercised (a wider bound: fewer broad)


@pytest.mark.parametrize("directional", [False, True])
def test_broad_update_matches_twin(directional):
    rng = np.random.default_rng(14)
    pc = params_c()
    out = ffi.new("pfx_component_t[16]")
    n_ptr = ffi.new("uint32_t *")
    arcs = empty = 0
    for _ in range(2000):
        c = quantised(Mixture.single(rng.uniform(0, 40, 2), random_cov(rng, rng.uniform(0.01, 20))))
        ncov = random_cov(rng, rng.uniform(0.001, 1.0), floor=0.01) if directional else None
        g, cen, rad, var = ring_c(c.mean[0] + rng.normal(0, 15, 2), rng.choice([0.0, rng.uniform(0, 25)]),
                                  rng.uniform(0.005, 0.5), ncov=ncov)  # fmt: skip
        assert lib.pfx_range_broad(to_c(c), g, pc, out, n_ptr) == OK
        want = R.broad_update(c.mean[0], c.cov[0], cen, rad, var, PARAMS, ring_ncov(g))
        got = from_c(out, n_ptr[0])
        assert len(got) == len(want)  # same window, same stride, same directions
        if not len(want):
            empty += 1
            continue
        arcs += len(want)
        assert_spd(got)
        np.testing.assert_allclose(got.mean, want.mean, atol=MEAN_M)
        np.testing.assert_allclose(got.cov, want.cov, atol=(ARC_COV_LSB + ARC_COV_REL * np.abs(want.cov).max() * 2**20) / 2**20)
        assert np.all(np.abs(got.logw - want.logw) <= PRODUCT_LOGW + LOGW_REL * np.abs(want.logw))
    assert empty > 50 and arcs > 5000



def test_defaults_and_step_tolerance_match_twin():
    c = ffi.new("pfx_params_t *")
    lib.pfx_params_default(c)
    assert c.product_gate == rq(PARAMS.product_gate_sigma2, 16)
    assert lib.PFX_IEKF_STEP_TOL_Q20 == R.IEKF_STEP_TOL_M * 2**20  # exact: a power of two


def multiply_c(work: Mixture, rings, nr: int, pc):
    """pfx_range_multiply of a quantised work mixture with nr C rings: the streamed candidates."""
    cand = ffi.new("pfx_component_t[64]")
    n = ffi.new("uint32_t *")
    scratch = ffi.new("pfx_range_scratch_t *")
    assert lib.pfx_range_multiply(to_c(work), len(work), rings, nr, pc, cand, n, scratch) == OK
    return cand, n


def test_multiply_gates_pairs_far_off_the_ring():
    # One compact pair per call (no earlier product: nothing is left out).
    # Beyond the ring gate (the ring farther than sqrt(gate) upper-bound
    # sigmas from the mean) no product is formed; far off the ring (first
    # squared normalised innovation beyond the gate) the product is the
    # one-iteration update bit for bit; near it, the twin's relinearised update.
    rng = np.random.default_rng(21)
    pc = params_c()
    one_step = ffi.new("pfx_component_t *")
    far = near = dropped = 0
    for _ in range(800):
        c = quantised(Mixture.single(rng.uniform(0, 40, 2), random_cov(rng, rng.uniform(0.001, 0.3))))
        centre = rng.uniform(0, 40, 2)
        rho = float(np.linalg.norm(c.mean[0] - centre))
        radius = max(rho + rng.choice([-1, 1]) * rng.uniform(0, 4), 0.0)
        g, cen, rad, var = ring_c(centre, radius, rng.uniform(0.005, 0.1))
        if R.is_broad(c.mean, c.cov, cen[None], np.array([rad]), np.array([var]), PARAMS)[0]:
            continue
        h = (c.mean[0] - cen) / np.linalg.norm(c.mean[0] - cen)
        nis = (rad - np.linalg.norm(c.mean[0] - cen)) ** 2 / (h @ c.cov[0] @ h + var)
        cand, n = multiply_c(c, g, 1, pc)
        lam = float(np.linalg.eigvalsh(c.cov[0])[-1])
        reach2 = (rad - np.linalg.norm(c.mean[0] - cen)) ** 2 / (var + lam)  # the ring gate's statistic
        if reach2 > 1.01 * PARAMS.product_gate_sigma2:
            dropped += 1
            assert n[0] == 0
            assert not R.ring_gate(c.mean, c.cov, cen[None], np.array([rad]), np.array([var]),
                                   PARAMS.product_gate_sigma2)[0]  # fmt: skip
        elif reach2 > 0.99 * PARAMS.product_gate_sigma2:
            continue  # at the ring gate: rounding decides
        elif nis > 1.01 * PARAMS.product_gate_sigma2:
            far += 1
            assert lib.pfx_range_compact(to_c(c), g, 1, one_step) == OK
            assert n[0] == 1 and bytes(ffi.buffer(cand, 24)) == bytes(ffi.buffer(one_step))
        elif nis < 0.99 * PARAMS.product_gate_sigma2:
            near += 1
            x, p, ll = R.compact_update(c.mean, c.cov, cen[None], np.array([rad]), np.array([var]),
                                        PARAMS.iekf_iterations, PARAMS.product_gate_sigma2, R.IEKF_STEP_TOL_M)  # fmt: skip
            got = from_c(cand, n[0])
            np.testing.assert_allclose(got.mean[0], x[0], atol=MEAN_M)
            np.testing.assert_allclose(got.cov[0], p[0], atol=COMPACT_COV_REL * np.abs(p[0]).max())
            assert abs(got.logw[0] - ll[0]) <= PRODUCT_LOGW + LOGW_REL * abs(ll[0])
    assert far > 40 and near > 80 and dropped > 80  # every side of both gates exercised


def test_multiply_leaves_out_only_what_pruning_drops():
    # The stream drops a product below the prune floor of the heaviest product
    # before it.  With the floor 24 bits down (the lowest prune_log2_ratio) it
    # drops far less; after pruning at the default ratio both buffers must be
    # the same bytes.
    rng = np.random.default_rng(22)
    pc, wide = params_c(), params_c()
    wide.prune_log2_ratio = -(24 << 16)
    ratio = pc.prune_log2_ratio
    fewer = 0
    for _ in range(150):
        k = int(rng.integers(1, 17))
        centre = rng.uniform(10, 30, 2)
        work = quantised(Mixture(rng.normal(0, 3, k), centre + rng.normal(0, 3, (k, 2)),
                                 np.array([random_cov(rng, rng.uniform(0.01, 1.0)) for _ in range(k)])))  # fmt: skip
        covs = np.array([random_cov(rng, rng.uniform(0.001, 0.2)) for _ in range(4)])
        neighbour = quantised(Mixture(rng.normal(0, 1, 4) - 2, rng.uniform(0, 40, (4, 2)), covs))
        rings = ffi.new("pfx_ring_t[16]")
        nr = ffi.new("uint32_t *")
        r = float(np.linalg.norm(centre - neighbour.mean[0]))
        assert lib.pfx_range_rings(belief_c(neighbour), rq(r, 10), rq(0.1, 10), pc, rings, nr) == OK
        out = []
        for p in (pc, wide):
            cand, n = multiply_c(work, rings, nr[0], p)
            before = n[0]
            assert lib.pfx_mixture_prune(cand, n, ratio) == OK
            out.append((before, bytes(ffi.buffer(cand, 24 * n[0]))))
        assert out[0][1] == out[1][1]
        fewer += out[0][0] < out[1][0]
    assert fewer > 30  # the floor did leave products out


# --- node ----------------------------------------------------------------------------------

BOUNDS = (0.0, 0.0, 40.0, 40.0)


def make_node(pc=None, bounds=BOUNDS):
    node = ffi.new("pfx_node_t *")
    bq = ffi.new("pfx_len_q10_t[4]", [rq(b, 10) for b in bounds])
    assert lib.pfx_node_init(node, pc if pc is not None else params_c(), bq) == OK
    return node


def random_inbox(rng, truth, n_anchors: int, n_agents: int, sigma: float = 0.1, elongated: bool = False):
    """(pfx_inbox_t, list of twin Received) for the same quantised broadcasts, in a random arrival order.
    elongated: the agents' main components have axes 4:1 in standard deviation, at random angles."""
    items = []
    for _ in range(n_anchors):
        a = rng.uniform(0, 40, 2)
        items.append((N.anchor_message(a), np.linalg.norm(truth - a) + rng.normal(0, sigma), True))
    for _ in range(n_agents):
        pos = truth + rng.normal(0, 8, 2)
        sd = rng.uniform(0.05, 1.2)
        main = np.eye(2) * 2 * sd**2
        if elongated:
            a = rng.uniform(0, np.pi)
            rot = np.array([[np.cos(a), -np.sin(a)], [np.sin(a), np.cos(a)]])
            main = rot @ np.diag([8 * sd**2, sd**2 / 2]) @ rot.T
        m = Mixture(np.zeros(1), (pos + rng.normal(0, sd, 2))[None], main[None])
        if rng.random() < 0.3:
            m = Mixture(np.log([0.7, 0.3]), np.array([pos, pos + rng.normal(0, 5, 2)]),
                        np.array([main, np.eye(2) * 1.5]))  # fmt: skip
        items.append((m, np.linalg.norm(truth - pos) + rng.normal(0, sigma), False))
    inbox = ffi.new("pfx_inbox_t *")
    received = []
    for i in rng.permutation(len(items)):
        m, r, anchor = items[i]
        mq = quantised(m)
        r_q, s_q = rq(max(r, 0.0), 10), rq(sigma, 10)
        assert lib.pfx_inbox_add(inbox, belief_c(mq), r_q, s_q, int(anchor)) == OK
        received.append(N.Received(str(i), mq, r_q / 1024, s_q / 1024, anchor))
    return inbox, received


def test_node_update_with_anchors_and_agents_matches_twin():
    rng = np.random.default_rng(15)
    ws = ffi.new("pfx_workspace_t *")
    est = ffi.new("pfx_estimate_t *")
    diffs = []
    for _ in range(300):
        node = make_node()
        truth = rng.uniform(5, 35, 2)
        inbox, received = random_inbox(rng, truth, int(rng.integers(3, 7)), int(rng.integers(0, 4)))
        assert lib.pfx_node_update(node, inbox, ws) == OK
        want = N.update(None, received, BOUNDS, PARAMS)
        got = from_c(node.belief.comp, node.belief.count)
        assert len(got) >= 1 and len(got) <= PARAMS.max_components
        assert_spd(got)
        assert lib.pfx_node_estimate(node, est) == OK
        ref = N.read_estimate(want, BOUNDS, PARAMS)
        diffs.append(math.hypot(est.x / 1024 - ref.mean[0], est.y / 1024 - ref.mean[1]))
    diffs = np.array(diffs)
    assert diffs.max() <= UPDATE_POSITION_M, diffs.max()
    assert np.median(diffs) <= UPDATE_MEDIAN_M


def test_node_update_robust_and_tracking_prior_match_twin():
    rng = np.random.default_rng(16)
    ws = ffi.new("pfx_workspace_t *")
    est = ffi.new("pfx_estimate_t *")
    pc = params_c(blocked_weight=0.1, blocked_bias=1.0)
    blocked = N.BlockedModel(0.1, 1.0)
    diffs = []
    for _ in range(80):
        node = make_node(pc)
        truth = rng.uniform(5, 35, 2)
        inbox, received = random_inbox(rng, truth, int(rng.integers(3, 6)), int(rng.integers(0, 3)))
        assert lib.pfx_node_update(node, inbox, ws) == OK
        want = N.update(None, received, BOUNDS, PARAMS, blocked)
        # Tracking: predict (1.5 s, 0.02 m^2/s), then a second update from that prior.
        assert lib.pfx_node_predict(node, 1500, rq(0.02, 20)) == OK
        prior = from_c(node.prior.comp, node.prior.count)
        np.testing.assert_allclose(prior.cov, N.predict(from_c(node.belief.comp, node.belief.count), 1.5, 0.02).cov,
                                   atol=1 / 2**20)  # fmt: skip
        inbox2, received2 = random_inbox(rng, truth, 3, 1)
        assert lib.pfx_node_update(node, inbox2, ws) == OK
        want2 = N.update(prior, received2, BOUNDS, PARAMS, blocked)
        assert lib.pfx_node_estimate(node, est) == OK
        ref = N.read_estimate(want2, BOUNDS, PARAMS)
        diffs.append(math.hypot(est.x / 1024 - ref.mean[0], est.y / 1024 - ref.mean[1]))
        assert want is not None
    assert np.max(diffs) <= UPDATE_POSITION_M and np.median(diffs) <= UPDATE_MEDIAN_M


@pytest.mark.parametrize("blocked_weight", [0.0, 0.2])
def test_node_update_directional_spread_with_elongated_neighbours_matches_twin(blocked_weight):
    # The robust preset's reduction settings with rings widened along each line of sight.
    rng = np.random.default_rng(17)
    params = robust_preset(PARAMS).replace(robust=blocked_weight > 0, directional_spread=True)
    pc = params_c(params, blocked_weight=blocked_weight, blocked_bias=1.0)
    blocked = N.BlockedModel(blocked_weight, 1.0 if blocked_weight else 0.0)
    ws = ffi.new("pfx_workspace_t *")
    est = ffi.new("pfx_estimate_t *")
    diffs = []
    for _ in range(120):
        node = make_node(pc)
        truth = rng.uniform(5, 35, 2)
        inbox, received = random_inbox(rng, truth, int(rng.integers(2, 5)), int(rng.integers(1, 5)), elongated=True)
        assert lib.pfx_node_update(node, inbox, ws) == OK
        want = N.update(None, received, BOUNDS, params, blocked)
        got = from_c(node.belief.comp, node.belief.count)
        assert 1 <= len(got) <= params.max_components
        assert_spd(got)
        assert lib.pfx_node_estimate(node, est) == OK
        ref = N.read_estimate(want, BOUNDS, params)
        diffs.append(math.hypot(est.x / 1024 - ref.mean[0], est.y / 1024 - ref.mean[1]))
    assert np.max(diffs) <= UPDATE_POSITION_M and np.median(diffs) <= UPDATE_MEDIAN_M, (np.max(diffs), np.median(diffs))


def test_update_with_nothing_heard_is_the_prior():
    node = make_node()
    ws = ffi.new("pfx_workspace_t *")
    inbox = ffi.new("pfx_inbox_t *")
    lib.pfx_inbox_add(inbox, ffi.new("pfx_belief_t *"), 5 * 1024, 102, 0)  # a censored broadcast: skipped
    assert lib.pfx_node_update(node, inbox, ws) == OK
    assert node.belief.count == 0
    est = ffi.new("pfx_estimate_t *")
    assert lib.pfx_node_estimate(node, est) == OK
    mean, cov = N.prior_moments(BOUNDS)  # uniform box: w^2 / 12
    assert (est.x / 1024, est.y / 1024, est.mode_count, est.components) == (mean[0], mean[1], 0, 0)
    assert abs(est.pxx / 2**20 - cov[0, 0]) <= 1 / 2**20 and abs(est.pyy / 2**20 - cov[1, 1]) <= 1 / 2**20


def test_broadcast_censors_and_inflates_like_twin():
    rng = np.random.default_rng(17)
    out = ffi.new("pfx_belief_t *")
    for _ in range(300):
        node = make_node()
        k = int(rng.integers(1, 5))
        m = quantised(Mixture(rng.normal(0, 1, k), rng.uniform(0, 30, (k, 2)),
                              np.array([random_cov(rng, rng.uniform(0.05, 3)) for _ in range(k)])).normalised())  # fmt: skip
        node.belief.count = k
        to_c(m, node.belief.comp)
        assert lib.pfx_node_broadcast(node, out) == OK
        want = N.outgoing(m, PARAMS)
        if want is None:
            assert out.count == 0
            continue
        got = from_c(out.comp, out.count)
        np.testing.assert_array_equal(got.mean, want.mean)
        np.testing.assert_allclose(got.cov, want.cov, atol=1 / 2**20)
        np.testing.assert_array_equal(got.logw, want.logw)


# --- validation: every error path returns its code and changes nothing -----------------


def good_belief():
    return belief_c(quantised(Mixture.single((10.0, 10.0), np.eye(2) * 0.1)))


def test_inbox_add_errors_leave_the_inbox_unchanged():
    inbox = ffi.new("pfx_inbox_t *")
    assert lib.pfx_inbox_add(inbox, good_belief(), 1024, 100, 0) == OK
    cases = []
    b = good_belief()
    b.count = 9
    cases.append((b, 1024, 100, Status.ERR_DEGENERATE))
    for field, value in (("pxx", -1), ("pyy", -5), ("pxy", 400_000)):
        b = good_belief()
        setattr(b.comp[0], field, value)
        cases.append((b, 1024, 100, Status.ERR_DEGENERATE))
    cases += [(good_belief(), -1, 100, Status.ERR_RANGE), (good_belief(), 1024, 0, Status.ERR_ARG),
              (good_belief(), 1024, -3, Status.ERR_ARG)]  # fmt: skip
    for b, r, s, code in cases:
        before = bytes(ffi.buffer(inbox))
        assert lib.pfx_inbox_add(inbox, b, r, s, 0) == code
        assert bytes(ffi.buffer(inbox)) == before
    assert lib.pfx_inbox_add(ffi.NULL, good_belief(), 1024, 100, 0) == Status.ERR_ARG
    for _ in range(15):
        assert lib.pfx_inbox_add(inbox, good_belief(), 1024, 100, 1) == OK
    before = bytes(ffi.buffer(inbox))
    assert lib.pfx_inbox_add(inbox, good_belief(), 1024, 100, 0) == Status.ERR_FULL
    assert bytes(ffi.buffer(inbox)) == before


def update_error_cases():
    """(name, mutate(node, inbox), expected status): one per validation path of pfx_node_update."""

    def heard(fn):
        def mutate(node, inbox):
            fn(inbox.heard[1])
        return mutate

    def param(name, value):
        def mutate(node, inbox):
            setattr(node.params, name, value)
        return mutate

    cases = [
        ("range above max_range", heard(lambda h: setattr(h, "range", node_max_range() + 1)), Status.ERR_RANGE),
        ("negative range", heard(lambda h: setattr(h, "range", -1)), Status.ERR_RANGE),
        ("zero sigma", heard(lambda h: setattr(h, "sigma", 0)), Status.ERR_ARG),
        ("belief count", heard(lambda h: setattr(h.belief, "count", 9)), Status.ERR_DEGENERATE),
        ("negative pxx", heard(lambda h: setattr(h.belief.comp[0], "pxx", -1)), Status.ERR_DEGENERATE),
        ("pxy^2 > pxx pyy", heard(lambda h: setattr(h.belief.comp[0], "pxy", h.belief.comp[0].pxx + h.belief.comp[0].pyy + 1)),
         Status.ERR_DEGENERATE),
        ("inbox count", lambda node, inbox: setattr(inbox, "count", 17), Status.ERR_ARG),
        ("prior count", lambda node, inbox: setattr(node.prior, "count", 9), Status.ERR_DEGENERATE),
        ("prior not PSD", lambda node, inbox: (setattr(node.prior, "count", 1), setattr(node.prior.comp[0], "pyy", -2)),
         Status.ERR_DEGENERATE),
        ("bounds", lambda node, inbox: node.bounds.__setitem__(2, node.bounds[0]), Status.ERR_ARG),
    ]  # fmt: skip
    for name, value in [("max_components", 0), ("max_components", 9), ("working_cap", 17), ("candidate_cap", 0),
                        ("candidate_cap", 65), ("broad_max_arcs", 17), ("iekf_iterations", 0), ("iekf_iterations", 9),
                        ("ring_arc_spacing", 0), ("arc_tangential_ratio", -1), ("broad_window_sigmas", 0),
                        ("broad_sagitta_ratio", -1), ("merge_gate", -1), ("prune_log2_ratio", 1),
                        ("prune_log2_ratio", -(25 << 16)), ("broadcast_inflation", 0), ("censor_spread", -1),
                        ("mode_gate", -1), ("mode_min_weight", (1 << 30) + 1), ("blocked_weight", 1 << 30),
                        ("blocked_bias", -1), ("max_range", 0), ("max_range", (1 << 24) + 1),
                        ("product_gate", -1), ("directional_spread", 2)]:  # fmt: skip
        cases.append((f"param {name}={value}", param(name, value), Status.ERR_ARG))
    return cases


def node_max_range() -> int:
    return params_c().max_range


@pytest.mark.parametrize(("name", "mutate", "code"), update_error_cases(), ids=[c[0] for c in update_error_cases()])
def test_update_errors_leave_the_node_unchanged(name, mutate, code):
    rng = np.random.default_rng(18)
    node = make_node()
    ws = ffi.new("pfx_workspace_t *")
    inbox, _ = random_inbox(rng, np.array([20.0, 20.0]), 3, 1)
    assert lib.pfx_node_update(node, inbox, ws) == OK  # a real belief to keep
    mutate(node, inbox)
    before = node_bytes(node)
    assert lib.pfx_node_update(node, inbox, ws) == code
    assert node_bytes(node) == before


def test_other_entry_points_validate():
    node = make_node()
    bq = ffi.new("pfx_len_q10_t[4]", [0, 0, 0, 1024])
    assert lib.pfx_node_init(node, params_c(), bq) == Status.ERR_ARG
    assert lib.pfx_node_init(ffi.NULL, params_c(), bq) == Status.ERR_ARG
    node.belief.count = 1
    node.belief.comp[0].pxx = -4
    before = node_bytes(node)
    assert lib.pfx_node_predict(node, 10, 1) == Status.ERR_DEGENERATE
    assert lib.pfx_node_predict(node, 10, -1) == Status.ERR_ARG
    assert node_bytes(node) == before
    out = ffi.new("pfx_belief_t *")
    assert lib.pfx_node_broadcast(node, out) == Status.ERR_DEGENERATE and out.count == 0
    est = ffi.new("pfx_estimate_t *")
    assert lib.pfx_node_estimate(node, est) == Status.ERR_DEGENERATE
    node.belief.count = 12
    assert lib.pfx_node_estimate(node, est) == Status.ERR_DEGENERATE
    assert lib.pfx_belief_point(ffi.NULL, 0, 0) == Status.ERR_ARG
    assert lib.pfx_params_check(ffi.NULL) == Status.ERR_ARG


# --- fuzz-ish: garbage in, a status out, never a crash ------------------------------------

EDGES = [-(1 << 31), -(1 << 31) + 1, -(1 << 30), -1, 0, 1, 1 << 20, 1 << 30, (1 << 31) - 1]


def garbage_belief(rng, b, valid_shape: bool) -> None:
    """Random fields; valid_shape keeps count <= 8 and covariances PSD (so the update runs),
    with extreme means, weights and variances."""
    pick = lambda: int(rng.choice(EDGES)) if rng.random() < 0.3 else int(rng.integers(-(1 << 31), 1 << 31))  # noqa: E731
    b.count = int(rng.integers(0, 9)) if valid_shape else int(rng.choice([0, 1, 8, 9, 200, (1 << 32) - 1]))
    for k in range(8):
        c = b.comp[k]
        c.log2w, c.x, c.y = pick(), pick(), pick()
        if valid_shape:
            c.pxx = int(rng.integers(0, 1 << 31)) >> int(rng.integers(0, 31))
            c.pyy = int(rng.integers(0, 1 << 31)) >> int(rng.integers(0, 31))
            c.pxy = int(rng.uniform(-1, 1) * math.isqrt(c.pxx * c.pyy))
        else:
            c.pxx, c.pxy, c.pyy = pick(), pick(), pick()


def test_garbage_inputs_always_return_a_status():
    rng = np.random.default_rng(19)
    ws = ffi.new("pfx_workspace_t *")
    node = make_node()
    b = ffi.new("pfx_belief_t *")
    max_range = node.params.max_range
    ok_updates = 0
    for t in range(3000):
        inbox = ffi.new("pfx_inbox_t *")
        valid = t % 3 != 0
        for _ in range(int(rng.integers(0, 18))):
            garbage_belief(rng, b, valid)
            if valid:  # mostly in range; now and then just outside
                r = int(rng.integers(0, max_range + 1)) if rng.random() > 0.01 else int(rng.choice([-1, max_range + 1]))
                s = int(rng.integers(1, 1 << 16))
            else:
                r, s = int(rng.integers(-(1 << 31), 1 << 31)), int(rng.integers(-(1 << 31), 1 << 31))
            assert lib.pfx_inbox_add(inbox, b, r, s, int(rng.integers(0, 3))) in STATUSES
        if rng.random() < 0.2:  # a raw inbox the caller filled by hand
            inbox.count = int(rng.integers(0, 20))
            garbage_belief(rng, inbox.heard[0].belief, valid)
        garbage_belief(rng, node.prior, valid)
        if rng.random() < 0.5:
            node.prior.count = 0
        st_ = lib.pfx_node_update(node, inbox, ws)
        assert st_ in STATUSES
        if st_ == OK:
            ok_updates += 1
            got = node.belief
            assert got.count <= PARAMS.max_components
            assert lib.pfx_mixture_check(got.comp, got.count) == OK
            assert lib.pfx_node_broadcast(node, ffi.new("pfx_belief_t *")) in STATUSES
            assert lib.pfx_node_estimate(node, ffi.new("pfx_estimate_t *")) in STATUSES
            assert lib.pfx_node_predict(node, int(rng.integers(0, 1 << 32)), int(rng.integers(0, 1 << 31))) == OK
    assert ok_updates > 1000  # the valid-shape half really runs the whole update


# --- the target constraint: stack -------------------------------------------------------

ARM_GCC = "arm-none-eabi-gcc"


@pytest.mark.skipif(subprocess.run(["which", ARM_GCC], capture_output=True).returncode != 0,
                    reason="arm-none-eabi-gcc not installed")  # fmt: skip
@pytest.mark.parametrize("opt", ["-O2", "-Os"])
def test_worst_case_stack_below_1k_on_cortex_m4(opt, tmp_path):
    import re
    from functools import lru_cache

    size: dict[str, int] = {}
    edges: dict[str, set[str]] = {}
    for src in sorted((ROOT / "c_core" / "src").glob("*.c")):
        out = subprocess.run([ARM_GCC, "-std=c99", opt, "-mcpu=cortex-m4", "-mthumb", "-mfloat-abi=soft",
                              "-ffreestanding", "-fcallgraph-info=su", "-I", str(ROOT / "c_core" / "include"),
                              "-c", str(src), "-o", str(tmp_path / (src.stem + ".o"))],
                             cwd=tmp_path, capture_output=True, text=True)  # fmt: skip
        assert out.returncode == 0, out.stderr
        text = (tmp_path / (src.stem + ".ci")).read_text()
        for title, label in re.findall(r'node: \{ title: "([^"]+)" label: "([^"]*)"', text):
            m = re.search(r"(\d+) bytes \(static\)", label)
            if m:
                size[title] = int(m.group(1))
        for a, b in re.findall(r'edge: \{ sourcename: "([^"]+)" targetname: "([^"]+)"', text):
            edges.setdefault(a, set()).add(b)

    @lru_cache(maxsize=None)
    def worst(f: str) -> int:
        return size.get(f, 0) + max([worst(g) for g in edges.get(f, ())] or [0])

    # Library helpers (memcpy, 64-bit divide) are not in the graph: 128 bytes are reserved for them.
    deepest = max(worst(f) for f in size if f.startswith("pfx_"))
    assert deepest + 128 < 1024, deepest


def test_one_mode_neighbour_counts_as_its_read_off_mode():
    # A neighbour whose belief reads off as one mode makes one ring: the update
    # is bit for bit the update with that neighbour's broadcast replaced by its
    # point estimate (pfx_mixture_point_estimate) as one component; a two-mode
    # neighbour keeps one ring per component (the substitute then differs).
    rng = np.random.default_rng(31)
    ws = ffi.new("pfx_workspace_t *")
    est = ffi.new("pfx_estimate_t *")
    same = differ = 0
    for _ in range(60):
        truth = rng.uniform(10, 30, 2)
        anchors = [rng.uniform(0, 40, 2) for _ in range(3)]
        pos = truth + rng.normal(0, 6, 2)
        spread = 0.05 if rng.random() < 0.5 else 8.0  # one mode, or two far apart
        nb = quantised(Mixture(np.log([0.6, 0.4]), np.array([pos, pos + rng.normal(0, spread, 2)]),
                               np.array([np.eye(2) * 0.02, np.eye(2) * 0.03])))  # fmt: skip
        nb_c = belief_c(nb)
        pc = params_c()
        assert lib.pfx_mixture_point_estimate(nb_c.comp, nb_c.count, pc.mode_gate, pc.mode_min_weight,
                                              est) == OK  # fmt: skip
        sub = ffi.new("pfx_belief_t *")
        sub.count = 1
        sub.comp[0].x, sub.comp[0].y = est.x, est.y
        sub.comp[0].pxx, sub.comp[0].pxy, sub.comp[0].pyy = est.pxx, est.pxy, est.pyy
        beliefs = []
        for msg in (nb_c, sub):
            node, inbox = make_node(), ffi.new("pfx_inbox_t *")
            for a in anchors:
                anc = belief_c(N.anchor_message(a))
                assert lib.pfx_inbox_add(inbox, anc, rq(np.linalg.norm(truth - a), 10), 102, 1) == OK
            assert lib.pfx_inbox_add(inbox, msg, rq(np.linalg.norm(truth - pos), 10), 102, 0) == OK
            assert lib.pfx_node_update(node, inbox, ws) == OK
            beliefs.append(bytes(ffi.buffer(ffi.addressof(node.belief))))
        if est.mode_count == 1:
            same += 1
            assert beliefs[0] == beliefs[1]
        elif beliefs[0] != beliefs[1]:
            differ += 1
    assert same > 20 and differ >= 3  # measured 31 and 6 of 60
