"""Who hears whom: per-epoch neighbour lists built from a scenario's ranges.

Repeated ranges of one pair within an epoch (several measurements, or both
directions) are fused into one link: their mean, with the standard deviation
divided by sqrt(count).  The count is kept so reports can say how often that
happened.
"""

from __future__ import annotations

from collections import defaultdict
from dataclasses import dataclass

import numpy as np

from .scenario.model import RangingModel, Scenario


@dataclass(frozen=True)
class Link:
    other: str
    range_m: float
    sigma_m: float
    measurements: int
    other_is_anchor: bool


def range_sigma_m(model: RangingModel, range_m: float) -> float:
    """Line-of-sight standard deviation of one range: sigma_m + sigma_per_m * range."""
    return model.sigma_m + model.sigma_per_m * max(range_m, 0.0)


def epoch_links(scenario: Scenario, t_s: float, cooperative: bool = True) -> dict[str, list[Link]]:
    """Links of every agent at epoch t_s, in a fixed order (first appearance in the file).

    cooperative=False drops agent-agent ranges (the anchors-only baseline).
    """
    anchors = set(scenario.anchor_ids)
    table = scenario.ranges
    rows = np.flatnonzero(table.t_s == t_s)
    sums: dict[tuple[str, str], list[float]] = defaultdict(list)
    for r in rows:
        a, b = table.node_a[r], table.node_b[r]
        if not cooperative and a not in anchors and b not in anchors:
            continue
        sums[(a, b) if a <= b else (b, a)].append(float(table.range_m[r]))
    links: dict[str, list[Link]] = {a: [] for a in scenario.agent_ids}
    model = scenario.site.ranging
    for (a, b), values in sums.items():
        n = len(values)
        r = float(np.mean(values))
        sigma = range_sigma_m(model, r) / np.sqrt(n)
        for me, other in ((a, b), (b, a)):
            if me in links:
                links[me].append(Link(other, r, sigma, n, other in anchors))
    return links
