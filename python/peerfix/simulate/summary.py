"""Figures that describe a simulated network (printed by `peerfix simulate`)."""

from __future__ import annotations

from collections import Counter

import numpy as np

from ..scenario.model import Scenario


def summarize(scenario: Scenario) -> dict:
    """Figures of a simulated network: summarize_static, or summarize_moving for many epochs."""
    if not scenario.is_static():
        return summarize_moving(scenario)
    return summarize_static(scenario)


def summarize_moving(scenario: Scenario) -> dict:
    """Counts of a moving scenario: epochs, ranges per epoch, mean ranges per tag and epoch
    (over the epochs the tag is present in, from the truth rows), roles, joiners and leavers."""
    rows = scenario.ranges
    epochs = rows.epochs()
    sim = scenario.site.extra.get("simulation") or {}
    agents = set(scenario.agent_ids)
    ends = np.concatenate([np.asarray(rows.node_a, dtype=object), np.asarray(rows.node_b, dtype=object)])
    agent_rows = int(sum(1 for node in ends if node in agents))
    if scenario.truth is not None:
        present = int(sum(1 for node in scenario.truth.node_id if node in agents))
    else:
        present = len(agents) * len(epochs)
    blocked = rows.extra.get("blocked")
    rate = sim.get("rate_hz")
    duration = sim.get("duration_s", float(epochs[-1] - epochs[0]) if len(epochs) > 1 else 0.0)
    return {
        "site": scenario.site.name,
        "agents": len(scenario.agent_ids),
        "anchors": len(scenario.anchor_ids),
        "ranges": len(rows),
        "epochs": int(len(epochs)),
        "duration_s": float(duration),
        "rate_hz": float(rate) if rate is not None else None,
        "ranges_per_epoch": round(len(rows) / max(len(epochs), 1), 3),
        "mean_agent_degree": round(agent_rows / max(present, 1), 3),
        "roles": dict(Counter(scenario.agent_extra.get("role", ["tag"] * len(scenario.agent_ids)))),
        "late_joiners": len(sim.get("late_joiners", [])),
        "early_leavers": len(sim.get("early_leavers", [])),
        "blocked_share": round(float(np.mean(np.asarray(blocked) == "1")), 4) if blocked else 0.0,
    }


def summarize_static(scenario: Scenario) -> dict:
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
