"""Figures that describe a simulated network (printed by `peerfix simulate`)."""

from __future__ import annotations

from collections import Counter

import numpy as np

from ..scenario.model import Scenario


def summarize(scenario: Scenario) -> dict:
    """Counts: agents, anchors, ranges, mean agent degree, weakly anchored agents, blocked share.

    mean_agent_degree counts every range row an agent takes part in (anchor
    and agent neighbours); agents_lt3_anchor_neighbours counts agents with
    fewer than three anchors in range, which cannot fix their position from
    anchors alone and need their peers; the _los_ variant counts only
    anchor ranges on an unblocked path (the `blocked` column).
    """
    anchors = set(scenario.anchor_ids)
    rows = scenario.ranges
    degree: Counter[str] = Counter()
    anchor_degree: Counter[str] = Counter()
    los_anchor_degree: Counter[str] = Counter()
    blocked = rows.extra.get("blocked") or ["0"] * len(rows)
    for a, b, flag in zip(rows.node_a, rows.node_b, blocked):
        for me, other in ((a, b), (b, a)):
            if me not in anchors:
                degree[me] += 1
                if other in anchors:
                    anchor_degree[me] += 1
                    los_anchor_degree[me] += flag == "0"
    n_agents = len(scenario.agent_ids)
    blocked_share = float(np.mean([v == "1" for v in blocked])) if len(blocked) else 0.0
    return {
        "site": scenario.site.name,
        "agents": n_agents,
        "anchors": len(scenario.anchor_ids),
        "ranges": len(rows),
        "mean_agent_degree": round(sum(degree[t] for t in scenario.agent_ids) / max(n_agents, 1), 3),
        "agents_lt3_anchor_neighbours": sum(1 for t in scenario.agent_ids if anchor_degree[t] < 3),
        "agents_without_anchor_neighbour": sum(1 for t in scenario.agent_ids if anchor_degree[t] == 0),
        "agents_lt3_los_anchor_neighbours": sum(1 for t in scenario.agent_ids if los_anchor_degree[t] < 3),
        "blocked_share": round(blocked_share, 4),
    }
