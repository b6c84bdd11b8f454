"""Moving scenarios of the simulator (peerfix.simulate.moving): motion, presence, ranging per epoch.

The checks use slices of 20-30 s of the presets (duration_s override), so
the whole file runs in a few seconds.  Statistical checks use two-sided
acceptance regions at a stated false-alarm probability (scipy.stats).
"""

from __future__ import annotations

import json
from collections import Counter
from pathlib import Path

import numpy as np
import pytest
from scipy import stats

from peerfix.cli import main
from peerfix.scenario import read_scenario
from peerfix.simulate import MOVING_PRESETS, all_presets, list_moving_presets, list_presets, simulate, summarize
from peerfix.simulate.aisles import aisle_network, free_gaps
from peerfix.simulate.geometry import points_in_rects, segments_cross_rects
from peerfix.simulate.motion import Movers, Track, _Knots
from peerfix.simulate.presets import cold_store_racks_m

ALPHA = 1e-3  # false-alarm probability of each statistical check
RATE_HZ = 5.0


@pytest.fixture(scope="module")
def shift():
    return simulate("cold-store-shift", seed=4, duration_s=30.0)


def agent_truth(scn) -> dict[str, tuple[np.ndarray, np.ndarray]]:
    """agent -> (t_s (K,), xy (K, 2)) of its truth rows."""
    ids = np.array(scn.truth.node_id)
    return {a: (scn.truth.t_s[ids == a], scn.truth.xy_m[ids == a]) for a in scn.agent_ids}


def roles(scn) -> dict[str, str]:
    return dict(zip(scn.agent_ids, scn.agent_extra["role"]))


def true_distances(scn) -> np.ndarray:
    where = {(t, n): xy for t, n, xy in zip(scn.truth.t_s, scn.truth.node_id, scn.truth.xy_m)}
    r = scn.ranges
    return np.array([np.hypot(*(where[(t, a)] - where[(t, b)])) for t, a, b in zip(r.t_s, r.node_a, r.node_b)])


# --------------------------------------------------------------------------- presets and the aisle network


def test_moving_presets_are_listed_apart_from_the_static_ones():
    assert list_presets() == ["open-field", "cold-store", "mine-drift"]  # static campaigns keep their list
    assert list_moving_presets() == ["cold-store-shift", "open-field-walk", "mine-drift-traffic"]
    assert all_presets() == list_presets() + list_moving_presets()
    shift = MOVING_PRESETS["cold-store-shift"]
    assert shift.agents >= 40 and shift.duration_s == 600.0 and shift.rate_hz == 5.0 and shift.epochs == 3000


def test_aisle_network_of_the_cold_store_by_hand():
    # Racks: 9 double racks of 2 x 1.2 m from x = 5 m, pitch 5.9 m, y in [3, 16] and [20, 33].
    net = aisle_network((0.0, 0.0, 60.0, 36.0), cold_store_racks_m(), clearance_m=0.3, wall_margin_m=0.5)
    xs = sorted(set(np.round(net.nodes_m[:, 0], 9)))
    ys = sorted(set(np.round(net.nodes_m[:, 1], 9)))
    # Free columns: [0, 5] (dock side), 8 picking aisles [7.4 + 5.9 k, 10.9 + 5.9 k], [54.6, 60].
    expected_x = [2.5] + [round(9.15 + 5.9 * k, 9) for k in range(8)] + [57.3]
    np.testing.assert_allclose(xs, expected_x)
    np.testing.assert_allclose(ys, [1.5, 18.0, 34.5])  # front, cross and back aisles
    assert len(net.nodes_m) == 30 and len(net.edges) == 3 * 9 + 10 * 2
    # Half widths: picking aisle 3.5 / 2 - 0.3 clearance; front aisle 1.5 - 0.5 wall margin.
    along_y = net.nodes_m[net.edges[:, 0], 0] == net.nodes_m[net.edges[:, 1], 0]
    picking = along_y & np.isclose(net.nodes_m[net.edges[:, 0], 0], 9.15)
    np.testing.assert_allclose(net.half_width_m[picking], 1.45)
    front = ~along_y & (net.nodes_m[net.edges[:, 0], 1] == 1.5)
    np.testing.assert_allclose(net.half_width_m[front], 1.0)
    # Shortest way from the south-west to the north-east crossing: 54.8 m along x plus 33 m along y.
    assert net.hops_m[0, 29] == pytest.approx((57.3 - 2.5) + (34.5 - 1.5))
    assert free_gaps(0.0, 10.0, np.array([[2.0, 3.0], [2.5, 4.0], [9.0, 12.0]])) == [(0.0, 2.0), (4.0, 9.0)]


def test_track_interpolates_between_knots():
    track = Track(np.array([0.0, 2.0, 5.0, 6.0]), np.array([[0.0, 0.0], [2.0, 0.0], [2.0, 0.0], [2.0, 3.0]]))
    np.testing.assert_allclose(track.at(np.array([1.0, 3.0, 5.5, 9.0])), [[1, 0], [2, 0], [2, 1.5], [2, 3]])
    with pytest.raises(ValueError, match="speed"):
        Movers("cart", 1, speed_mps=(0.0, 1.0), pause_s=(0.0, 1.0))


def test_turn_slowing_by_hand():
    # An L: 10 m east, then 10 m north, at 2 m/s with 1 m/s within 3 m of the turn:
    # 7 m / 2 + 3 m / 1 + 3 m / 1 + 7 m / 2 = 13 s; a straight-on corner costs nothing.
    knots = _Knots(np.zeros(2))
    knots.go([np.array([10.0, 0.0]), np.array([10.0, 10.0])], 2.0, turn_speed_mps=1.0, turn_slow_m=3.0)
    track = knots.track()
    np.testing.assert_allclose(track.t_s, [0.0, 3.5, 6.5, 9.5, 13.0])
    np.testing.assert_allclose(track.at(np.array([6.5, 8.0])), [[10.0, 0.0], [10.0, 1.5]])
    straight = _Knots(np.zeros(2))
    straight.go([np.array([5.0, 0.0]), np.array([10.0, 0.0])], 2.0, turn_speed_mps=1.0, turn_slow_m=3.0)
    assert straight.track().t_s[-1] == pytest.approx(5.0)


# --------------------------------------------------------------------------- motion


def test_cold_store_motion_stays_in_the_aisles(shift):
    racks = cold_store_racks_m()
    for a, (t, xy) in agent_truth(shift).items():
        assert np.all((xy >= 0.5 - 1e-9) & (xy <= np.array([59.5, 35.5]) + 1e-9)), a  # wall margin
        assert not points_in_rects(xy, racks, 0.3 - 1e-9).any(), a  # rack clearance
        # The straight line between two epochs never cuts through a rack either.
        assert not segments_cross_rects(xy[:-1], xy[1:], racks).any(), a


@pytest.mark.parametrize("preset", ["open-field-walk", "mine-drift-traffic"])
def test_random_waypoint_motion_stays_in_its_region(preset):
    scn = simulate(preset, seed=1, duration_s=30.0)
    region = scn.site.extra["simulation"]["region_m"]
    for a, (t, xy) in agent_truth(scn).items():
        assert np.all((xy >= np.array(region[:2]) - 1e-9) & (xy <= np.array(region[2:]) + 1e-9)), a
    moved = [np.hypot(*(xy[-1] - xy[0])) for _, xy in agent_truth(scn).values()]
    assert np.median(moved) > 2.0  # they do walk


@pytest.mark.parametrize("preset", ["cold-store-shift", "mine-drift-traffic"])
def test_speeds_stay_within_each_groups_limit(preset):
    scn = simulate(preset, seed=2, duration_s=30.0)
    limits = {m.role: m.speed_mps for m in MOVING_PRESETS[preset].movers}
    role = roles(scn)
    speeds: dict[str, list[np.ndarray]] = {r: [] for r in limits}
    for a, (t, xy) in agent_truth(scn).items():
        assert np.allclose(np.diff(t), 1 / RATE_HZ)  # one truth row per epoch while present
        speeds[role[a]].append(np.hypot(*np.diff(xy, axis=0).T) / np.diff(t))
    for r, (v_min, v_max) in limits.items():
        v = np.concatenate(speeds[r])
        assert v.max() <= v_max + 1e-9, r
        # Moving tags go at their trip speed (>= v_min) most of the time they move.
        assert np.percentile(v[v > 0.05], 50) >= v_min, r


def test_forklifts_slow_down_for_turns(shift):
    forklift = next(m for m in MOVING_PRESETS["cold-store-shift"].movers if m.role == "forklift")
    assert forklift.turn_slow_m > 0 and forklift.turn_speed_mps < forklift.speed_mps[1]
    role = roles(shift)
    turns = 0
    for a, (t, xy) in agent_truth(shift).items():
        if role[a] != "forklift":
            continue
        d = np.diff(xy, axis=0)
        step = np.hypot(*d.T)
        both = (step[:-1] > 0.05) & (step[1:] > 0.05)
        cos = np.einsum("ij,ij->i", d[:-1], d[1:]) / np.maximum(step[:-1] * step[1:], 1e-12)
        turn = both & (cos < np.cos(np.radians(45.0)))
        turns += int(turn.sum())
        v = step / np.diff(t)
        # Around every turn both sampled speeds are at most the turn speed.
        assert np.all(v[:-1][turn] <= forklift.turn_speed_mps + 1e-9), a
        assert np.all(v[1:][turn] <= forklift.turn_speed_mps + 1e-9), a
    assert turns >= 5  # the forklifts do turn at the crossings in 30 s


# --------------------------------------------------------------------------- presence


def test_joining_and_leaving_tags_have_no_rows_outside_their_presence(shift):
    sim = shift.site.extra["simulation"]
    late, early = sim["late_joiners"], sim["early_leavers"]
    assert len(late) == 1 and len(early) == 1 and late != early
    enter = dict(zip(shift.agent_ids, map(float, shift.agent_extra["enter_s"])))
    leave = dict(zip(shift.agent_ids, map(float, shift.agent_extra["leave_s"])))
    r = shift.ranges
    truth = agent_truth(shift)
    epochs = np.arange(150) / RATE_HZ
    for a in shift.agent_ids:
        in_rows = np.array([a in (x, y) for x, y in zip(r.node_a, r.node_b)])
        t_rows = r.t_s[in_rows]
        assert np.all((t_rows >= enter[a]) & (t_rows < leave[a])), a
        np.testing.assert_array_equal(truth[a][0], epochs[(epochs >= enter[a]) & (epochs < leave[a])])
        assert in_rows.sum() > 0
    # The late tag joins inside the stated window (10-50 % of the recording), the early one leaves in 50-90 %.
    assert 3.0 <= enter[late[0]] < 15.0 and leave[late[0]] == 30.0
    assert 15.0 <= leave[early[0]] < 27.0 and enter[early[0]] == 0.0
    assert sum(v > 0 for v in enter.values()) == 1 and sum(v < 30.0 for v in leave.values()) == 1


# --------------------------------------------------------------------------- truth and ranges per epoch


def test_truth_per_epoch_and_ranges_measured_there(shift):
    model = shift.site.ranging
    assert np.array_equal(shift.ranges.epochs(), np.arange(150) / RATE_HZ)
    anchors = np.array(shift.truth.node_id)[np.isin(shift.truth.node_id, shift.anchor_ids)]
    assert len(anchors) == 150 * len(shift.anchor_ids)  # anchors have a truth row every epoch
    d = true_distances(shift)  # from the truth at each row's own epoch
    blocked = np.array(shift.ranges.extra["blocked"]) == "1"
    assert np.all(d <= model.radio_range_m)
    err = shift.ranges.range_m - d
    # Line of sight: |error| <= 6 sigma (normal tail 2e-9 per row, scipy.stats.norm.sf).
    assert np.all(np.abs(err[~blocked]) <= 6 * model.sigma_m)
    # Through racks: blocked with probability 1; the bias is exponential with mean 1 m, so the
    # mean error of nb blocked rows lies in the gamma(nb, 1 m) / nb region (noise of 0.1 m is small).
    xy = {(t, n): p for t, n, p in zip(shift.truth.t_s, shift.truth.node_id, shift.truth.xy_m)}
    r = shift.ranges
    p0 = np.array([xy[(t, a)] for t, a in zip(r.t_s, r.node_a)])
    p1 = np.array([xy[(t, b)] for t, b in zip(r.t_s, r.node_b)])
    np.testing.assert_array_equal(blocked, segments_cross_rects(p0, p1, cold_store_racks_m()))
    nb = int(blocked.sum())
    assert 0.3 < nb / len(blocked) < 0.9
    lo = stats.gamma.ppf(ALPHA / 2, nb, scale=1.0) / nb - 3 * model.sigma_m / np.sqrt(nb)
    hi = stats.gamma.ppf(1 - ALPHA / 2, nb, scale=1.0) / nb + 3 * model.sigma_m / np.sqrt(nb)
    assert lo < err[blocked].mean() < hi


def test_each_tag_starts_at_most_its_ranging_budget(shift):
    settings = MOVING_PRESETS["cold-store-shift"]
    anchors = set(shift.anchor_ids)
    per = Counter()
    peers = Counter()
    for t, a, b in zip(shift.ranges.t_s, shift.ranges.node_a, shift.ranges.node_b):
        if a in anchors:
            per[(t, b)] += 1
        else:
            peers[(t, a)] += 1
            peers[(t, b)] += 1
    # Only tags start anchor exchanges, so a tag has at most anchor_exchanges anchor rows per epoch.
    assert max(per.values()) == settings.anchor_exchanges
    # A tag starts at most peer_exchanges itself; others may ask it too, but the epoch's
    # peer rows cannot exceed what all tags started.
    n_epoch = Counter(t for t, _ in peers)
    assert all(v <= settings.peer_exchanges * len(shift.agent_ids) for v in n_epoch.values())
    assert np.mean(list(peers.values())) > settings.peer_exchanges  # asked by others as well


# --------------------------------------------------------------------------- reproducibility and files


def test_same_seed_same_moving_scenario_other_seed_differs(shift):
    again = simulate("cold-store-shift", seed=4, duration_s=30.0)
    other = simulate("cold-store-shift", seed=5, duration_s=30.0)
    np.testing.assert_array_equal(again.truth.xy_m, shift.truth.xy_m)
    np.testing.assert_array_equal(again.ranges.range_m, shift.ranges.range_m)
    assert again.ranges.node_a == shift.ranges.node_a and again.agent_extra == shift.agent_extra
    assert again.site == shift.site
    assert other.truth.xy_m.shape != shift.truth.xy_m.shape or not np.array_equal(other.truth.xy_m, shift.truth.xy_m)


def test_overrides_of_a_moving_preset():
    scn = simulate("cold-store-shift", seed=0, duration_s=4.0, rate_hz=10.0, late_joiners=0, early_leavers=0)
    assert len(scn.ranges.epochs()) == 40 and scn.site.extra["simulation"]["rate_hz"] == 10.0
    assert len(scn.truth.t_s) == 40 * (len(scn.agent_ids) + len(scn.anchor_ids))
    lossy = simulate("cold-store-shift", seed=0, duration_s=4.0, packet_loss=0.5)
    assert lossy.site.extra["simulation"]["packet_loss"] == 0.5
    with pytest.raises(TypeError, match="agents"):
        simulate("cold-store-shift", seed=0, agents=5)
    with pytest.raises(TypeError, match="duration_s"):
        simulate("cold-store", seed=0, duration_s=4.0)
    with pytest.raises(ValueError, match="duration_s"):
        simulate("cold-store-shift", seed=0, duration_s=-1.0)


def test_cli_writes_a_moving_folder_reproducibly(tmp_path: Path, capsys):
    a, b = tmp_path / "a", tmp_path / "b"
    args = ["simulate", "--preset", "cold-store-shift", "--seed", "3", "--duration-s", "20", "--rate-hz", "5"]
    assert main([*args, "--out", str(a), "--json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert doc["epochs"] == 100 and doc["agents"] == 42 and doc["roles"] == {"forklift": 10, "person": 32}
    assert doc["late_joiners"] == 1 and doc["early_leavers"] == 1
    assert main([*args, "--out", str(b)]) == 0
    assert "100 epochs over 20 s" in capsys.readouterr().out
    for name in ("site.toml", "anchors.csv", "agents.csv", "ranges.csv", "truth.csv"):
        assert (a / name).read_bytes() == (b / name).read_bytes(), name
    back = read_scenario(a)
    mem = simulate("cold-store-shift", seed=3, duration_s=20.0)
    np.testing.assert_array_equal(back.ranges.t_s, mem.ranges.t_s)
    np.testing.assert_array_equal(back.truth.xy_m, mem.truth.xy_m)
    assert back.agent_extra == mem.agent_extra and summarize(back)["ranges"] == len(mem.ranges)
    assert main(["simulate", "--preset", "cold-store", "--out", str(tmp_path / "c"), "--duration-s", "5"]) == 2
    assert "duration_s" in capsys.readouterr().err
