"""Simulation settings and the named demo sites (`peerfix simulate --preset`).

A preset is a complete SimulationSettings; the CLI and `simulate(...)`
override single fields with dataclasses.replace.  The three demo sites are
our own: an open field, a cold store hall with racking, a mine drift.
"""

from __future__ import annotations

from dataclasses import dataclass, fields

DEPLOYMENTS = ("uniform", "grid", "strip")
ANCHOR_RULES = ("perimeter", "lattice", "open-field-13", "strip-walls", "explicit")


@dataclass(frozen=True)
class SimulationSettings:
    """Everything that fixes a simulated static network, except the seed.

    Geometry
      bounds_m:        site rectangle (xmin, ymin, xmax, ymax).
      obstacles_m:     axis-aligned rectangles agents may not stand in and
                       that block the direct path (racks, pillars).
      obstacle_kind:   name of the obstacle list in site.toml [obstacles].
    Agents
      agents:          number of agents (tags).
      deployment:      "uniform" | "grid" | "strip".
      grid_jitter_m:   standard deviation of the Gaussian jitter per axis (grid).
      strip_length_m, strip_width_m: strip rectangle, centred in the bounds
                       along their long side; 0 = the full side.
      agent_margin_m:  keep agents this far inside the bounds (walls).
      obstacle_clearance_m: keep agents this far from any obstacle face.
    Anchors
      anchor_rule:     one of ANCHOR_RULES.
      anchor_count:    count for "perimeter" and "lattice".
      anchor_spacing_m: spacing along the walls for "strip-walls".
      explicit_anchors: ((id, x, y), ...) for "explicit".
    Radio and ranging
      radio_range_m:   disc radio range; farther pairs never range.
      packet_loss:     probability that one ranging exchange is lost (no row).
      sigma_m, sigma_per_m: line-of-sight error std = sigma_m + sigma_per_m * d.
      blocked_probability: chance that a path with no obstacle on it is blocked
                       anyway (people, forklifts, wall roughness).
      obstacle_blocked_probability: chance that a path through an obstacle is
                       blocked (1 = always).
      blocked_bias_mean_m: mean of the positive exponential bias of a blocked range.
    """

    name: str
    bounds_m: tuple[float, float, float, float]
    agents: int
    anchor_rule: str
    radio_range_m: float
    sigma_m: float
    description: str = ""
    deployment: str = "uniform"
    grid_jitter_m: float = 0.0
    strip_length_m: float = 0.0
    strip_width_m: float = 0.0
    agent_margin_m: float = 0.0
    obstacle_clearance_m: float = 0.0
    anchor_count: int = 0
    anchor_spacing_m: float = 0.0
    explicit_anchors: tuple[tuple[str, float, float], ...] = ()
    sigma_per_m: float = 0.0
    blocked_probability: float = 0.0
    obstacle_blocked_probability: float = 1.0
    blocked_bias_mean_m: float = 1.0
    packet_loss: float = 0.0
    obstacles_m: tuple[tuple[float, float, float, float], ...] = ()
    obstacle_kind: str = "obstacles_m"

    def __post_init__(self) -> None:
        xmin, ymin, xmax, ymax = self.bounds_m
        if not (xmax > xmin and ymax > ymin):
            raise ValueError(f"bounds_m {self.bounds_m}: need xmin < xmax and ymin < ymax")
        if self.agents < 1:
            raise ValueError(f"agents = {self.agents}: need at least one agent")
        if self.deployment not in DEPLOYMENTS:
            raise ValueError(f"deployment '{self.deployment}': choose one of {', '.join(DEPLOYMENTS)}")
        if self.anchor_rule not in ANCHOR_RULES:
            raise ValueError(f"anchor rule '{self.anchor_rule}': choose one of {', '.join(ANCHOR_RULES)}")
        if self.anchor_rule in ("perimeter", "lattice") and self.anchor_count < 1:
            raise ValueError(f"anchor rule '{self.anchor_rule}' needs anchor_count >= 1")
        if self.anchor_rule == "strip-walls" and self.anchor_spacing_m <= 0:
            raise ValueError("anchor rule 'strip-walls' needs anchor_spacing_m > 0")
        if self.anchor_rule == "explicit" and not self.explicit_anchors:
            raise ValueError("anchor rule 'explicit' needs explicit_anchors ((id, x, y), ...)")
        if self.explicit_anchors and self.anchor_rule != "explicit":
            raise ValueError("explicit_anchors given but anchor_rule is not 'explicit'")
        if self.radio_range_m <= 0:
            raise ValueError(f"radio_range_m = {self.radio_range_m}: must be > 0")
        if self.sigma_m <= 0:
            raise ValueError(f"sigma_m = {self.sigma_m}: must be > 0 (the scenario format needs it)")
        if self.blocked_bias_mean_m <= 0:
            raise ValueError(f"blocked_bias_mean_m = {self.blocked_bias_mean_m}: must be > 0")
        for name in ("sigma_per_m", "grid_jitter_m", "strip_length_m", "strip_width_m",
                     "agent_margin_m", "obstacle_clearance_m"):
            if getattr(self, name) < 0:
                raise ValueError(f"{name} = {getattr(self, name)}: must be >= 0")
        for name in ("blocked_probability", "obstacle_blocked_probability", "packet_loss"):
            if not 0.0 <= getattr(self, name) <= 1.0:
                raise ValueError(f"{name} = {getattr(self, name)}: must be in [0, 1]")


def setting_names() -> list[str]:
    """Field names that `simulate(..., **overrides)` accepts."""
    return [f.name for f in fields(SimulationSettings)]


def cold_store_racks_m() -> tuple[tuple[float, float, float, float], ...]:
    """Racking of the cold-store hall (60 m x 36 m).

    Nine back-to-back double racks run along y, each made of two 1.2 m deep
    single racks, with 3.5 m picking aisles between them.  A 4 m cross aisle
    at mid-hall (y 16..20) and 3 m front and back aisles along the walls
    leave room for forklifts.  The first rack starts 5 m from the west wall
    (dock side).
    """
    depth_m = 1.2
    aisle_m = 3.5
    pitch_m = 2 * depth_m + aisle_m
    halves_y = ((3.0, 16.0), (20.0, 33.0))
    racks: list[tuple[float, float, float, float]] = []
    for k in range(9):
        x0 = 5.0 + k * pitch_m
        for x_lo in (x0, x0 + depth_m):
            for y_lo, y_hi in halves_y:
                racks.append((round(x_lo, 3), y_lo, round(x_lo + depth_m, 3), y_hi))
    return tuple(racks)


PRESETS: dict[str, SimulationSettings] = {
    "open-field": SimulationSettings(
        name="open-field",
        description="100 m x 100 m open field, 100 agents, 13 anchors, 20 m radio range, line of sight",
        bounds_m=(0.0, 0.0, 100.0, 100.0),
        agents=100,
        deployment="uniform",
        anchor_rule="open-field-13",
        radio_range_m=20.0,
        sigma_m=0.1,
    ),
    # Tuned over seeds 0-49: the network is always connected, about 5 of the
    # 50 tags have fewer than 3 anchors in radio range and about 39 fewer
    # than 3 in line of sight, so the tags need their peers.
    "cold-store": SimulationSettings(
        name="cold-store",
        description="60 m x 36 m cold store hall with racking, 50 tags in the aisles, 12 wall anchors; "
        "paths through racks are blocked",
        bounds_m=(0.0, 0.0, 60.0, 36.0),
        agents=50,
        deployment="uniform",
        agent_margin_m=0.5,
        obstacle_clearance_m=0.3,
        anchor_rule="perimeter",
        anchor_count=12,
        radio_range_m=22.0,
        sigma_m=0.1,
        blocked_probability=0.0,
        obstacle_blocked_probability=1.0,
        blocked_bias_mean_m=1.0,
        obstacles_m=cold_store_racks_m(),
        obstacle_kind="racks_m",
    ),
    "mine-drift": SimulationSettings(
        name="mine-drift",
        description="400 m x 5 m mine drift, anchors alternating on the walls every 40 m",
        bounds_m=(0.0, 0.0, 400.0, 5.0),
        agents=30,
        deployment="strip",
        strip_width_m=4.0,
        anchor_rule="strip-walls",
        anchor_spacing_m=40.0,
        radio_range_m=35.0,
        sigma_m=0.15,
        blocked_probability=0.05,
        blocked_bias_mean_m=1.0,
    ),
}


def list_presets() -> list[str]:
    """Names of the built-in presets, in a stable order."""
    return list(PRESETS)


def get_preset(name: str) -> SimulationSettings:
    try:
        return PRESETS[name]
    except KeyError:
        raise ValueError(f"unknown preset '{name}': choose one of {', '.join(PRESETS)}") from None
