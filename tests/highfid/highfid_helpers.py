"""Small networks for the reference-engine tests (built in memory, our own sites)."""

from __future__ import annotations

import numpy as np
from peerfix.scenario.model import RangeTable, RangingModel, Scenario, Site, Truth

# A loading bay: four wall anchors, three carts that range to every anchor and to each other.
BAY_ANCHORS = np.array([[0.0, 0.0], [24.0, 0.0], [24.0, 18.0], [0.0, 18.0]])
BAY_AGENTS = np.array([[6.0, 5.0], [16.0, 7.0], [11.0, 13.0]])
BAY_BOUNDS = (0.0, 0.0, 24.0, 18.0)


def network(anchors, agents, pairs_anchor, pairs_agent, sigma_m: float, rng=None, bounds=BAY_BOUNDS) -> Scenario:
    """A one-epoch scenario; ranges true plus N(0, sigma^2) noise when rng is given.

    pairs_anchor: (agent, anchor) index pairs that range; pairs_agent: (agent, agent).
    """
    a_ids = [f"wall-{i}" for i in range(len(anchors))]
    g_ids = [f"cart-{i}" for i in range(len(agents))]
    rows = [(g_ids[i], a_ids[k], float(np.linalg.norm(agents[i] - anchors[k]))) for i, k in pairs_anchor]
    rows += [(g_ids[i], g_ids[j], float(np.linalg.norm(agents[i] - agents[j]))) for i, j in pairs_agent]
    r = np.array([d for *_, d in rows])
    if rng is not None:
        r = r + sigma_m * rng.standard_normal(len(rows))
    table = RangeTable(np.zeros(len(rows)), [a for a, _, _ in rows], [b for _, b, _ in rows], r)
    site = Site("loading bay", bounds, RangingModel(sigma_m, 40.0))
    truth = Truth(np.zeros(len(g_ids)), g_ids, np.asarray(agents, float))
    return Scenario(site, a_ids, np.asarray(anchors, float), g_ids, table, truth)


def bay(rng=None, sigma_m: float = 0.1) -> Scenario:
    """Every cart ranges to every anchor and to every other cart."""
    pa = [(i, k) for i in range(len(BAY_AGENTS)) for k in range(len(BAY_ANCHORS))]
    pg = [(i, j) for i in range(len(BAY_AGENTS)) for j in range(i + 1, len(BAY_AGENTS))]
    return network(BAY_ANCHORS, BAY_AGENTS, pa, pg, sigma_m, rng)


def sparse_bay(rng=None, sigma_m: float = 0.1) -> Scenario:
    """Cooperation needed: each cart hears two anchors only, and the other carts."""
    pa = [(0, 0), (0, 3), (1, 0), (1, 1), (2, 2), (2, 3)]
    pg = [(0, 1), (0, 2), (1, 2)]
    return network(BAY_ANCHORS, BAY_AGENTS, pa, pg, sigma_m, rng)
