"""The particle reference (`--engine particle`): nonparametric belief propagation.

Same network, same schedule, same driver as the float twin and the fixed
core; only the belief's representation differs: N particles with a kernel
each, instead of K Gaussian components.  What it shows is what bounded
messages cost in accuracy (docs/reference-engines.md).

A broadcast is the belief itself (N particles and their kernel widths); an
agent broadcasts as soon as it has a belief (no censoring: a broad belief's
wide kernels make it a weak, harmless message).  A receiver turns a peer's
belief into belief propagation's message by dividing its own contribution
out: the engine keeps, per agent, the broadcasts its belief was built from
(on the air, a sequence number in the broadcast would name them).  Seeded: one random stream per engine, drawn in the driver's fixed
call order, so a run is reproducible.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..engine import Inbound, NodeReport
from ..reference.mixture import Mixture
from ..reference.node import BlockedModel, prior_moments
from ..reference.params import EstimatorParams
from .particles import (
    Blocked,
    Factors,
    ParticleBelief,
    ParticleParams,
    divided_weights,
    mode_estimate,
    update,
)

# On the air a particle would be x, y and its kernel std, each a float32.
PARTICLE_BYTES = 12


@dataclass(frozen=True)
class ParticleMessage:
    xy: np.ndarray  # (N, 2); one row for an anchor
    h: np.ndarray  # (N,) kernel std; 0 for an anchor
    is_anchor: bool = False


class ParticleEngine:
    name = "particle"

    def __init__(
        self,
        params: EstimatorParams,
        blocked: BlockedModel = BlockedModel(),
        particle_params: ParticleParams | None = None,
    ):
        self.params = params
        self.pp = particle_params or ParticleParams()
        self.blocked = Blocked(blocked.weight, blocked.ring_offset_m)  # the same blocked ring as the twin
        self.bounds_m = None
        self.anchors: dict[str, np.ndarray] = {}
        self.beliefs: dict[str, ParticleBelief | None] = {}
        self.priors: dict[str, ParticleBelief | None] = {}
        # Per agent: the peer broadcasts its current belief was built from (for the division).
        self.used: dict[str, dict[str, ParticleMessage]] = {}
        self.rng = np.random.default_rng(self.pp.seed)
        self.diagnostics: list[dict] = []  # one per update: stages, cold start, effective sample sizes

    def start(self, bounds_m, anchors, agent_ids):
        self.bounds_m = tuple(float(b) for b in bounds_m)
        self.anchors = {a: np.asarray(xy, float) for a, xy in anchors.items()}
        self.beliefs = {a: None for a in agent_ids}
        self.priors = {a: None for a in agent_ids}
        self.used = {a: {} for a in agent_ids}
        self.rng = np.random.default_rng(self.pp.seed)
        self.diagnostics = []

    def broadcast(self, node_id):
        if node_id in self.anchors:
            return ParticleMessage(self.anchors[node_id].reshape(1, 2), np.zeros(1), True)
        b = self.beliefs[node_id]
        return None if b is None else ParticleMessage(b.xy.copy(), b.h.copy())

    def message_bytes(self, message: ParticleMessage) -> int:
        return PARTICLE_BYTES * int(message.xy.shape[0])

    def _factors(self, agent_id: str, inbox: list[Inbound]) -> tuple[Factors, dict]:
        anchors = [m for m in inbox if m.is_anchor][: self.params.max_neighbours]
        # The inbox bound of the twin, filled anchors first then the sharpest peers.
        peers = [m for m in inbox if not m.is_anchor]
        peers.sort(key=lambda m: float(np.median(m.message.h)))
        peers = peers[: max(0, self.params.max_neighbours - len(anchors))]
        n = self.pp.particles
        a_xy = np.array([m.message.xy[0] for m in anchors]).reshape(-1, 2)
        a_r = np.array([m.range_m for m in anchors], float)
        a_var = np.array([m.sigma_m**2 for m in anchors], float)
        p_xy = np.array([m.message.xy for m in peers]).reshape(-1, n, 2)
        p_var = np.array([m.sigma_m**2 + m.message.h**2 for m in peers]).reshape(-1, n)
        p_r = np.array([m.range_m for m in peers], float)
        p_w = np.full((len(peers), n), 1.0 / n)
        if self.pp.divide:
            for j, m in enumerate(peers):
                mine = self.used.get(m.sender, {}).get(agent_id)
                if mine is not None:
                    used = ParticleBelief(mine.xy, mine.h)
                    p_w[j] = divided_weights(m.message.xy, m.range_m, m.sigma_m, used, self.pp.divide_cap, self.blocked)
        return Factors(a_xy, a_r, a_var, p_xy, p_var, p_r, p_w), {m.sender: m.message for m in peers}

    def update(self, agent_id, inbox: list[Inbound]):
        if not inbox:
            self.beliefs[agent_id] = self.priors[agent_id]
            return
        f, used = self._factors(agent_id, inbox)
        belief, info = update(
            self.rng, f, self.bounds_m, self.priors[agent_id], self.beliefs[agent_id], self.pp, self.blocked
        )
        info["agent"] = agent_id
        self.diagnostics.append(info)
        if belief is not None:
            self.beliefs[agent_id] = belief
            self.used[agent_id] = used

    def report(self, agent_id) -> NodeReport:
        b = self.beliefs[agent_id]
        if b is None:
            mean, cov = prior_moments(self.bounds_m)
            return NodeReport(mean, cov, 0, 0, 1.0)
        mean, cov, count, share = mode_estimate(b, self.pp)
        return NodeReport(mean, cov, count, len(b), share)

    def belief(self, agent_id):
        """The KDE as a float64 Mixture: one isotropic component per particle, equal weights."""
        b = self.beliefs[agent_id]
        if b is None:
            return None
        n = len(b)
        cov = (b.h**2)[:, None, None] * np.eye(2)[None]
        return Mixture(np.full(n, -np.log(n)), b.xy.copy(), cov)

    def reset(self, agent_id):
        """Back to the uniform prior, as start() left it."""
        self.beliefs[agent_id] = None
        self.priors[agent_id] = None
        self.used[agent_id] = {}

    def predict(self, agent_id, dt_s, process_var_m2_per_s):
        """Random walk: every kernel widens by q dt per axis; the particles stay."""
        b = self.beliefs[agent_id]
        if b is None:
            self.priors[agent_id] = None
            return
        grow = process_var_m2_per_s * max(dt_s, 0.0)
        self.priors[agent_id] = ParticleBelief(b.xy.copy(), np.sqrt(b.h**2 + grow))
