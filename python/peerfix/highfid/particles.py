"""Particle beliefs and one nonparametric update, in float64.

A belief is N particles (equal weights after resampling) with one kernel
standard deviation per particle: a kernel density estimate (KDE).  A
neighbour's broadcast is its belief; the range r to it turns each of its
particles x_k into a ring factor N(r; ||x - x_k||, s^2 + h_k^2), the kernel
blurring the ring by its own width (Ihler, Fisher, Moses, Willsky, IEEE JSAC
23(4), 2005).  An anchor's factor is the exact ring around its position.
The receiver divides its own message out of the peer's belief by weighting
the peer's particles (divided_weights), so a message carries nothing the
receiver said.

The new belief is the product prior x anchor rings x peer messages.  It is
sampled by population Monte Carlo: proposals from the rings themselves and
from the agent's last belief, importance weights target / proposal,
resampling, and proposals from the KDE of the resampled set for the next
stage.  A cold start (no last belief) tempers the rings: every ring variance
gets + b^2 with b shrinking geometrically to 0, so that thin rings (0.1 m on
a 20 m radius) meet in wide regions first and every mode is found.

Everything is vectorised over proposals x neighbours x particles.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass, replace

import numpy as np

LOG_2PI = float(np.log(2.0 * np.pi))


@dataclass(frozen=True)
class ParticleParams:
    """Resolution and sampler settings of the particle reference (docs/reference-engines.md)."""

    particles: int = 256
    """N: particles per belief, and per broadcast."""

    proposals: int = 512
    """M: proposals per importance-sampling stage (resampled down to N)."""

    explore_factor: int = 4
    """The first stage of a cold (tempered) start draws explore_factor * M proposals."""

    bandwidth_neighbours: int = 0
    """Kernel std of a particle = distance to its k-th nearest fellow particle;
    0 means k = round(sqrt(N)) (about Silverman's rule at a Gaussian's core,
    wider in the tails and between modes)."""

    min_bandwidth_m: float = 0.005
    """Floor of a kernel's standard deviation."""

    temper_start_m: float = 2.0
    """Cold start: the first stage widens every ring by this (added in quadrature)."""

    temper_ratio: float = 0.3
    """Each tempered stage multiplies the widening by this, down to 0."""

    ess_stop: float = 0.3
    """The untempered stage is accepted once its effective sample size is at
    least this share of the proposals (else it is repeated)."""

    ess_restart: float = 0.02
    """A warm start whose first stage reaches less than this share restarts
    cold (the last belief and the new messages disagree)."""

    max_stages: int = 10
    """Stages of one update at most."""

    peer_exponent: float = 1.0
    """Peer messages enter the product raised to this power (uniformly
    reweighted belief propagation, Wymeersch, Penna, Savic, IEEE Trans.
    Wireless Comm. 11(4), 2012).  1 with the division is belief propagation
    proper; anchors always enter with power 1."""

    ring_share: float = 0.25
    """Share of every later stage's proposals drawn from the rings (keeps thin
    ring-shaped beliefs and modes the last stage missed within reach)."""

    tempered_particles: int = 32
    """Widened (b > 0) stages evaluate a peer's message on this many of its
    particles: the widening blurs the factor far more than the subsampling."""

    divide: bool = True
    """Belief propagation proper: a receiver divides its own message out of a
    peer's belief (the peer's record says which broadcast it used), so nothing
    it said comes back to it.  False: beliefs as messages (broadcast belief
    propagation with the peer_exponent)."""

    divide_cap: float = 20.0
    """Largest particle weight after the division, as a multiple of the median."""

    mode_link_m: float = 1.0
    """Particles closer than this (single linkage) belong to one mode."""

    mode_min_weight: float = 0.05
    """A mode counts only with at least this share of the particles."""

    seed: int = 0
    """Seed of the sampler's random stream (one stream per engine)."""

    @property
    def k_neighbours(self) -> int:
        return self.bandwidth_neighbours or max(1, round(float(np.sqrt(self.particles))))

    def replace(self, **changes) -> ParticleParams:
        return replace(self, **changes)

    def as_dict(self) -> dict:
        return asdict(self)


@dataclass
class ParticleBelief:
    """N equal-weight particles (N, 2) and their kernel standard deviations (N,)."""

    xy: np.ndarray
    h: np.ndarray

    def __len__(self) -> int:
        return int(self.xy.shape[0])


@dataclass
class Factors:
    """Everything one update multiplies: anchor rings and peer messages.

    Anchors: centre (A, 2), range (A,), variance (A,).
    Peers: particles (J, N, 2), per-particle ring variance s^2 + h^2 (J, N), range (J,),
    particle weights (J, N) summing to 1 per peer (uniform unless the message was divided).
    """

    a_xy: np.ndarray
    a_r: np.ndarray
    a_var: np.ndarray
    p_xy: np.ndarray
    p_var: np.ndarray
    p_r: np.ndarray
    p_w: np.ndarray | None = None

    def __post_init__(self):
        if self.p_w is None:
            j, n = self.p_var.shape
            self.p_w = np.full((j, n), 1.0 / max(n, 1))

    @property
    def n_sources(self) -> int:
        return len(self.a_r) + len(self.p_r)

    @property
    def min_sigma_m(self) -> float:
        sig = [np.sqrt(self.a_var.min())] if len(self.a_var) else []
        if len(self.p_r):
            sig.append(np.sqrt(self.p_var.min()))
        return float(min(sig))


@dataclass(frozen=True)
class Blocked:
    """Two-ring robust likelihood: share w of ranges biased by about beta (0 = off)."""

    weight: float = 0.0
    bias_m: float = 0.0


def ring_density(d: np.ndarray, r: np.ndarray, var: np.ndarray, blocked: Blocked) -> np.ndarray:
    """Range likelihood N(r; d, var), or its two-ring robust form, elementwise."""
    lik = np.exp(-0.5 * (d - r) ** 2 / var) / np.sqrt(2.0 * np.pi * var)
    if blocked.weight <= 0.0:
        return lik
    v2 = var + blocked.bias_m**2
    lik2 = np.exp(-0.5 * (d - np.maximum(r - blocked.bias_m, 0.0)) ** 2 / v2) / np.sqrt(2.0 * np.pi * v2)
    return (1.0 - blocked.weight) * lik + blocked.weight * lik2


def _peer_likelihoods(
    x: np.ndarray, p_xy: np.ndarray, p_r: np.ndarray, var: np.ndarray, blocked: Blocked, p_w: np.ndarray
) -> np.ndarray:
    """(M, J) weighted sum over each peer's particles of their ring factors at x.

    Distances by the expansion |x|^2 + |p|^2 - 2 x.p (one matrix product) and
    in-place arithmetic: this is the hot loop of the reference.
    """
    m = x.shape[0]
    j, n = var.shape
    centre = p_xy.reshape(-1, 2).mean(axis=0)  # work near the origin: no cancellation in the expansion
    xc = x - centre
    pc = p_xy.reshape(-1, 2) - centre
    d = np.multiply.outer(xc[:, 0], -2.0 * pc[:, 0])
    d += np.multiply.outer(xc[:, 1], -2.0 * pc[:, 1])
    d += np.einsum("ij,ij->i", xc, xc)[:, None]
    d += np.einsum("ij,ij->i", pc, pc)[None, :]
    np.maximum(d, 0.0, out=d)
    np.sqrt(d, out=d)
    d = d.reshape(m, j, n)
    rings = [(p_r, var, 1.0)]
    if blocked.weight > 0.0:
        rings = [(p_r, var, 1.0 - blocked.weight),
                 (np.maximum(p_r - blocked.bias_m, 0.0), var + blocked.bias_m**2, blocked.weight)]
    out = np.zeros((m, j))
    for r, v, share in rings:
        z = d - r[None, :, None]
        z *= z
        z *= (-0.5 / v)[None]
        np.maximum(z, -700.0, out=z)  # exp underflows to 0 beyond; huge arguments take a slow path
        np.exp(z, out=z)
        out += np.einsum("mjn,jn->mj", z, share * p_w / np.sqrt(2.0 * np.pi * v))
    return out


def source_likelihoods(x: np.ndarray, f: Factors, b2: float, blocked: Blocked, sub: int = 0) -> np.ndarray:
    """(M, S) likelihood of every source at every point; anchors first, then peers.

    A peer's value is the mean over its particles of their ring factors.
    sub > 0 uses only the first `sub` particles of each peer (tempered stages,
    where the widening b blurs the factor far more than the particle count).
    """
    out = np.empty((x.shape[0], f.n_sources))
    na = len(f.a_r)
    if na:
        d = np.hypot(x[:, None, 0] - f.a_xy[None, :, 0], x[:, None, 1] - f.a_xy[None, :, 1])
        out[:, :na] = ring_density(d, f.a_r[None, :], f.a_var[None, :] + b2, blocked)
    if len(f.p_r):
        p_xy, p_var, p_w = f.p_xy, f.p_var, f.p_w
        if 0 < sub < p_xy.shape[1]:
            step = p_xy.shape[1] // sub
            p_xy, p_var, p_w = p_xy[:, ::step], p_var[:, ::step], p_w[:, ::step]
            p_w = p_w / p_w.sum(axis=1, keepdims=True)
        out[:, na:] = _peer_likelihoods(x, p_xy, f.p_r, p_var + b2, blocked, p_w)
    return out


def divided_weights(
    p_xy: np.ndarray, r: float, sigma_m: float, used: ParticleBelief, cap: float, blocked: Blocked
) -> np.ndarray:
    """Weights (N,) of a peer's particles once the receiver's own message is divided out.

    The peer's belief includes the factor it built from the receiver's
    broadcast `used` (as the peer used it) and the same range; belief
    propagation's message to the receiver leaves that factor out:
    w_k ~ 1 / m(x_k).  Ratios are capped at `cap` times the median (a
    particle far off the receiver's ring would otherwise take all the weight).
    """
    var = (sigma_m**2 + used.h**2)[None, :]
    m = _peer_likelihoods(p_xy, used.xy[None], np.array([r]), var, blocked, np.full((1, len(used)), 1.0 / len(used)))[:, 0]
    with np.errstate(divide="ignore"):
        logw = -np.log(m)
    finite = np.isfinite(logw)
    if not finite.any():
        return np.full(len(m), 1.0 / len(m))
    top = np.median(logw[finite]) + np.log(cap)
    logw = np.minimum(np.where(finite, logw, top), top)
    w = np.exp(logw - logw.max())
    return w / w.sum()


def kde_log_density(x: np.ndarray, b: ParticleBelief) -> np.ndarray:
    """log of the belief's KDE (isotropic Gaussian kernels) at points x (M,)."""
    d2 = (x[:, None, 0] - b.xy[None, :, 0]) ** 2 + (x[:, None, 1] - b.xy[None, :, 1]) ** 2
    h2 = b.h * b.h
    z = -0.5 * d2 / h2[None, :] - np.log(2.0 * np.pi * h2)[None, :]
    m = z.max(axis=1)
    return m + np.log(np.mean(np.exp(z - m[:, None]), axis=1))


def kde_sample(rng: np.random.Generator, b: ParticleBelief, m: int) -> np.ndarray:
    idx = rng.integers(len(b), size=m)
    return b.xy[idx] + b.h[idx, None] * rng.standard_normal((m, 2))


def ring_sample(rng: np.random.Generator, f: Factors, m: int, b2: float, blocked: Blocked) -> np.ndarray:
    """m points drawn from the rings: a source uniformly, one of its particles,
    a radius from its range factor, a direction uniformly."""
    na, nj = len(f.a_r), len(f.p_r)
    src = rng.integers(na + nj, size=m)
    centre = np.empty((m, 2))
    radius = np.empty(m)
    var = np.empty(m)
    is_a = src < na
    a = src[is_a]
    centre[is_a], radius[is_a], var[is_a] = f.a_xy[a], f.a_r[a], f.a_var[a]
    j = src[~is_a] - na
    if j.size:
        cum = np.cumsum(f.p_w, axis=1)
        k = np.minimum((cum[j] < rng.random(j.size)[:, None] * cum[j, -1:]).sum(axis=1), f.p_xy.shape[1] - 1)
        centre[~is_a], radius[~is_a], var[~is_a] = f.p_xy[j, k], f.p_r[j], f.p_var[j, k]
    var = var + b2
    if blocked.weight > 0.0:
        hit = rng.random(m) < blocked.weight
        radius = np.where(hit, np.maximum(radius - blocked.bias_m, 0.0), radius)
        var = np.where(hit, var + blocked.bias_m**2, var)
    rho = np.abs(radius + np.sqrt(var) * rng.standard_normal(m))
    theta = rng.uniform(0.0, 2.0 * np.pi, m)
    return centre + rho[:, None] * np.stack([np.cos(theta), np.sin(theta)], axis=1)


def bandwidths(xy: np.ndarray, k: int, floor_m: float) -> np.ndarray:
    """Each particle's kernel std: distance to its k-th nearest fellow (duplicates count)."""
    n = xy.shape[0]
    k = min(k, n - 1)
    if k < 1:
        return np.full(n, floor_m)
    d2 = (xy[:, None, 0] - xy[None, :, 0]) ** 2 + (xy[:, None, 1] - xy[None, :, 1]) ** 2
    kth = np.partition(d2, k, axis=1)[:, k]  # index 0 is the particle itself
    return np.maximum(np.sqrt(kth), floor_m)


def systematic_resample(rng: np.random.Generator, w: np.ndarray, n: int) -> np.ndarray:
    """Indices of n draws by systematic resampling of normalised weights w."""
    positions = (rng.random() + np.arange(n)) / n
    cum = np.cumsum(w)
    cum[-1] = 1.0
    return np.searchsorted(cum, positions, side="left")


class Target:
    """log prior + log anchor rings + peer_exponent * log peer messages, with ring widening b^2."""

    def __init__(self, f: Factors, bounds_m, prior: ParticleBelief | None, pp: ParticleParams, blocked: Blocked):
        self.f, self.bounds_m, self.prior, self.pp, self.blocked = f, bounds_m, prior, pp, blocked
        self.power = np.concatenate([np.ones(len(f.a_r)), np.full(len(f.p_r), pp.peer_exponent)])

    def __call__(self, x: np.ndarray, b2: float) -> tuple[np.ndarray, np.ndarray]:
        """(log target (M,), per-source likelihoods (M, S))."""
        sub = self.pp.tempered_particles if b2 > 0.0 else 0
        lik = source_likelihoods(x, self.f, b2, self.blocked, sub)
        with np.errstate(divide="ignore"):
            lt = np.log(lik) @ self.power
        xmin, ymin, xmax, ymax = self.bounds_m
        inside = (x[:, 0] >= xmin) & (x[:, 0] <= xmax) & (x[:, 1] >= ymin) & (x[:, 1] <= ymax)
        lt = np.where(inside, lt, -np.inf)
        if self.prior is not None:
            lt = lt + kde_log_density(x, self.prior)
        return lt, lik


def _ring_log_density(lik: np.ndarray, f: Factors) -> np.ndarray:
    """log density of ring_sample's proposal, each ring's mass spread as 1/(2 pi r)."""
    r = np.concatenate([f.a_r, f.p_r])
    with np.errstate(divide="ignore"):
        return np.log(np.mean(lik / (2.0 * np.pi * np.maximum(r, 1e-3))[None, :], axis=1))


def _normalise(logw: np.ndarray) -> tuple[np.ndarray, float]:
    m = np.max(logw)
    if not np.isfinite(m):
        return np.full(logw.shape, 1.0 / logw.size), 0.0
    w = np.exp(logw - m)
    w /= w.sum()
    return w, float(1.0 / np.sum(w * w))


def update(
    rng: np.random.Generator,
    f: Factors,
    bounds_m,
    prior: ParticleBelief | None,
    last: ParticleBelief | None,
    pp: ParticleParams,
    blocked: Blocked = Blocked(),
) -> tuple[ParticleBelief | None, dict]:
    """The new belief from the prior and the factors, and sampler diagnostics.

    last: the agent's previous belief (a warm start's proposal), or None.
    Returns (None, ...) when no proposal lands where the target is positive.
    """
    target = Target(f, bounds_m, prior, pp, blocked)
    warm = last if last is not None else prior
    if warm is not None:
        belief, info = _run(rng, target, [0.0], warm, pp.proposals, pp)
        if info["ess_first"] >= pp.ess_restart and belief is not None:
            return belief, info
    # Cold start: rings widened by b, b shrinking to 0.
    schedule = []
    b = pp.temper_start_m
    b_min = 0.3 * f.min_sigma_m
    while b > b_min and len(schedule) < pp.max_stages - 2:
        schedule.append(b)
        b *= pp.temper_ratio
    schedule.append(0.0)
    belief, info = _run(rng, target, schedule, None, pp.proposals * pp.explore_factor, pp)
    info["cold"] = True
    return belief, info


def _propose(rng, target: Target, m: int, b2: float, kde: ParticleBelief | None, ring_share: float):
    """m proposals: a share from the rings, the rest from the KDE; their log density and the target."""
    f = target.f
    n_ring = m if kde is None else round(ring_share * m)
    parts = [ring_sample(rng, f, n_ring, b2, target.blocked)]
    if kde is not None:
        parts.append(kde_sample(rng, kde, m - n_ring))
    x = np.concatenate(parts)
    lt, lik = target(x, b2)
    logq = _ring_log_density(lik, f)
    if kde is not None:
        share = n_ring / m
        with np.errstate(divide="ignore"):
            logq = np.logaddexp(np.log(share) + logq, np.log1p(-share) + kde_log_density(x, kde))
    return x, lt, logq


def _run(rng, target: Target, schedule: list[float], warm, m0: int, pp: ParticleParams):
    """Stages of importance sampling along the widening schedule; the last (b = 0)
    stage repeats until its effective sample size reaches ess_stop."""
    n = pp.particles
    x, lt, logq = _propose(rng, target, m0, schedule[0] ** 2, warm, 0.5)
    info = {"stages": 1, "cold": False, "ess_first": 0.0, "ess_final": 0.0}
    stage = 0
    while True:
        with np.errstate(invalid="ignore"):
            logw = np.where(np.isfinite(lt), lt - logq, -np.inf)
        if not np.isfinite(logw).any():
            return None, info
        w, ess = _normalise(logw)
        if info["stages"] == 1:
            info["ess_first"] = ess / x.shape[0]
        last_b = stage >= len(schedule) - 1
        done = last_b and (ess >= pp.ess_stop * x.shape[0] or info["stages"] >= pp.max_stages)
        xy = x[systematic_resample(rng, w, n)]
        belief = ParticleBelief(xy, bandwidths(xy, pp.k_neighbours, pp.min_bandwidth_m))
        if done:
            info["ess_final"] = ess / x.shape[0]
            return belief, info
        stage = min(stage + 1, len(schedule) - 1)
        x, lt, logq = _propose(rng, target, pp.proposals, schedule[stage] ** 2, belief, pp.ring_share)
        info["stages"] += 1


def modes(b: ParticleBelief, link_m: float, min_weight: float) -> list[np.ndarray]:
    """Particle indices of each mode (single linkage at link_m), heaviest first;
    modes below min_weight are dropped (the heaviest is always kept)."""
    from scipy.cluster.hierarchy import fcluster, linkage

    if len(b) == 1:
        return [np.arange(1)]
    labels = fcluster(linkage(b.xy, method="single"), t=link_m, criterion="distance")
    groups = [np.flatnonzero(labels == lab) for lab in np.unique(labels)]
    groups.sort(key=lambda g: -g.size)
    kept = [g for g in groups if g.size >= min_weight * len(b)]
    return kept or groups[:1]


def mode_estimate(b: ParticleBelief, pp: ParticleParams) -> tuple[np.ndarray, np.ndarray, int, float]:
    """(mean, cov, mode count, mode share) of the heaviest mode; cov includes the kernels."""
    found = modes(b, pp.mode_link_m, pp.mode_min_weight)
    g = found[0]
    pts = b.xy[g]
    mean = pts.mean(axis=0)
    d = pts - mean
    cov = d.T @ d / len(g) + np.mean(b.h[g] ** 2) * np.eye(2)
    return mean, cov, len(found), len(g) / len(b)
