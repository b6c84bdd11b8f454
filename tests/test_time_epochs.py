"""Time: epochs from a log, the walk-speed prediction, nodes appearing and
leaving, the silence timeout, messages that never outlive their epoch, and
the latency to first fix (docs/scenario-format.md, "Time and epochs")."""

from __future__ import annotations

import csv
import json

import numpy as np
import pytest

from peerfix.driver import run_epoch
from peerfix.engine import NodeReport
from peerfix.network import Link
from peerfix.reference import EstimatorParams, FloatEngine
from peerfix.runner import run_scenario, walk_process_var, write_outputs
from peerfix.scenario.model import RangeTable, RangingModel, Scenario, Site, Tracking, Truth

BOX = (0.0, 0.0, 20.0, 20.0)
ANCHORS = {"bay-1": (0.0, 0.0), "bay-2": (20.0, 0.0), "bay-3": (0.0, 20.0), "bay-4": (20.0, 20.0)}
AGENTS = ["fork-1", "fork-2", "fork-3"]


def scenario(track: dict[str, dict[float, tuple[float, float]]], heard=None, tracking=Tracking()) -> Scenario:
    """Exact ranges from each agent to the anchors it hears at each of its times, with truth.

    track: agent -> {t_s: (x, y)}; an agent has no rows at a time it is not in.
    heard: (agent, t_s) -> anchor names (default: all four).
    """
    heard = heard or {}
    rows, truth = [], []
    for t in sorted({t for pos in track.values() for t in pos}):
        for agent in AGENTS:
            if t not in track.get(agent, {}):
                continue
            xy = np.array(track[agent][t])
            truth.append((t, agent, xy))
            for anchor in heard.get((agent, t), ANCHORS):
                rows.append((t, agent, anchor, float(np.hypot(*(xy - ANCHORS[anchor])))))
    t, a, b, r = zip(*rows)
    return Scenario(
        site=Site("cold store aisle 4", BOX, RangingModel(0.1, 40.0), tracking=tracking),
        anchor_ids=list(ANCHORS),
        anchor_xy_m=np.array(list(ANCHORS.values())),
        agent_ids=list(AGENTS),
        ranges=RangeTable(np.array(t, float), list(a), list(b), np.array(r, float)),
        truth=Truth(np.array([x[0] for x in truth]), [x[1] for x in truth], np.array([x[2] for x in truth])),
    )


def still(xy, times):
    return {t: xy for t in times}


class Recorder(FloatEngine):
    """The float twin, recording which agent updated, broadcast, predicted and reset at which epoch."""

    def __init__(self):
        super().__init__(EstimatorParams())
        self.calls: list[tuple] = []
        self.epoch = 0
        self.prior_at_update: dict[tuple[str, int], object] = {}

    def update(self, agent_id, inbox):
        self.calls.append(("update", agent_id, self.epoch))
        self.prior_at_update.setdefault((agent_id, self.epoch), self.priors[agent_id])
        super().update(agent_id, inbox)

    def broadcast(self, node_id):
        if node_id not in self.anchors:
            self.calls.append(("broadcast", node_id, self.epoch))
        return super().broadcast(node_id)

    def predict(self, agent_id, dt_s, q):
        self.calls.append(("predict", agent_id, self.epoch, dt_s, q))
        super().predict(agent_id, dt_s, q)

    def reset(self, agent_id):
        self.calls.append(("reset", agent_id, self.epoch))
        self.beliefs[agent_id] = None
        self.priors[agent_id] = None

    def of(self, kind, agent):
        return [c for c in self.calls if c[0] == kind and c[1] == agent]


def run_recorded(sc, iterations=2, **kw):
    eng = Recorder()

    def progress(done, _total):
        eng.epoch = done // iterations  # the next call belongs to this epoch

    res = run_scenario(sc, eng, iterations=iterations, progress=progress, **kw)
    return eng, res


TIMES = [0.0, 1.0, 2.0, 3.0]


def test_exact_t_s_is_the_default_grouping():
    sc = scenario({"fork-1": still((5.0, 5.0), TIMES), "fork-2": still((15.0, 5.0), TIMES)})
    res = run_scenario(sc, "float", iterations=1)
    assert [e.t_s for e in res.epochs] == TIMES
    assert res.timing["epoch_window_s"] == 0.0 and res.log.fired() == {}


def test_epoch_window_from_the_site_and_from_the_argument():
    # fork-2's clock runs 30 ms late: within a 0.1 s window it shares fork-1's epochs.
    track = {"fork-1": still((5.0, 5.0), TIMES), "fork-2": still((15.0, 5.0), [t + 0.03 for t in TIMES])}
    sc = scenario(track, tracking=Tracking(epoch_window_s=0.1))
    res = run_scenario(sc, "float", iterations=1)
    assert [e.t_s for e in res.epochs] == TIMES
    assert res.log.rules["jitter_grouped"].count == 4 * 4  # fork-2's rows: 4 anchors x 4 epochs
    assert all(e.present.tolist() == [True, True, False] for e in res.epochs)
    exact = run_scenario(sc, "float", iterations=1, epoch_window_s=0.0)  # the argument wins
    assert len(exact.epochs) == 8


def test_walk_speed_sets_the_prediction():
    sc = scenario({"fork-1": still((5.0, 5.0), [0.0, 0.5, 1.5])})
    eng, res = run_recorded(sc, walk_speed_mps=2.0)
    predicts = eng.of("predict", "fork-1")
    assert [(c[3], c[4]) for c in predicts] == [(0.5, pytest.approx(2.0**2 * 0.5 / 2)), (1.0, pytest.approx(2.0**2 * 1.0 / 2))]
    # q * dt = (v dt)^2 / 2 per axis: the RMS step the prior allows is v * dt.
    assert walk_process_var(2.0, 0.5) * 0.5 * 2 == pytest.approx((2.0 * 0.5) ** 2)
    assert res.timing["motion"]["walk_speed_mps"] == 2.0
    legacy_eng, legacy = run_recorded(sc, process_var_m2_per_s=0.3)
    assert [c[4] for c in legacy_eng.of("predict", "fork-1")] == [0.3, 0.3]
    assert legacy.timing["motion"] == {"model": "random walk", "process_var_m2_per_s": 0.3}


def test_agent_appearing_starts_from_the_prior():
    track = {"fork-1": still((5.0, 5.0), TIMES), "fork-3": still((12.0, 14.0), TIMES[2:])}
    eng, res = run_recorded(scenario(track))
    # No call of any kind for fork-3 before epoch 2, and no prediction at its first epoch.
    assert {c[2] for c in eng.calls if c[1] == "fork-3"} == {2, 3}
    assert [c[2] for c in eng.of("predict", "fork-3")] == [3]
    assert eng.prior_at_update[("fork-3", 2)] is None  # the uniform prior over the site
    present = [e.present[2] for e in res.epochs]
    assert present == [False, False, True, True]
    assert res.epochs[1].iterations[-1].mode_count[2] == 0  # still the prior before it appears
    assert np.hypot(*(res.epochs[2].iterations[-1].mean[2] - (12.0, 14.0))) < 0.2


def test_agent_leaving_neither_updates_nor_sends():
    # fork-2 ranges to fork-1 in epochs 0 and 1, then leaves.
    track = {"fork-1": still((5.0, 5.0), TIMES), "fork-2": still((15.0, 5.0), TIMES[:2])}
    sc = scenario(track)
    extra = [(t, "fork-2", "fork-1", 10.0) for t in TIMES[:2]]
    r = sc.ranges
    sc.ranges = RangeTable(
        np.concatenate([r.t_s, [x[0] for x in extra]]),
        r.node_a + [x[1] for x in extra],
        r.node_b + [x[2] for x in extra],
        np.concatenate([r.range_m, [x[3] for x in extra]]),
    )
    eng, res = run_recorded(sc)
    assert {c[2] for c in eng.calls if c[1] == "fork-2"} == {0, 1}
    held = res.epochs[1].iterations[-1]
    for e in res.epochs[2:]:
        last = e.iterations[-1]
        np.testing.assert_array_equal(last.mean[1], held.mean[1])  # its report is held, not updated
        assert last.messages_sent == 1  # fork-1 only
    assert res.timing["resets_total"] == 0


def test_silent_longer_than_the_timeout_restarts_from_the_prior():
    times = [float(t) for t in range(14)]  # fork-1 every second; fork-2 silent from 0 s to 13 s
    track = {"fork-1": still((5.0, 5.0), times), "fork-2": still((15.0, 5.0), [0.0, 13.0])}
    eng, res = run_recorded(scenario(track), silence_timeout_s=10.0)
    # Reset once its silence passes 10 s (epoch 11, t = 11 s), so it is back at the prior when it returns.
    assert [c[2] for c in eng.of("reset", "fork-2")] == [11]
    assert eng.of("predict", "fork-2") == []
    assert eng.prior_at_update[("fork-2", 13)] is None
    assert res.epochs[12].iterations[-1].mode_count[1] == 0  # reported as the prior while still away
    assert res.timing["resets"] == {"fork-2": {"silence": 1, "spread": 0}}
    # With a longer timeout the same silence is bridged by one prediction over 13 s.
    eng, res = run_recorded(scenario(track), silence_timeout_s=20.0)
    assert eng.of("reset", "fork-2") == []
    assert [c[3] for c in eng.of("predict", "fork-2")] == [13.0]


def test_prediction_wider_than_the_site_restarts_from_the_prior():
    # 20 m x 20 m: the prior's variance per axis is 400 / 12 = 33.3 m^2; a 30 m/s walk over 1 s spreads 450 m^2.
    sc = scenario({"fork-1": still((5.0, 5.0), [0.0, 1.0])})
    eng, res = run_recorded(sc, walk_speed_mps=30.0)
    assert [c[2] for c in eng.of("reset", "fork-1")] == [1]
    assert res.timing["resets"] == {"fork-1": {"silence": 0, "spread": 1}}


class TaggingEngine:
    """A stub engine whose broadcasts carry the epoch they were made in; it records what it hears."""

    name = "tagging"

    def __init__(self):
        self.epoch = 0
        self.heard: list[tuple[int, str, tuple]] = []  # (epoch of the update, receiver, message)

    def start(self, bounds_m, anchors, agent_ids):
        self.anchors = set(anchors)

    def broadcast(self, node_id):
        return (self.epoch, node_id)

    def message_bytes(self, message):
        return 1

    def update(self, agent_id, inbox):
        self.heard.extend((self.epoch, agent_id, m.message) for m in inbox)

    def report(self, agent_id):
        return NodeReport(np.zeros(2), np.eye(2), 1, 1, 1.0)

    def belief(self, agent_id):
        return None

    def predict(self, agent_id, dt_s, q):
        pass

    def reset(self, agent_id):
        pass


@pytest.mark.parametrize("schedule", ["slot", "broadcast"])
def test_messages_never_outlive_their_epoch(schedule):
    track = {a: still((4.0 + 5 * k, 6.0), TIMES) for k, a in enumerate(AGENTS)}
    sc = scenario(track)
    r = sc.ranges
    # A chain of agent-agent ranges, so agents hear each other in every epoch.
    pairs = [(t, "fork-1", "fork-2", 5.0) for t in TIMES] + [(t, "fork-2", "fork-3", 5.0) for t in TIMES]
    sc.ranges = RangeTable(
        np.concatenate([r.t_s, [p[0] for p in pairs]]),
        r.node_a + [p[1] for p in pairs],
        r.node_b + [p[2] for p in pairs],
        np.concatenate([r.range_m, [p[3] for p in pairs]]),
    )
    eng = TaggingEngine()
    iterations = 3

    def progress(done, _total):
        eng.epoch = done // iterations

    run_scenario(sc, eng, iterations=iterations, schedule=schedule, progress=progress, score=False)
    from_agents = [h for h in eng.heard if h[2][1] in AGENTS]
    assert {h[0] for h in from_agents} == set(range(len(TIMES)))  # agents did hear agents in every epoch
    assert all(epoch == message[0] for epoch, _receiver, message in eng.heard)


def test_absent_sender_is_not_heard_even_with_a_stale_link():
    # run_epoch directly: fork-1 keeps a link to fork-2, but fork-2 is not present this epoch.
    eng = TaggingEngine()
    eng.start(BOX, ANCHORS, AGENTS)
    links = {a: [] for a in AGENTS}
    links["fork-1"] = [Link("fork-2", 5.0, 0.1, 1, False), Link("bay-1", 7.0, 0.1, 1, True)]
    for schedule in ("slot", "broadcast"):
        eng.heard.clear()
        record = run_epoch(eng, AGENTS, list(ANCHORS), links, 2, schedule, present=["fork-1"])
        assert [h[2][1] for h in eng.heard] == ["bay-1", "bay-1"]
        assert record.present.tolist() == [True, False, False]
        assert all(it.messages_sent == 1 for it in record.iterations)


def test_latency_to_first_fix():
    # fork-1 hears all four anchors from its first epoch; fork-2 hears one anchor (a ring) for
    # two epochs, then all four; fork-3 appears at t = 2 s with four anchors.
    track = {
        "fork-1": still((5.0, 5.0), TIMES),
        "fork-2": still((6.0, 14.0), TIMES),  # the ring's reported point lands near (13.6, 5.6): far off
        "fork-3": still((12.0, 14.0), TIMES[2:]),
    }
    heard = {("fork-2", 0.0): ["bay-1"], ("fork-2", 1.0): ["bay-1"]}
    res = run_scenario(scenario(track, heard), "float", iterations=2)
    lat = res.latency["agents"]
    assert (lat["fork-1"]["first_range_t_s"], lat["fork-1"]["latency_s"], lat["fork-1"]["latency_within_1m_s"]) == (0.0, 0.0, 0.0)
    assert (lat["fork-2"]["first_range_t_s"], lat["fork-2"]["latency_s"], lat["fork-2"]["latency_within_1m_s"]) == (0.0, 2.0, 2.0)
    assert (lat["fork-3"]["first_range_t_s"], lat["fork-3"]["latency_s"]) == (2.0, 0.0)
    assert res.latency["agents_fixed"] == 3 and res.latency["latency_max_s"] == 2.0
    assert res.latency["criterion"] == {"mode_weight_min": 0.9, "sd_max_m": 0.5, "error_max_m": 1.0}


def test_estimates_for_every_epoch_and_metrics(tmp_path):
    track = {"fork-1": still((5.0, 5.0), TIMES), "fork-3": still((12.0, 14.0), TIMES[2:])}
    res = run_scenario(scenario(track), "float", iterations=2)
    doc = write_outputs(res, tmp_path)
    with open(tmp_path / "estimates.csv") as f:
        rows = list(csv.DictReader(f))
    assert len(rows) == len(TIMES) * 2 * len(AGENTS)  # every agent, iteration and epoch
    assert sorted({float(r["t_s"]) for r in rows}) == TIMES
    present = {(float(r["t_s"]), r["node_id"]): r["present"] for r in rows if r["iteration"] == "2"}
    assert [present[(t, "fork-3")] for t in TIMES] == ["0", "0", "1", "1"]
    assert all(present[(t, "fork-2")] == "0" for t in TIMES)
    on_disk = json.loads((tmp_path / "metrics.json").read_text())
    # Scored per epoch: the present agents with truth (fork-1; then fork-1 and fork-3).
    assert [e["iterations"][-1]["n_agents"] for e in on_disk["epochs"]] == [1, 1, 2, 2]
    assert on_disk["time"]["epochs"] == 4 and on_disk["latency"]["agents_heard"] == 2
    assert doc["log"]["rows_used"] == len(res.scenario.ranges)


@pytest.mark.parametrize("engine", ["float", "fixed"])
def test_both_engines_reset_and_refix(engine):
    times = [float(t) for t in range(14)]
    track = {"fork-1": still((5.0, 5.0), times), "fork-2": still((15.0, 5.0), [0.0, 1.0, 13.0])}
    res = run_scenario(scenario(track), engine, iterations=2, walk_speed_mps=1.0, silence_timeout_s=10.0)
    assert res.timing["resets"] == {"fork-2": {"silence": 1, "spread": 0}}
    before, away, back = (res.epochs[k].iterations[-1] for k in (1, 12, 13))  # silent 11 s at 12 s
    assert before.mode_count[1] >= 1 and away.mode_count[1] == 0  # reset to the prior while away
    assert np.hypot(*(back.mean[1] - (15.0, 5.0))) < 0.2
    assert res.latency["agents"]["fork-2"]["latency_s"] == 0.0
