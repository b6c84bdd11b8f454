"""The float64 twin as an engine for the driver."""

from __future__ import annotations

import numpy as np

from ..engine import Inbound, NodeReport
from .mixture import Mixture
from .node import BlockedModel, Received, anchor_message, outgoing, predict, read_estimate, update
from .params import EstimatorParams

# Bytes a float64 mixture would take if sent as is (weight, mean, covariance
# in float32 as a plain parametric message would): 4 * (1 + 2 + 3) per component.
FLOAT_COMPONENT_BYTES = 24


class FloatEngine:
    name = "float"

    def __init__(self, params: EstimatorParams, blocked: BlockedModel = BlockedModel()):
        self.params = params
        self.blocked = blocked
        self.bounds_m = None
        self.anchors: dict[str, np.ndarray] = {}
        self.beliefs: dict[str, Mixture | None] = {}
        self.priors: dict[str, Mixture | None] = {}

    def start(self, bounds_m, anchors, agent_ids):
        self.bounds_m = tuple(float(b) for b in bounds_m)
        self.anchors = {a: np.asarray(xy, float) for a, xy in anchors.items()}
        self.beliefs = {a: None for a in agent_ids}
        self.priors = {a: None for a in agent_ids}

    def reset(self, agent_id):
        """Back to the flat prior over the site, as start() left the agent."""
        self.beliefs[agent_id] = None
        self.priors[agent_id] = None

    def broadcast(self, node_id):
        if node_id in self.anchors:
            return anchor_message(self.anchors[node_id])
        return outgoing(self.beliefs[node_id], self.params)

    def message_bytes(self, message) -> int:
        return FLOAT_COMPONENT_BYTES * len(message)

    def update(self, agent_id, inbox: list[Inbound]):
        received = [Received(m.sender, m.message, m.range_m, m.sigma_m, m.is_anchor) for m in inbox]
        self.beliefs[agent_id] = update(self.priors[agent_id], received, self.bounds_m, self.params, self.blocked)

    def report(self, agent_id) -> NodeReport:
        belief = self.beliefs[agent_id]
        est = read_estimate(belief, self.bounds_m, self.params)
        return NodeReport(est.mean, est.cov, est.mode_count, 0 if belief is None else len(belief), est.mode_weight)

    def belief(self, agent_id):
        return self.beliefs[agent_id]

    def predict(self, agent_id, dt_s, process_var_m2_per_s):
        self.priors[agent_id] = predict(self.beliefs[agent_id], dt_s, process_var_m2_per_s)
