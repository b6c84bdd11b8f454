"""The engine interface: what the driver needs from an estimator.

The driver owns the schedule and moves broadcasts between nodes; an engine
owns the nodes' beliefs in its own representation (numpy mixtures for the
float twin, C structs for the fixed-point core, bytes on the air).  A
broadcast is opaque to the driver: it only hands it from sender to receiver.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Protocol

import numpy as np


@dataclass(frozen=True)
class NodeReport:
    """What a node reports after an update, in SI units."""

    mean: np.ndarray  # (2,) point estimate
    cov: np.ndarray  # (2, 2) its covariance
    mode_count: int  # 0: still the prior (heard nothing)
    components: int  # components in the belief
    mode_weight: float  # share of the belief in the reported mode


@dataclass(frozen=True)
class Inbound:
    """One broadcast heard by an agent, with the range measured to its sender."""

    sender: str
    message: Any
    range_m: float
    sigma_m: float
    is_anchor: bool


class Engine(Protocol):
    name: str

    def start(self, bounds_m, anchors: dict[str, np.ndarray], agent_ids: list[str]) -> None:
        """Create the nodes: anchors at their positions, agents at the prior."""

    def broadcast(self, node_id: str) -> Any | None:
        """What node_id sends now, or None when its belief is censored."""

    def message_bytes(self, message: Any) -> int:
        """Size of one broadcast on the air (bytes)."""

    def update(self, agent_id: str, inbox: list[Inbound]) -> None:
        """Recompute agent_id's belief from its prior and the broadcasts heard."""

    def report(self, agent_id: str) -> NodeReport:
        """The agent's current point estimate."""

    def belief(self, agent_id: str):
        """The agent's current belief as a float64 Mixture (None: prior), for plots and comparison."""

    def predict(self, agent_id: str, dt_s: float, process_var_m2_per_s: float) -> None:
        """Move the agent's prior forward by dt_s (tracking between epochs)."""

    def reset(self, agent_id: str) -> None:
        """Put agent_id back at the prior, as start() left it (belief and tracking prior cleared).

        The runner calls it when an agent was silent for longer than the
        silence timeout, or when its predicted spread outgrew the site.
        """

