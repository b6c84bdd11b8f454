"""Build one static scenario (one epoch, t_s = 0) from settings and a seed."""

from __future__ import annotations

import numpy as np

from .. import __version__
from ..scenario.model import RangeTable, RangingModel, Scenario, Site, Truth
from .anchors import place_anchors
from .deployments import deployment_region, deploy
from .geometry import segments_cross_rects
from .presets import SimulationSettings
from .radio import candidate_pairs, survives_loss
from .ranging import StandardDraws, blocked_flags, measure

# Independent random streams, one per stage, split from the one seed
# (numpy SeedSequence.spawn): changing e.g. the packet loss leaves the agent
# positions and the noise of the surviving ranges as they were.
_STREAMS = ("positions", "loss", "noise", "blocked")


def agent_ids(count: int) -> list[str]:
    """tag-000, tag-001, ...: zero-padded to the width the count needs (at least 3)."""
    width = max(3, len(str(count - 1)))
    return [f"tag-{i:0{width}d}" for i in range(count)]


def streams(seed: int) -> dict[str, np.random.Generator]:
    children = np.random.SeedSequence(seed).spawn(len(_STREAMS))
    return {name: np.random.default_rng(child) for name, child in zip(_STREAMS, children)}


def build_scenario(settings: SimulationSettings, seed: int) -> Scenario:
    if not isinstance(seed, (int, np.integer)) or isinstance(seed, bool) or seed < 0:
        raise ValueError(f"seed = {seed!r}: must be a non-negative integer")
    rng = streams(int(seed))

    anc_ids, anc_xy = place_anchors(settings)
    tag_ids = agent_ids(settings.agents)
    tag_xy = deploy(settings, rng["positions"])
    if set(anc_ids) & set(tag_ids):
        raise ValueError("an explicit anchor id clashes with an agent id")
    node_ids = anc_ids + tag_ids
    xy = np.vstack([anc_xy, tag_xy])

    pairs = candidate_pairs(xy, len(anc_ids), settings.radio_range_m)
    p0, p1 = xy[pairs[:, 0]], xy[pairs[:, 1]]
    distance = np.linalg.norm(p1 - p0, axis=1)
    crosses = segments_cross_rects(p0, p1, settings.obstacles_m)

    # Draw for every candidate pair, then drop the lost ones (see _STREAMS).
    keep = survives_loss(rng["loss"].uniform(size=len(pairs)), settings.packet_loss)
    draws = StandardDraws.draw(rng["noise"], rng["blocked"], len(pairs))
    blocked_all = blocked_flags(crosses, draws.u_blocked, settings.blocked_probability,
                                settings.obstacle_blocked_probability)
    range_all = measure(distance, blocked_all, draws, settings.sigma_m, settings.sigma_per_m,
                        settings.blocked_bias_mean_m)
    pairs, blocked, range_m = pairs[keep], blocked_all[keep], range_all[keep]

    m = len(pairs)
    ranges = RangeTable(
        t_s=np.zeros(m),
        node_a=[node_ids[i] for i in pairs[:, 0]],
        node_b=[node_ids[j] for j in pairs[:, 1]],
        range_m=range_m,
        extra={"blocked": ["1" if b else "0" for b in blocked]},
        line=np.zeros(m, dtype=int),
    )
    truth = Truth(t_s=np.zeros(len(node_ids)), node_id=list(node_ids), xy_m=xy.copy())
    site = Site(
        name=settings.name,
        bounds_m=tuple(float(v) for v in settings.bounds_m),
        ranging=ranging_model(settings, crosses, range_m),
        extra=site_extra(settings, int(seed), len(anc_ids)),
    )
    return Scenario(site=site, anchor_ids=anc_ids, anchor_xy_m=anc_xy, agent_ids=tag_ids,
                    ranges=ranges, truth=truth)


def ranging_model(settings: SimulationSettings, crosses: np.ndarray, range_m: np.ndarray) -> RangingModel:
    """The RangingModel the estimators read.

    With obstacles the blocked share depends on the layout, so blocked_probability
    is the expected share over this network's candidate pairs:
    share_through_obstacles * obstacle_blocked_probability + rest * blocked_probability.
    max_range_m stays unset (the format's default, 2 * radio range) unless a
    simulated range exceeds that; then it is raised to the next whole metre so
    the file can hold every row.
    """
    p = settings.blocked_probability
    if len(settings.obstacles_m) and len(crosses):
        share = float(np.mean(crosses))
        p = round(share * settings.obstacle_blocked_probability + (1 - share) * p, 4)
    max_range_m = None
    if len(range_m) and float(np.max(range_m)) > 2.0 * settings.radio_range_m:
        max_range_m = float(np.ceil(np.max(range_m)))
    return RangingModel(
        sigma_m=float(settings.sigma_m),
        radio_range_m=float(settings.radio_range_m),
        sigma_per_m=float(settings.sigma_per_m),
        blocked_probability=float(p),
        blocked_bias_mean_m=float(settings.blocked_bias_mean_m),
        max_range_m=max_range_m,
    )


def site_extra(settings: SimulationSettings, seed: int, n_anchors: int) -> dict:
    """site.toml tables that record how the scenario was made (TOML-safe types only)."""
    sim: dict = {
        "generator": f"peerfix simulate {__version__}",
        "preset": settings.name,
        "seed": seed,
        "deployment": settings.deployment,
        "agents": int(settings.agents),
        "anchors": int(n_anchors),
        "anchor_rule": settings.anchor_rule,
        "radio_range_m": float(settings.radio_range_m),
        "packet_loss": float(settings.packet_loss),
        "sigma_m": float(settings.sigma_m),
        "sigma_per_m": float(settings.sigma_per_m),
        # [ranging] blocked_probability is the resulting share; these are the two causes.
        "open_path_blocked_probability": float(settings.blocked_probability),
        "obstacle_blocked_probability": float(settings.obstacle_blocked_probability),
        "blocked_bias_mean_m": float(settings.blocked_bias_mean_m),
        "agent_margin_m": float(settings.agent_margin_m),
        "obstacle_clearance_m": float(settings.obstacle_clearance_m),
        "negative_ranges": "clipped to 0 m",
    }
    if settings.description:
        sim["description"] = settings.description
    if settings.anchor_rule in ("perimeter", "lattice"):
        sim["anchor_count"] = int(settings.anchor_count)
    if settings.anchor_rule == "strip-walls":
        sim["anchor_spacing_m"] = float(settings.anchor_spacing_m)
    if settings.deployment == "grid":
        sim["grid_jitter_m"] = float(settings.grid_jitter_m)
    if settings.deployment in ("uniform", "strip"):
        sim["region_m"] = [float(v) for v in deployment_region(settings)]
    extra: dict = {"simulation": sim}
    if settings.obstacles_m:
        extra["obstacles"] = {settings.obstacle_kind: [[float(v) for v in r] for r in settings.obstacles_m]}
    return extra
