"""What a report needs to know about the site: obstacles, blocked pairs, plain facts."""

from __future__ import annotations

import numpy as np

from ..scenario.model import Scenario
from ..simulate import summarize

Rect = tuple[float, float, float, float]  # xmin, ymin, xmax, ymax


def obstacle_rects(scenario: Scenario) -> dict[str, list[Rect]]:
    """site.toml [obstacles] lists by name (e.g. "racks_m"), as rectangles; {} when none."""
    table = scenario.site.extra.get("obstacles") or {}
    out: dict[str, list[Rect]] = {}
    for name, rows in table.items():
        try:
            rects = [tuple(float(v) for v in r) for r in rows]
        except (TypeError, ValueError):
            continue  # not a rectangle list: not ours to draw
        rects = [r for r in rects if len(r) == 4]
        if rects:
            out[name] = rects  # type: ignore[assignment]
    return out


def obstacle_noun(name: str) -> str:
    """'racks_m' -> 'rack', 'pillars_m' -> 'pillar', 'obstacles_m' -> 'obstacle'."""
    base = name.removesuffix("_m")
    return base[:-1] if base.endswith("s") else base


def blocked_pairs(scenario: Scenario, t_s: float) -> dict[frozenset, bool]:
    """Pair -> True when any of its range rows at t_s is flagged blocked (the simulator's
    `blocked` column); empty when the scenario does not say."""
    flags = scenario.ranges.extra.get("blocked")
    if flags is None:
        return {}
    table = scenario.ranges
    out: dict[frozenset, bool] = {}
    for r in np.flatnonzero(table.t_s == t_s):
        key = frozenset((table.node_a[r], table.node_b[r]))
        out[key] = out.get(key, False) or flags[r] == "1"
    return out


def site_facts(scenario: Scenario) -> dict:
    """Plain facts for the report's site paragraph (the simulator's summary plus geometry)."""
    facts = summarize(scenario)
    facts["width_m"] = scenario.site.width_m
    facts["height_m"] = scenario.site.height_m
    facts["obstacles"] = {name: len(rects) for name, rects in obstacle_rects(scenario).items()}
    facts["radio_range_m"] = scenario.site.ranging.radio_range_m
    facts["sigma_m"] = scenario.site.ranging.sigma_m
    facts["has_blocked_flags"] = "blocked" in scenario.ranges.extra
    sim = scenario.site.extra.get("simulation") or {}
    facts["description"] = sim.get("description", "")
    return facts
