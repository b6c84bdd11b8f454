"""The iteration driver: runs the schedule and moves broadcasts between nodes.

Two schedules:
- ``slot`` (default): agents update one after another within an iteration,
  each from the newest broadcasts it has heard, as a time-slotted radio runs;
- ``broadcast``: the synchronous schedule of the literature; every agent
  updates from the broadcasts of the previous iteration.

Slots go in the order of the scenario's agent list.  Anchors broadcast every
iteration; an agent broadcasts only when its belief is informative
(censoring is the engine's rule).  An agent that is not present in the epoch
(no ranges: it left, or has not appeared yet) neither updates nor sends.

What is on the air lives for one epoch: run_epoch builds its `air` table
afresh, so no broadcast of an earlier epoch can reach a node.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from .channel import Channel
from .engine import Engine, Inbound
from .network import Link

SCHEDULES = ("slot", "broadcast")


@dataclass
class IterationRecord:
    """Every agent's report after one iteration (arrays ordered like agent_ids)."""

    iteration: int  # 1-based
    mean: np.ndarray  # (N, 2)
    cov: np.ndarray  # (N, 2, 2)
    mode_count: np.ndarray  # (N,)
    mode_weight: np.ndarray  # (N,) share of the belief in the reported mode
    components: np.ndarray  # (N,)
    messages_sent: int  # broadcasts by agents (anchors not counted)
    bytes_sent: int  # their size on the air
    beliefs: list | None = None  # float64 mixtures, when asked for
    frames_lost: int = 0  # deliveries the channel lost
    frames_corrupted: int = 0  # deliveries with flipped bits
    frames_rejected: int = 0  # deliveries the receiver refused (check sequence, bad field)


@dataclass
class EpochRecord:
    t_s: float
    iterations: list[IterationRecord] = field(default_factory=list)
    present: np.ndarray | None = None  # (N,) bool: agent took part (None: everyone)

    def took_part(self, n_agents: int) -> np.ndarray:
        """(N,) bool: which agents took part in the epoch (all of them when present is None)."""
        return np.ones(n_agents, bool) if self.present is None else self.present


def run_epoch(
    engine: Engine,
    agent_ids: list[str],
    anchor_ids: list[str],
    links: dict[str, list[Link]],
    iterations: int,
    schedule: str = "slot",
    t_s: float = 0.0,
    keep_beliefs: bool = False,
    on_iteration=None,
    channel: Channel | None = None,
    present=None,
    hold_last_heard: bool = False,
) -> EpochRecord:
    """Run `iterations` rounds of the schedule; returns every agent's report per round.

    on_iteration(record) is called after each round (progress displays).
    channel: packet loss and bit errors between sender and receiver (None: ideal).
    present: the agents that take part (None: all); the others neither update
    nor broadcast, and the reports keep their last state.
    hold_last_heard: a receiver reuses a neighbour's last broadcast that reached
    it in this epoch when this iteration's is lost or not sent (with a lossy
    channel a tag otherwise hears another subset of neighbours every iteration
    and its estimate jumps about); held messages end with the epoch.
    """
    if schedule not in SCHEDULES:
        raise ValueError(f"unknown schedule {schedule!r}; choose one of {', '.join(SCHEDULES)}")
    wanted = None if present is None else set(present)
    active = list(agent_ids) if wanted is None else [a for a in agent_ids if a in wanted]
    record = EpochRecord(t_s, present=None if wanted is None else np.array([a in wanted for a in agent_ids]))
    # What each node last put on the air in THIS epoch (None: censored, absent, or not yet spoken).
    air = {a: engine.broadcast(a) for a in anchor_ids}
    air.update({a: None for a in agent_ids})
    if channel is not None and channel.ideal:
        channel = None
    # Per receiver, per sender: the last message that reached it this epoch (None: holding is off).
    held = {a: {} for a in agent_ids} if hold_last_heard else None

    def inbox(a: str) -> list[Inbound]:
        return _inbox(links[a], air, channel, None if held is None else held[a])

    for it in range(1, iterations + 1):
        sent = 0
        sent_bytes = 0
        before = _counters(engine, channel)
        if schedule == "broadcast":
            # Everyone speaks once from last iteration's belief, then everyone listens.
            for a in active:
                air[a] = engine.broadcast(a)
            for a in active:
                engine.update(a, inbox(a))
        else:
            for a in active:
                engine.update(a, inbox(a))
                air[a] = engine.broadcast(a)  # a's slot: it speaks right after updating
        for a in agent_ids:
            if air[a] is not None:
                sent += 1
                sent_bytes += engine.message_bytes(air[a])
        snap = _snapshot(engine, agent_ids, it, sent, sent_bytes, keep_beliefs)
        after = _counters(engine, channel)
        snap.frames_lost, snap.frames_corrupted, snap.frames_rejected = (a - b for a, b in zip(after, before))
        record.iterations.append(snap)
        if on_iteration is not None:
            on_iteration(record.iterations[-1])
    return record


def _counters(engine, channel) -> tuple[int, int, int]:
    lost = channel.counts.lost if channel is not None else 0
    corrupted = channel.counts.corrupted if channel is not None else 0
    return lost, corrupted, getattr(engine, "frames_rejected", 0)


def _inbox(links: list[Link], air: dict, channel: Channel | None = None, held: dict | None = None) -> list[Inbound]:
    """What reaches one receiver: each neighbour's message through the channel; with
    `held`, the neighbours heard earlier in the epoch but not now follow, in the
    order first heard."""
    inbox = []
    for link in links:
        msg = air[link.other]
        if msg is not None and channel is not None:
            msg = channel.deliver(msg)
        if msg is not None:
            inbox.append(Inbound(link.other, msg, link.range_m, link.sigma_m, link.other_is_anchor))
    if held is not None:
        fresh = {m.sender for m in inbox}
        stale = [m for sender, m in held.items() if sender not in fresh]
        held.update((m.sender, m) for m in inbox)
        inbox += stale
    return inbox


def _snapshot(engine, agent_ids, it, sent, sent_bytes, keep_beliefs) -> IterationRecord:
    reports = [engine.report(a) for a in agent_ids]
    return IterationRecord(
        iteration=it,
        mean=np.array([r.mean for r in reports]).reshape(-1, 2),
        cov=np.array([r.cov for r in reports]).reshape(-1, 2, 2),
        mode_count=np.array([r.mode_count for r in reports], dtype=int),
        mode_weight=np.array([r.mode_weight for r in reports], dtype=float),
        components=np.array([r.components for r in reports], dtype=int),
        messages_sent=sent,
        bytes_sent=sent_bytes,
        beliefs=[engine.belief(a) for a in agent_ids] if keep_beliefs else None,
    )
