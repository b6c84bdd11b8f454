"""Node state and one update in float64: what a tag does in its slot.

An agent's belief is its prior times one ring message per neighbour (the
sum-product rule with the neighbours' beliefs standing in for their messages,
as broadcast belief propagation does).  The prior is uniform over the site's
box (`None` here) or, when tracking, the predicted belief of the last epoch.

Mirrors c_core/src/pfx_node.c.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .mixture import Mixture, PointEstimate, max_eig2, point_estimate, reduce_to
from .params import EstimatorParams
from .ranging import first_ring, multiply_by_rings, ring_messages


@dataclass(frozen=True)
class Received:
    """One neighbour's broadcast as the agent uses it."""

    sender: str
    belief: Mixture  # as sent: normalised log-weights, inflated covariances
    range_m: float
    sigma_m: float
    is_anchor: bool


@dataclass(frozen=True)
class BlockedModel:
    """Blocked-path share and mean bias for the robust likelihood (0 = off)."""

    weight: float = 0.0
    bias_m: float = 0.0  # the physical model: mean of the exponential bias
    ring_scale: float = 1.0  # the ring engines' blocked ring sits ring_offset_m short of the range

    @property
    def ring_offset_m(self) -> float:
        """Offset (and extra standard deviation) of the blocked-path ring: the
        float twin, the fixed core and the particle engine all use this ring,
        so the particle engine measures the belief approximation alone."""
        return self.bias_m * self.ring_scale


def spread_m(belief: Mixture) -> float:
    """Largest standard deviation of the heaviest component (0 for a point)."""
    k = int(np.argmax(belief.logw))
    return float(np.sqrt(max(max_eig2(belief.cov[k : k + 1])[0], 0.0)))


def is_informative(belief: Mixture | None, params: EstimatorParams) -> bool:
    """Censoring rule: send only when the heaviest component is sharp.

    Judged per component, not on the whole mixture: a two-anchor agent is
    bimodal with a huge mixture spread, yet each mode is sharp and useful.
    """
    return belief is not None and len(belief) > 0 and spread_m(belief) <= params.censor_spread_m


def outgoing(belief: Mixture | None, params: EstimatorParams) -> Mixture | None:
    """The message a node broadcasts: its belief with inflated spread, or None (censored)."""
    if not is_informative(belief, params):
        return None
    return Mixture(belief.logw.copy(), belief.mean.copy(), belief.cov * params.broadcast_inflation)


def anchor_message(xy) -> Mixture:
    """An anchor's broadcast: a point (zero covariance) at its surveyed position."""
    return Mixture.single(np.asarray(xy, float), np.zeros((2, 2)))


def order_for_update(inbox: list[Received]) -> list[Received]:
    """Most informative first: anchors, then agents by spread; ties keep arrival order."""
    return sorted(inbox, key=lambda m: (0 if m.is_anchor else 1, 0.0 if m.is_anchor else spread_m(m.belief)))


def update(
    prior: Mixture | None,
    inbox: list[Received],
    bounds_m,
    params: EstimatorParams,
    blocked: BlockedModel = BlockedModel(),
) -> Mixture | None:
    """A new belief from the prior and every received broadcast; None if nothing was heard.

    At most params.max_neighbours broadcasts are used, the most informative.
    The first message turns a flat prior into a whole ring of arcs, kept whole
    until a second message cuts it down; after each later message the working
    mixture is pruned and merged back to the working cap; the result is
    reduced to K components.
    """
    work = prior
    for msg in order_for_update(inbox)[: params.max_neighbours]:
        belief = message_belief(msg.belief, params)
        rings = ring_messages(belief, msg.range_m, msg.sigma_m, params, blocked.weight, blocked.ring_offset_m)
        if work is None:
            ring = first_ring(rings, bounds_m, params)
            work = ring.normalised() if len(ring) else None
            continue
        candidates = multiply_by_rings(work, rings, params)
        reduced = reduce_to(
            candidates, params.working_cap, params.prune_log_ratio, params.candidate_cap, params.merge_gate_sigma2
        )
        if len(reduced) and np.isfinite(reduced.logw).all():
            work = reduced
    if work is None:
        return None
    return reduce_to(work, params.max_components, params.prune_log_ratio, None, params.merge_gate_sigma2)


def message_belief(belief: Mixture, params: EstimatorParams) -> Mixture:
    """The belief a neighbour's rings are made of.

    A neighbour whose belief reads off as one mode (point_estimate, the
    user's read-off) counts as that mode: one component with the mode's
    moments, one ring instead of K.  A multimodal belief keeps every
    component as a ring.  Cuts the products of an update by up to K.
    """
    if len(belief) <= 1:
        return belief
    pe = point_estimate(belief, params.mode_gate_sigma2, params.mode_min_weight)
    if pe.mode_count != 1:
        return belief
    return Mixture.single(pe.mean, pe.cov)


def predict(belief: Mixture | None, dt_s: float, process_var_m2_per_s: float) -> Mixture | None:
    """Random-walk prediction: each component's covariance grows by q dt per axis."""
    if belief is None:
        return None
    grow = process_var_m2_per_s * max(dt_s, 0.0) * np.eye(2)
    return Mixture(belief.logw.copy(), belief.mean.copy(), belief.cov + grow)


def prior_moments(bounds_m) -> tuple[np.ndarray, np.ndarray]:
    """Mean and covariance of the uniform prior over the site's box."""
    xmin, ymin, xmax, ymax = bounds_m
    mean = np.array([(xmin + xmax) / 2, (ymin + ymax) / 2])
    cov = np.diag([(xmax - xmin) ** 2 / 12.0, (ymax - ymin) ** 2 / 12.0])
    return mean, cov


def read_estimate(belief: Mixture | None, bounds_m, params: EstimatorParams):
    """Point estimate a user acts on, with its covariance and mode count (0 = prior only)."""
    if belief is None:
        mean, cov = prior_moments(bounds_m)
        return PointEstimate(mean, cov, 0, 1.0)
    return point_estimate(belief, params.mode_gate_sigma2, params.mode_min_weight)
