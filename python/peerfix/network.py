"""Who hears whom: per-epoch neighbour lists built from a scenario's ranges.

Repeated ranges of one pair within an epoch (several measurements, or both
directions) are fused into one link: their mean, with the standard deviation
divided by sqrt(count).  The count is kept so reports can say how often that
happened.  Ranges to anchors mounted above or below the tags are reduced to
the plane after fusing (plane_range).
"""

from __future__ import annotations

import math
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


def plane_range(slant_m: float, sigma_m: float, dz_m: float) -> tuple[float, float]:
    """A slant range between heights dz_m apart, reduced to the plane: (r_h, sigma_h).

    r_h = sqrt(r^2 - dz^2).  First-order error propagation gives
    sigma_h = sigma * r / r_h (dr_h/dr = r / r_h), which grows without bound
    as r_h -> 0; there the spread of r_h is about sqrt(2 |dz| sigma) (from
    r_h^2 ~ 2 |dz| (r - |dz|) with r - |dz| ~ sigma), so sigma_h is the
    smaller of the two.  A slant range at or below |dz| gives r_h = 0 with
    that same sigma_h.
    """
    dz = abs(float(dz_m))
    if dz == 0.0:
        return float(slant_m), float(sigma_m)
    near = float(np.sqrt(2.0 * dz * sigma_m))
    if slant_m <= dz:
        return 0.0, near
    r_h = float(np.sqrt(slant_m * slant_m - dz * dz))
    return r_h, min(sigma_m * slant_m / r_h, near)


def height_offsets(scenario: Scenario) -> dict[str, float]:
    """anchor -> its height above the tags (z_m - tag_height_m); empty when heights are not given."""
    z = scenario.anchor_z_m
    tag_h = scenario.site.tag_height_m
    if z is None or tag_h is None:
        return {}
    return {a: float(z[i]) - tag_h for i, a in enumerate(scenario.anchor_ids) if float(z[i]) != tag_h}


def epoch_links(
    scenario: Scenario,
    t_s: float,
    cooperative: bool = True,
    rows: slice | np.ndarray | None = None,
) -> dict[str, list[Link]]:
    """Links of every agent at epoch t_s, in a fixed order (first appearance in the file).

    cooperative=False drops agent-agent ranges (the anchors-only baseline).
    rows: the epoch's row indices when the caller knows them (a grouped log,
    peerfix.scenario.epochs); else the rows with t_s equal to t_s.
    Anchor ranges with a height difference (anchors.csv z_m, site tag_height_m)
    are fused as slant ranges, then reduced to the plane (plane_range).
    """
    anchors = set(scenario.anchor_ids)
    table = scenario.ranges
    if rows is None:
        rows = np.flatnonzero(table.t_s == t_s)
    elif isinstance(rows, slice):
        rows = range(*rows.indices(len(table)))
    sums: dict[tuple[str, str], list[float]] = defaultdict(list)
    node_a, node_b, range_m = table.node_a, table.node_b, table.range_m
    for r in rows:
        a, b = node_a[r], node_b[r]
        if not cooperative and a not in anchors and b not in anchors:
            continue
        sums[(a, b) if a <= b else (b, a)].append(float(range_m[r]))
    links: dict[str, list[Link]] = {a: [] for a in scenario.agent_ids}
    model = scenario.site.ranging
    dz = height_offsets(scenario)
    for (a, b), values in sums.items():
        n = len(values)
        # np.mean adds fewer than 8 values in turn from 0.0, as sum() does (same bits, far cheaper).
        r = sum(values) / n if n < 8 else float(np.mean(values))
        sigma = range_sigma_m(model, r) / math.sqrt(n)
        h = dz.get(a, dz.get(b))  # at most one end is an anchor
        if h is not None:
            r, sigma = plane_range(r, sigma, h)
        for me, other in ((a, b), (b, a)):
            if me in links:
                links[me].append(Link(other, r, sigma, n, other in anchors))
    return links
