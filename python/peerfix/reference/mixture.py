"""Gaussian-mixture algebra in float64: products, moments, pruning, Runnalls reduction.

A mixture is held as three arrays: log-weights (n,), means (n, 2) and
covariances (n, 2, 2).  Weights stay in the log domain so that products of
many likelihoods never underflow; normalising is a log-sum-exp.

Mirrors the mixture module of the fixed-point core (c_core/src/pfx_mixture.c).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

LOG_2PI = float(np.log(2.0 * np.pi))


@dataclass
class Mixture:
    logw: np.ndarray  # (n,)
    mean: np.ndarray  # (n, 2)
    cov: np.ndarray  # (n, 2, 2)

    def __len__(self) -> int:
        return int(self.logw.shape[0])

    @staticmethod
    def single(mean, cov) -> "Mixture":
        return Mixture(np.zeros(1), np.asarray(mean, float).reshape(1, 2), np.asarray(cov, float).reshape(1, 2, 2))

    @staticmethod
    def empty() -> "Mixture":
        return Mixture(np.zeros(0), np.zeros((0, 2)), np.zeros((0, 2, 2)))

    def weights(self) -> np.ndarray:
        """Normalised linear weights."""
        return np.exp(self.logw - logsumexp(self.logw))

    def normalised(self) -> "Mixture":
        return Mixture(self.logw - logsumexp(self.logw), self.mean, self.cov)

    def take(self, idx) -> "Mixture":
        return Mixture(self.logw[idx], self.mean[idx], self.cov[idx])

    def copy(self) -> "Mixture":
        return Mixture(self.logw.copy(), self.mean.copy(), self.cov.copy())


def concat(parts: list[Mixture]) -> Mixture:
    parts = [p for p in parts if len(p)]
    if not parts:
        return Mixture.empty()
    return Mixture(
        np.concatenate([p.logw for p in parts]),
        np.concatenate([p.mean for p in parts]),
        np.concatenate([p.cov for p in parts]),
    )


def logsumexp(x: np.ndarray) -> float:
    if x.size == 0:
        return -np.inf
    m = float(np.max(x))
    if not np.isfinite(m):
        return m
    return m + float(np.log(np.sum(np.exp(x - m))))


# --- 2x2 helpers, vectorised over a leading axis (faster than np.linalg here) ---


def det2(p: np.ndarray) -> np.ndarray:
    return p[..., 0, 0] * p[..., 1, 1] - p[..., 0, 1] * p[..., 1, 0]


def inv2(p: np.ndarray) -> np.ndarray:
    d = det2(p)
    out = np.empty_like(p)
    out[..., 0, 0] = p[..., 1, 1] / d
    out[..., 1, 1] = p[..., 0, 0] / d
    out[..., 0, 1] = -p[..., 0, 1] / d
    out[..., 1, 0] = -p[..., 1, 0] / d
    return out


def sym2(p: np.ndarray) -> np.ndarray:
    """Symmetrise (rounding drifts the off-diagonals apart)."""
    off = 0.5 * (p[..., 0, 1] + p[..., 1, 0])
    out = p.copy()
    out[..., 0, 1] = off
    out[..., 1, 0] = off
    return out


def max_eig2(p: np.ndarray) -> np.ndarray:
    """Largest eigenvalue of symmetric 2x2 matrices."""
    a, b, c = p[..., 0, 0], p[..., 0, 1], p[..., 1, 1]
    half_tr = 0.5 * (a + c)
    return half_tr + np.sqrt(np.maximum(0.25 * (a - c) ** 2 + b * b, 0.0))


def quad2(p_inv: np.ndarray, d: np.ndarray) -> np.ndarray:
    """d^T P^-1 d for (n,2,2) inverses and (n,2) vectors."""
    return np.einsum("ni,nij,nj->n", d, p_inv, d)


def log_gauss2(d: np.ndarray, s: np.ndarray) -> np.ndarray:
    """log N(d; 0, S) for 2-D vectors d (n,2) and covariances S (n,2,2)."""
    return -LOG_2PI - 0.5 * np.log(det2(s)) - 0.5 * quad2(inv2(s), d)


def gaussian_product(mu1, p1, mu2, p2):
    """N(x; mu1, P1) N(x; mu2, P2) = z N(x; mu, P) for (n,...) stacks.

    Returns mu, P and log z = log N(mu2; mu1, P1 + P2).  Written as a Kalman
    update of (mu1, P1) by a position-like measurement mu2 with noise P2, which
    stays well conditioned when either factor is much sharper than the other.
    """
    s = p1 + p2
    s_inv = inv2(s)
    gain = np.einsum("nij,njk->nik", p1, s_inv)
    d = mu2 - mu1
    mu = mu1 + np.einsum("nij,nj->ni", gain, d)
    p = sym2(p1 - np.einsum("nij,njk->nik", gain, p1))
    logz = -LOG_2PI - 0.5 * np.log(det2(s)) - 0.5 * quad2(s_inv, d)
    return mu, p, logz


# --- moments, pruning, reduction ---


def moments(m: Mixture) -> tuple[np.ndarray, np.ndarray]:
    """Mean and covariance of the whole mixture (moment matching)."""
    w = m.weights()
    mean = w @ m.mean
    d = m.mean - mean
    cov = np.einsum("n,nij->ij", w, m.cov) + np.einsum("n,ni,nj->ij", w, d, d)
    return mean, sym2(cov)


def prune(m: Mixture, log_ratio: float) -> Mixture:
    """Drop components whose log-weight is more than -log_ratio below the largest."""
    if len(m) == 0:
        return m
    keep = m.logw >= np.max(m.logw) + log_ratio
    if keep.all():
        return m
    return m.take(np.flatnonzero(keep))


def keep_heaviest(m: Mixture, cap: int) -> Mixture:
    """Keep the cap heaviest components (ties: the earlier one), in their original order."""
    if len(m) <= cap:
        return m
    order = np.argsort(-m.logw, kind="stable")[:cap]
    return m.take(np.sort(order))


def merge_moments(w_i, mu_i, p_i, w_j, mu_j, p_j):
    """Moment-preserving merge of pairs (Runnalls 2007, eq. for the merged component).

    Linear weights w (...,), means (...,2), covariances (...,2,2).
    """
    w = w_i + w_j
    a_i = (w_i / w)[..., None]
    a_j = (w_j / w)[..., None]
    mu = a_i * mu_i + a_j * mu_j
    d = mu_i - mu_j
    # P = a_i P_i + a_j P_j + a_i a_j d d^T (the same as the spread form with d_. = mu_. - mu)
    p = a_i[..., None] * p_i + a_j[..., None] * p_j + (a_i * a_j)[..., None] * d[..., :, None] * d[..., None, :]
    return w, mu, p


def runnalls_cost(w_i, p_i, w_j, p_j, p_ij):
    """Runnalls' upper bound on the KL discrimination of merging i and j:
    B = 0.5 [(w_i + w_j) log|P_ij| - w_i log|P_i| - w_j log|P_j|]."""
    return 0.5 * ((w_i + w_j) * np.log(det2(p_ij)) - w_i * np.log(det2(p_i)) - w_j * np.log(det2(p_j)))


def runnalls_reduce(m: Mixture, cap: int) -> Mixture:
    """Greedily merge the cheapest pair by Runnalls' cost until at most cap components remain.

    Ties go to the pair (i, j) with the smallest i, then j (row-major argmin), so
    the fixed-point core can make the same choice.  The merged component takes
    the place of i; j is removed.
    """
    n = len(m)
    if n <= cap:
        return m
    shift = float(np.max(m.logw))
    w = np.exp(m.logw - shift)
    w = w / w.sum()
    mu = m.mean.copy()
    p = m.cov.copy()
    alive = np.ones(n, bool)

    # Full pairwise cost matrix once; afterwards only the merged row is recomputed.
    ii, jj = np.triu_indices(n, 1)
    _, _, p_ij = merge_moments(w[ii], mu[ii], p[ii], w[jj], mu[jj], p[jj])
    cost = np.full((n, n), np.inf)
    cost[ii, jj] = runnalls_cost(w[ii], p[ii], w[jj], p[jj], p_ij)

    for _ in range(n - cap):
        flat = int(np.argmin(cost))
        i, j = divmod(flat, n)
        w[i], mu[i], p[i] = merge_moments(w[i], mu[i], p[i], w[j], mu[j], p[j])
        p[i] = sym2(p[i])
        alive[j] = False
        cost[j, :] = np.inf
        cost[:, j] = np.inf
        others = np.flatnonzero(alive)
        others = others[others != i]
        if others.size:
            _, _, p_io = merge_moments(w[i], mu[i], p[i], w[others], mu[others], p[others])
            c = runnalls_cost(w[i], p[i], w[others], p[others], p_io)
            lo = others < i
            cost[others[lo], i] = c[lo]
            cost[i, others[~lo]] = c[~lo]
    idx = np.flatnonzero(alive)
    return Mixture(np.log(w[idx]) + shift, mu[idx], p[idx]).normalised()


def gate_merge(m: Mixture, gate_sigma2: float) -> Mixture:
    """Merge near-duplicates in one pass before the costlier Runnalls step.

    Heaviest first, every component joins the first kept component whose mean
    is within the Mahalanobis gate (summed covariances), else it is kept; each
    group is merged by moments.  After a few rings the products of one
    neighbour step pile up on the same spot; this folds them at O(n * kept).
    """
    n = len(m)
    if n <= 1 or gate_sigma2 <= 0.0:
        return m
    order = np.argsort(-m.logw, kind="stable")
    group = np.full(n, -1)
    seeds: list[int] = []
    for k in order:
        if seeds:
            s = np.array(seeds)
            d = m.mean[k] - m.mean[s]
            q = quad2(inv2(m.cov[k] + m.cov[s]), d)
            hit = np.flatnonzero(q <= gate_sigma2)
            if hit.size:
                group[k] = s[hit[0]]
                continue
        seeds.append(int(k))
        group[k] = k
    if len(seeds) == n:
        return m
    shift = float(np.max(m.logw))
    w_all = np.exp(m.logw - shift)
    out_logw, out_mean, out_cov = [], [], []
    for s in sorted(seeds):
        idx = np.flatnonzero(group == s)
        w = w_all[idx]
        wsum = w.sum()
        a = w / wsum
        mu = a @ m.mean[idx]
        d = m.mean[idx] - mu
        cov = np.einsum("n,nij->ij", a, m.cov[idx]) + np.einsum("n,ni,nj->ij", a, d, d)
        out_logw.append(np.log(wsum) + shift)
        out_mean.append(mu)
        out_cov.append(sym2(cov))
    return Mixture(np.array(out_logw), np.array(out_mean), np.array(out_cov))


def reduce_to(m: Mixture, cap: int, log_ratio: float, hard_cap: int | None = None, gate_sigma2: float = 0.0) -> Mixture:
    """Keep at most hard_cap heaviest, prune negligible components, fold
    components within the gate (always, not only above the cap), then merge
    down to cap by Runnalls' cost.

    Keeping the heaviest first gives the same set as pruning first (the
    heaviest is in both) and is what a bounded buffer on the tag can do while
    the products stream in.
    """
    if hard_cap is not None:
        m = keep_heaviest(m, hard_cap)
    m = prune(m, log_ratio)
    if len(m) > 1:
        m = gate_merge(m, gate_sigma2)
    return runnalls_reduce(m, cap).normalised() if len(m) > cap else m.normalised()


# --- modes and the point estimate ---


@dataclass
class PointEstimate:
    mean: np.ndarray  # (2,)
    cov: np.ndarray  # (2, 2)
    mode_count: int
    mode_weight: float  # share of the weight in the reported mode


def modes(m: Mixture, gate_sigma2: float, min_weight: float) -> list[tuple[float, np.ndarray]]:
    """Group components into modes: heaviest first, each joins the first mode
    whose seed is within the Mahalanobis gate, else it seeds a new mode.

    Returns (weight, member indices) per mode, heaviest mode first, keeping only
    modes with at least min_weight of the total (the rest join no mode).
    """
    w = m.weights()
    order = np.argsort(-w, kind="stable")
    seeds: list[int] = []
    members: list[list[int]] = []
    for k in order:
        placed = False
        for s_idx, s in enumerate(seeds):
            d = m.mean[k] - m.mean[s]
            s_cov = m.cov[k] + m.cov[s]
            if float(d @ inv2(s_cov[None])[0] @ d) <= gate_sigma2:
                members[s_idx].append(int(k))
                placed = True
                break
        if not placed:
            seeds.append(int(k))
            members.append([int(k)])
    out = [(float(w[idx].sum()), np.array(idx)) for idx in members]
    out.sort(key=lambda t: -t[0])
    return [o for o in out if o[0] >= min_weight] or out[:1]


def point_estimate(m: Mixture, gate_sigma2: float, min_weight: float) -> PointEstimate:
    """The mode's mean when the belief is unimodal, else the dominant mode's
    mean and covariance (the mixture mean of a two-mode belief lies between a
    right mode and a flipped one, where the tag is not)."""
    found = modes(m, gate_sigma2, min_weight)
    weight, idx = found[0]
    if len(found) == 1:
        # One mode: its moments; components too light to form a mode of their
        # own (below min_weight) must not drag the estimate across the site.
        mean, cov = moments(m.take(idx))
        return PointEstimate(mean, cov, 1, weight)
    mean, cov = moments(m.take(idx))
    return PointEstimate(mean, cov, len(found), weight)
