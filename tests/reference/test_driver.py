"""Tests of the iteration driver (peerfix.driver) with the float64 engine, and
of the per-epoch links it is fed (peerfix.network.epoch_links)."""

from __future__ import annotations

import numpy as np
import pytest

from peerfix.driver import run_epoch
from peerfix.network import Link, epoch_links
from peerfix.reference import EstimatorParams, FloatEngine
from peerfix.reference.engine_float import FLOAT_COMPONENT_BYTES
from peerfix.reference.node import Received, anchor_message, is_informative, outgoing, update
from peerfix.scenario.model import RangeTable, RangingModel, Scenario, Site

PARAMS = EstimatorParams()
SIGMA = 0.1

# A chain along a 40 m x 20 m cold-store aisle: tag-1 hears three anchors,
# tag-2 two anchors (a mirror pair, both inside the box) and tag-1, tag-3 one
# anchor plus tag-1 and tag-2.  Only the slot schedule can fix tag-3 in one
# iteration: by its slot tag-1 and tag-2 have already spoken.
CHAIN_BOX = (0.0, 0.0, 40.0, 20.0)
CHAIN_ANCHORS = {"dock-1": (0.0, 0.0), "dock-2": (0.0, 20.0), "dock-3": (8.0, 0.0), "aisle-4": (16.0, 20.0), "aisle-5": (30.0, 0.0)}
CHAIN_AGENTS = {"tag-1": (4.0, 10.0), "tag-2": (14.0, 10.0), "tag-3": (24.0, 10.0)}
CHAIN_HEARS = {
    "tag-1": ["dock-1", "dock-2", "dock-3", "tag-2"],
    "tag-2": ["dock-3", "aisle-4", "tag-1", "tag-3"],
    "tag-3": ["aisle-5", "tag-2", "tag-1"],
}


def chain_links() -> dict[str, list[Link]]:
    where = {**CHAIN_ANCHORS, **CHAIN_AGENTS}
    return {
        a: [Link(o, float(np.hypot(*np.subtract(where[a], where[o]))), SIGMA, 1, o in CHAIN_ANCHORS) for o in hears]
        for a, hears in CHAIN_HEARS.items()
    }


def run_chain(schedule: str, iterations: int):
    engine = FloatEngine(PARAMS)
    engine.start(CHAIN_BOX, {k: np.array(v) for k, v in CHAIN_ANCHORS.items()}, list(CHAIN_AGENTS))
    record = run_epoch(engine, list(CHAIN_AGENTS), list(CHAIN_ANCHORS), chain_links(), iterations, schedule, keep_beliefs=True)
    return engine, record


def errors(it) -> np.ndarray:
    return np.linalg.norm(it.mean - np.array(list(CHAIN_AGENTS.values())), axis=1)


def anchors_only_belief(agent: str):
    inbox = [
        Received(link.other, anchor_message(CHAIN_ANCHORS[link.other]), link.range_m, link.sigma_m, True)
        for link in chain_links()[agent]
        if link.other_is_anchor
    ]
    return update(None, inbox, CHAIN_BOX, PARAMS)


def test_broadcast_first_iteration_uses_anchors_only():
    _, record = run_chain("broadcast", 1)
    first = record.iterations[0]
    for k, agent in enumerate(CHAIN_AGENTS):
        ref = anchors_only_belief(agent)
        np.testing.assert_array_equal(first.beliefs[k].logw, ref.logw)
        np.testing.assert_array_equal(first.beliefs[k].mean, ref.mean)
    err = errors(first)
    assert err[0] < 0.3  # three anchors
    assert first.mode_count[1] == 2  # two anchors: mirror pair
    assert err[2] > 1.0  # one anchor: a ring
    assert first.messages_sent == 0  # nobody had a belief to send at the start


def test_slot_fixes_last_agent_in_one_iteration():
    _, record = run_chain("slot", 1)
    first = record.iterations[0]
    assert np.all(errors(first) < 0.3)
    assert np.all(first.mode_count == 1)
    # tag-2 used tag-1's new broadcast within the same iteration.
    assert not np.array_equal(first.beliefs[1].mean, anchors_only_belief("tag-2").mean)


def test_slot_last_agent_uses_earlier_broadcasts():
    # tag-3's belief in slot iteration 1 is exactly the update from the anchor
    # plus what tag-1 and tag-2 broadcast right after their own slots.
    _, record = run_chain("slot", 1)
    beliefs = record.iterations[0].beliefs
    sent = {a: outgoing(beliefs[k], PARAMS) for k, a in enumerate(CHAIN_AGENTS)}
    inbox = []
    for link in chain_links()["tag-3"]:
        msg = anchor_message(CHAIN_ANCHORS[link.other]) if link.other_is_anchor else sent[link.other]
        inbox.append(Received(link.other, msg, link.range_m, link.sigma_m, link.other_is_anchor))
    ref = update(None, inbox, CHAIN_BOX, PARAMS)
    np.testing.assert_array_equal(beliefs[2].mean, ref.mean)
    np.testing.assert_array_equal(beliefs[2].logw, ref.logw)


def test_broadcast_needs_more_iterations():
    _, record = run_chain("broadcast", 3)
    assert errors(record.iterations[0])[2] > 1.0
    assert np.all(errors(record.iterations[-1]) < 0.3)


@pytest.mark.parametrize("schedule", ["slot", "broadcast"])
def test_messages_sent_match_censoring(schedule):
    _, record = run_chain(schedule, 4)
    previous = [None] * len(CHAIN_AGENTS)
    for it in record.iterations:
        # Slot: each agent speaks after its update, from its new belief;
        # broadcast: everyone speaks at the start, from last iteration's belief.
        spoke_from = it.beliefs if schedule == "slot" else previous
        informative = [b for b in spoke_from if is_informative(b, PARAMS)]
        assert it.messages_sent == len(informative)
        assert it.bytes_sent == FLOAT_COMPONENT_BYTES * sum(len(b) for b in informative)
        previous = it.beliefs
    # The one-anchor ring of broadcast iteration 1 is censored: 2 of 3 speak in iteration 2.
    if schedule == "broadcast":
        assert record.iterations[1].messages_sent == 2


def test_unknown_schedule_rejected():
    engine = FloatEngine(PARAMS)
    engine.start(CHAIN_BOX, {k: np.array(v) for k, v in CHAIN_ANCHORS.items()}, list(CHAIN_AGENTS))
    with pytest.raises(ValueError, match="schedule"):
        run_epoch(engine, list(CHAIN_AGENTS), list(CHAIN_ANCHORS), chain_links(), 1, "round-robin")


def test_agent_hearing_nothing_reports_prior():
    engine = FloatEngine(PARAMS)
    engine.start(CHAIN_BOX, {"dock-1": np.zeros(2)}, ["lost-tag"])
    record = run_epoch(engine, ["lost-tag"], ["dock-1"], {"lost-tag": []}, 2)
    last = record.iterations[-1]
    assert last.mode_count[0] == 0 and last.components[0] == 0 and last.messages_sent == 0
    np.testing.assert_allclose(last.mean[0], [20.0, 10.0])


# --- network.epoch_links ---


def open_field(rows, sigma_m=0.1, sigma_per_m=0.0) -> Scenario:
    """An open-field scenario: anchors post-a, post-b; agents rover-1, rover-2."""
    t, a, b, r = zip(*rows)
    return Scenario(
        site=Site("open field", (0.0, 0.0, 50.0, 50.0), RangingModel(sigma_m, 40.0, sigma_per_m)),
        anchor_ids=["post-a", "post-b"],
        anchor_xy_m=np.array([[0.0, 0.0], [50.0, 0.0]]),
        agent_ids=["rover-1", "rover-2"],
        ranges=RangeTable(np.array(t, float), list(a), list(b), np.array(r, float)),
    )


ROWS = [
    (0.0, "rover-1", "post-a", 10.0),
    (0.0, "post-a", "rover-1", 10.3),  # the other direction of the same pair
    (0.0, "rover-1", "post-a", 10.2),
    (0.0, "rover-1", "rover-2", 7.0),
    (0.0, "rover-2", "post-b", 20.0),
    (0.0, "post-a", "post-b", 50.0),  # anchor-anchor: no agent uses it
    (1.0, "rover-1", "post-a", 99.0),  # another epoch
]


def test_epoch_links_fuse_repeats():
    links = epoch_links(open_field(ROWS), 0.0)
    assert set(links) == {"rover-1", "rover-2"}
    r1 = {link.other: link for link in links["rover-1"]}
    assert list(r1) == ["post-a", "rover-2"]  # first appearance in the file
    fused = r1["post-a"]
    assert fused.range_m == pytest.approx(np.mean([10.0, 10.3, 10.2]))
    assert fused.sigma_m == pytest.approx(0.1 / np.sqrt(3))
    assert fused.measurements == 3 and fused.other_is_anchor
    assert not r1["rover-2"].other_is_anchor and r1["rover-2"].sigma_m == pytest.approx(0.1)
    # Agent-agent links go both ways.
    r2 = {link.other: link for link in links["rover-2"]}
    assert r2["rover-1"].range_m == pytest.approx(7.0)
    assert r2["post-b"].range_m == pytest.approx(20.0)


def test_epoch_links_other_epoch():
    links = epoch_links(open_field(ROWS), 1.0)
    assert [(link.other, link.range_m, link.measurements) for link in links["rover-1"]] == [("post-a", 99.0, 1)]
    assert links["rover-2"] == []


def test_epoch_links_anchors_only_baseline():
    links = epoch_links(open_field(ROWS), 0.0, cooperative=False)
    assert [link.other for link in links["rover-1"]] == ["post-a"]
    assert [link.other for link in links["rover-2"]] == ["post-b"]


def test_epoch_links_distance_dependent_sigma():
    links = epoch_links(open_field(ROWS, sigma_m=0.05, sigma_per_m=0.01), 0.0)
    r1 = {link.other: link for link in links["rover-1"]}
    mean = np.mean([10.0, 10.3, 10.2])
    # sigma_m + sigma_per_m * range, of the fused mean range, then / sqrt(n).
    assert r1["post-a"].sigma_m == pytest.approx((0.05 + 0.01 * mean) / np.sqrt(3))
    assert r1["rover-2"].sigma_m == pytest.approx(0.05 + 0.01 * 7.0)
