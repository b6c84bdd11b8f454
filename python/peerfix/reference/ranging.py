"""Range update in float64: ring messages and their product with a belief.

A neighbour's belief component (weight w, mean c, covariance P) and a measured
range r make a ring message: the likelihood N(r; ||x - c||, s^2) where s^2
holds sigma_r^2 and the neighbour's own spread, by one of two rules
(EstimatorParams.directional_spread):
- bound (default): the component's largest variance lambda_max(P) is added
  to the ring's variance, whatever the direction;
- directional: P is kept beside the ring.  A compact update adds h^T P h, the
  neighbour's variance along the line of sight h of each linearisation (the
  first-order variance of ||x - c|| in c); an arc adds P to its covariance
  (the arc convolved with the neighbour's position).  An elongated neighbour
  then widens the ring only where its long axis points along the line of sight.
Gates and the broad test use the bound var + lambda_max(P) either way.
With the robust likelihood a second, wider ring at r - bias carries the
blocked-path share.

A belief component meets a ring in one of two ways:
- compact (small against the ring's curvature): an iterated extended Kalman
  update of the range function h(x) = ||x - c||; the weight is multiplied by
  the innovation likelihood.  A pair far off the ring at the first
  linearisation (product_gate_sigma2) keeps the one-step update: it is
  almost always pruned, and relinearising it would be wasted work on a tag;
- broad: the part of the ring inside the component's few-sigma window is cut
  into arcs, each a Gaussian; the component is multiplied by each arc (a linear
  update) and each product is weighted by the overlap N(m_arc; mu, P + P_arc)
  times the arc length.

Arc directions come from one table of RING_DIRECTIONS unit vectors.

Mirrors c_core/src/pfx_range.c.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .mixture import Mixture, concat, gaussian_product, max_eig2, sym2
from .params import RING_DIRECTIONS, EstimatorParams

# A compact update stops relinearising once an iteration moves the estimate
# by at most this (0.12 mm, a power of two so that the core's Q20 image is
# exact).  The next iteration would move it by micrometres at most.
IEKF_STEP_TOL_M = 2.0**-13

_ANGLES = 2.0 * np.pi * np.arange(RING_DIRECTIONS) / RING_DIRECTIONS
DIRECTIONS = np.stack([np.cos(_ANGLES), np.sin(_ANGLES)], axis=1)  # (D, 2)
NORMALS = np.stack([-DIRECTIONS[:, 1], DIRECTIONS[:, 0]], axis=1)  # tangents, (D, 2)


@dataclass
class Rings:
    """Ring messages from one neighbour: one row per ring (component x LOS/blocked)."""

    logw: np.ndarray  # (m,) log weight of the ring within the message
    centre: np.ndarray  # (m, 2)
    radius: np.ndarray  # (m,)
    var: np.ndarray  # (m,) radial variance: sigma_r^2 (+ bias^2), + lambda_max(P) unless directional
    ncov: np.ndarray | None = None  # (m, 2, 2) the neighbour's covariance P when directional, else None
    var_bound: np.ndarray | None = None  # (m,) var + lambda_max(ncov): the variance bound in any direction

    def __post_init__(self) -> None:
        if self.var_bound is None:
            self.var_bound = self.var if self.ncov is None else self.var + max_eig2(self.ncov)

    def __len__(self) -> int:
        return int(self.logw.shape[0])


def ring_messages(
    neighbour: Mixture,
    range_m: float,
    sigma_m: float,
    params: EstimatorParams,
    blocked_weight: float = 0.0,
    blocked_bias_m: float = 0.0,
) -> Rings:
    """Rings for the received (already inflated) belief of one neighbour."""
    var_bound = sigma_m * sigma_m + max_eig2(neighbour.cov)
    if params.directional_spread:
        var = np.full(len(neighbour), sigma_m * sigma_m)
        ncov = neighbour.cov.copy()
    else:
        var, ncov = var_bound, None
    logw = neighbour.logw
    centre = neighbour.mean
    radius = np.full(len(neighbour), float(range_m))
    if blocked_weight <= 0.0:
        return Rings(logw.copy(), centre.copy(), radius, var, ncov, var_bound)
    # Blocked path: r = d + b with b ~ Exp(mean beta): a ring at r - beta with
    # variance s^2 + beta^2 (moment match), carrying the blocked share.
    los = np.log1p(-blocked_weight)
    nlos = np.log(blocked_weight)
    return Rings(
        np.concatenate([logw + los, logw + nlos]),
        np.concatenate([centre, centre]),
        np.concatenate([radius, np.maximum(radius - blocked_bias_m, 0.0)]),
        np.concatenate([var, var + blocked_bias_m**2]),
        None if ncov is None else np.concatenate([ncov, ncov]),
        np.concatenate([var_bound, var_bound + blocked_bias_m**2]),
    )


def stride_for(radius: float, spacing_m: float, max_arcs_full: int) -> int:
    """Table stride (a power of two) so that arcs are at least spacing_m apart
    and a full ring has at most max_arcs_full arcs."""
    stride = 1
    circumference = 2.0 * np.pi * max(radius, 1e-9)
    while stride < RING_DIRECTIONS and (
        circumference * stride / RING_DIRECTIONS < spacing_m or RING_DIRECTIONS // stride > max_arcs_full
    ):
        stride *= 2
    return stride


def arc_gaussians(centre, radius: float, var: float, dirs: np.ndarray, stride: int, params: EstimatorParams,
                  ncov=None):
    """Arcs of one ring at table directions `dirs`: means (a,2), covs (a,2,2), log arc length.

    ncov (2,2), the neighbour's covariance of a directional ring (else None),
    is added to every arc: the arc convolved with the neighbour's position."""
    spacing = 2.0 * np.pi * radius * stride / RING_DIRECTIONS
    u = DIRECTIONS[dirs]
    v = NORMALS[dirs]
    t2 = (params.arc_tangential_ratio * spacing) ** 2
    # A ring of radius ~0 is a blob at the centre: keep its arcs from collapsing.
    t2 = max(t2, var)
    # A straight arc of tangential variance t2 reaches out to radius r + t2/(2r)
    # on average; pulling its centre in by that much keeps the ring's mass on r.
    inward = t2 / (2.0 * radius) if radius > 0 else 0.0
    mean = centre[None, :] + max(radius - inward, 0.0) * u
    cov = var * u[:, :, None] * u[:, None, :] + t2 * v[:, :, None] * v[:, None, :]
    if ncov is not None:
        cov = cov + ncov[None]
    return mean, cov, float(np.log(max(spacing, 1e-9)))


def first_ring(rings: Rings, bounds_m, params: EstimatorParams) -> Mixture:
    """Prior (uniform over the site's box) times the first message: the whole ring as arcs.

    Arcs whose centre falls outside the box are dropped (the prior is zero
    there).  The ring of each message component gets an equal share of the
    candidate cap.
    """
    xmin, ymin, xmax, ymax = bounds_m
    log_area = float(np.log((xmax - xmin) * (ymax - ymin)))
    per_ring = max(1, params.candidate_cap // max(1, len(rings)))
    parts_logw, parts_mean, parts_cov = [], [], []
    for k in range(len(rings)):
        stride = stride_for(rings.radius[k], params.ring_arc_spacing_m, per_ring)
        dirs = np.arange(0, RING_DIRECTIONS, stride)
        mean, cov, log_len = arc_gaussians(rings.centre[k], rings.radius[k], rings.var[k], dirs, stride, params,
                                           None if rings.ncov is None else rings.ncov[k])
        inside = (mean[:, 0] >= xmin) & (mean[:, 0] <= xmax) & (mean[:, 1] >= ymin) & (mean[:, 1] <= ymax)
        n_in = int(inside.sum())
        if n_in == 0:
            continue
        parts_logw.append(np.full(n_in, rings.logw[k] + log_len - log_area))
        parts_mean.append(mean[inside])
        parts_cov.append(cov[inside])
    if not parts_logw:
        return Mixture.empty()
    return Mixture(np.concatenate(parts_logw), np.concatenate(parts_mean), np.concatenate(parts_cov))


def is_broad(mean, cov, centre, radius, var, params: EstimatorParams) -> np.ndarray:
    """Per pair: would a linear update bend too much?  (n,) booleans.

    The tangential spread at the component decides: the ring's sagitta over
    +-2 tangential sigmas, 2 sigma_t^2 / r, against the ring's own sigma.  A
    component sitting on the ring's centre is broad too (no direction to
    linearise along).
    """
    d = mean - centre
    rho = np.hypot(d[:, 0], d[:, 1])
    sigma_max2 = max_eig2(cov)
    near_centre = rho * rho <= 4.0 * sigma_max2
    safe = np.where(rho > 0, rho, 1.0)
    t = np.stack([-d[:, 1], d[:, 0]], axis=1) / safe[:, None]
    sigma_t2 = np.einsum("ni,nij,nj->n", t, cov, t)
    sagitta = 2.0 * sigma_t2 / np.maximum(radius, 1e-9)
    return near_centre | (sagitta > params.broad_sagitta_ratio * np.sqrt(var))


def compact_update(
    mean, cov, centre, radius, var, iterations: int, gate_sigma2: float = 0.0, step_tol_m: float = 0.0,
    ncov=None,
):
    """Iterated extended Kalman update of (mean, cov) by the range to `centre`.

    Vectorised over n pairs.  Returns posterior means, covariances and the log
    innovation likelihood log N(r; h(x_n) + H (mu - x_n), H P H^T + s^2) at
    the last linearisation point x_n; with ncov (n,2,2), the ring centre's
    covariance, s^2 = var + h^T ncov h at each linearisation.

    A pair stops relinearising early (the defaults keep every iteration):
    - gate (gate_sigma2 > 0): when its squared normalised innovation at the
      first linearisation, (r - ||mu - c||)^2 / S, exceeds gate_sigma2, it
      keeps the one-step update and that linearisation's likelihood.  Such a
      product lies far off the ring and is pruned in all but the rarest cases;
    - converged: when an iteration moves its estimate by at most step_tol_m
      (the usual stopping rule of an iterated filter; the next one would move
      it by far less), or by so little against the ring (|step|^2 <=
      2 rho step_tol_m) that the next one would move it by about step_tol_m.
    """
    n = mean.shape[0]
    x = mean.copy()
    predicted = np.empty(n)
    s = np.empty(n)
    gain = np.empty((n, 2))
    rows = np.arange(n)  # pairs still being relinearised
    for k in range(max(1, iterations)):
        m, p, c, xr = mean[rows], cov[rows], centre[rows], x[rows]
        d = xr - c
        rho = np.maximum(np.hypot(d[:, 0], d[:, 1]), 1e-9)
        h = d / rho[:, None]
        predicted[rows] = rho + np.einsum("ni,ni->n", h, m - xr)
        ph = np.einsum("nij,nj->ni", p, h)
        s[rows] = np.einsum("ni,ni->n", h, ph) + var[rows]
        if ncov is not None:
            s[rows] += np.einsum("ni,nij,nj->n", h, ncov[rows], h)
        gain[rows] = ph / s[rows][:, None]
        x[rows] = m + gain[rows] * (radius[rows] - predicted[rows])[:, None]
        step = x[rows] - xr
        step2 = step[:, 0] ** 2 + step[:, 1] ** 2
        # Converged: the step is at most step_tol_m, or short against the ring
        # (relinearising after a step d moves the prediction by its sagitta
        # d^2 / (2 rho), so the next step would be at most about step_tol_m).
        going = (step2 > step_tol_m**2) & (step2 > 2.0 * rho * step_tol_m)
        if k == 0 and gate_sigma2 > 0.0:
            innov0 = radius[rows] - predicted[rows]
            going &= innov0 * innov0 <= gate_sigma2 * s[rows]
        rows = rows[going]
    post = sym2(cov - s[:, None, None] * gain[:, :, None] * gain[:, None, :])
    innov = radius - predicted
    loglik = -0.5 * (np.log(2.0 * np.pi * s) + innov * innov / s)
    return x, post, loglik


def broad_update(mean, cov, centre, radius: float, var: float, params: EstimatorParams, ncov=None) -> Mixture:
    """One broad component times one ring: arcs within the component's window."""
    d = mean - centre
    rho = float(np.hypot(d[0], d[1]))
    reach = params.broad_window_sigmas * float(np.sqrt(max_eig2(cov[None])[0]))
    # Ring points within `reach` of the mean: cos(angle to mean) >= c_min (law of cosines).
    if rho > 1e-9 and radius > 1e-9:
        c_min = (radius * radius + rho * rho - reach * reach) / (2.0 * radius * rho)
        cosines = DIRECTIONS @ (d / rho)
    else:
        c_min = -1.0
        cosines = np.ones(RING_DIRECTIONS)
    if c_min > 1.0:
        return Mixture.empty()  # the ring misses the window: nothing of weight
    stride = stride_for(radius, params.ring_arc_spacing_m, RING_DIRECTIONS)
    while True:
        dirs = np.arange(0, RING_DIRECTIONS, stride)
        dirs = dirs[cosines[dirs] >= c_min]
        if dirs.size <= params.broad_max_arcs or stride >= RING_DIRECTIONS:
            break
        stride *= 2
    if dirs.size == 0:
        # Window narrower than the table: the nearest direction carries it.
        dirs = np.array([int(np.argmax(cosines[::stride])) * stride])
    a_mean, a_cov, log_len = arc_gaussians(centre, radius, var, dirs, stride, params, ncov)
    n = dirs.size
    mu, p, logz = gaussian_product(
        np.broadcast_to(mean, (n, 2)), np.broadcast_to(cov, (n, 2, 2)), a_mean, a_cov
    )
    return Mixture(logz + log_len, mu, p)


def ring_gate(mean, cov, centre, radius, var, gate_sigma2: float) -> np.ndarray:
    """Per pair: does the ring pass within sqrt(gate_sigma2) upper-bound sigmas
    of the component mean?  (rho - r)^2 <= gate (var + lambda_max(P)); (n,) booleans."""
    d = mean - centre
    rho = np.hypot(d[:, 0], d[:, 1])
    return (rho - radius) ** 2 <= gate_sigma2 * (var + max_eig2(cov))


def multiply_by_rings(belief: Mixture, rings: Rings, params: EstimatorParams) -> Mixture:
    """All products of belief components and rings (before pruning), in a fixed
    order: belief component major, ring minor; broad products expand in place."""
    nb, nr = len(belief), len(rings)
    bi = np.repeat(np.arange(nb), nr)
    ri = np.tile(np.arange(nr), nb)
    if params.product_gate_sigma2 > 0.0:
        # Pairs whose ring passes far from the component are not formed (ring_gate).
        keep = ring_gate(belief.mean[bi], belief.cov[bi], rings.centre[ri], rings.radius[ri], rings.var_bound[ri],
                         params.product_gate_sigma2)
        bi, ri = bi[keep], ri[keep]
    if bi.size == 0:
        return Mixture.empty()
    mean, cov = belief.mean[bi], belief.cov[bi]
    centre, radius, var = rings.centre[ri], rings.radius[ri], rings.var[ri]
    ncov = None if rings.ncov is None else rings.ncov[ri]
    base = belief.logw[bi] + rings.logw[ri]
    broad = is_broad(mean, cov, centre, radius, rings.var_bound[ri], params)

    npairs = bi.size
    out_logw = np.empty(npairs)
    out_mean = np.empty((npairs, 2))
    out_cov = np.empty((npairs, 2, 2))
    compact = np.flatnonzero(~broad)
    if compact.size:
        x, p, ll = compact_update(mean[compact], cov[compact], centre[compact], radius[compact], var[compact],
                                  params.iekf_iterations, params.product_gate_sigma2, IEKF_STEP_TOL_M,
                                  None if ncov is None else ncov[compact])
        out_logw[compact] = base[compact] + ll
        out_mean[compact] = x
        out_cov[compact] = p
    if not broad.any():
        return Mixture(out_logw, out_mean, out_cov)

    # Stitch broad expansions in pair order so that the result order is fixed.
    pieces = []
    start = 0
    for k in np.flatnonzero(broad):
        if k > start:
            pieces.append(Mixture(out_logw[start:k], out_mean[start:k], out_cov[start:k]))
        arcs = broad_update(mean[k], cov[k], centre[k], float(radius[k]), float(var[k]), params,
                            None if ncov is None else ncov[k])
        arcs.logw = arcs.logw + base[k]
        pieces.append(arcs)
        start = k + 1
    if start < npairs:
        pieces.append(Mixture(out_logw[start:], out_mean[start:], out_cov[start:]))
    return concat(pieces)
