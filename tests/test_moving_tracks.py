"""Tracking figures (peerfix.report.tracks) and the fixed engine against the float twin on a moving slice.

The accuracy check runs both engines over the first 6 s of the moving demo
scenario (cold-store-shift, seed 2), one iteration per epoch as the demo
does, and holds the fixed core to the issue's limits against the float twin:
RMSE at most 1.3 times the twin's, and within 0.02 m of it in median.
"""

from __future__ import annotations

import numpy as np
import pytest

from peerfix.report import tracks
from peerfix.report.demo import (
    DEFAULT_SEED,
    MEDIAN_DIFFERENCE_TARGET_M,
    MOVING_DURATION_S,
    MOVING_PRESET,
    RMSE_RATIO_TARGET,
    track_run,
)
from peerfix.scenario.model import RangeTable, RangingModel, Scenario, Site, Truth
from peerfix.simulate import simulate

SLICE_S = 6.0


def _tiny() -> Scenario:
    site = Site("tiny", (0.0, 0.0, 10.0, 10.0), RangingModel(sigma_m=0.1, radio_range_m=20.0))
    ranges = RangeTable(t_s=np.array([0.0, 0.5, 1.0]), node_a=["a", "a", "a"], node_b=["t1", "t2", "t1"],
                        range_m=np.array([1.0, 2.0, 3.0]), extra={"blocked": ["0", "1", "0"]})
    truth = Truth(t_s=np.array([0.0, 0.0, 0.5, 1.0]), node_id=["t1", "t2", "t2", "t1"],
                  xy_m=np.array([[1.0, 1.0], [2.0, 2.0], [2.5, 2.0], [3.0, 3.0]]))
    return Scenario(site, ["a"], np.zeros((1, 2)), ["t1", "t2"], ranges, truth)


def test_truth_per_epoch_places_rows_and_leaves_gaps():
    scn = _tiny()
    truth = tracks.truth_per_epoch(scn, np.array([0.0, 0.5, 1.0]))
    np.testing.assert_array_equal(truth[0], [[1.0, 1.0], [2.0, 2.0]])
    assert np.isnan(truth[1, 0]).all() and np.array_equal(truth[1, 1], [2.5, 2.0])
    assert np.array_equal(truth[2, 0], [3.0, 3.0]) and np.isnan(truth[2, 1]).all()


def test_error_figures_by_hand():
    est = np.array([[[0.0, 0.0], [3.0, 4.0]], [[np.nan, np.nan], [0.0, 1.0]]])
    truth = np.zeros((2, 2, 2))
    err = tracks.track_errors(est, truth)
    np.testing.assert_allclose(err, [[0.0, 5.0], [np.nan, 1.0]])
    fig = tracks.error_figures(err)
    assert fig["scored"] == 3
    assert fig["rmse_m"] == pytest.approx(np.sqrt((0 + 25 + 1) / 3))
    assert fig["median_m"] == pytest.approx(1.0)
    assert fig["share_above_3m"] == pytest.approx(1 / 3)  # the 5 m error: a lost track
    med, p90 = tracks.per_epoch_quantiles(err)
    np.testing.assert_allclose(med, [2.5, 1.0])
    np.testing.assert_allclose(p90, [4.5, 1.0])  # numpy's linear percentile of (0, 5)
    diff = tracks.difference_figures(est, est + np.array([0.0, 0.01]))
    assert diff["compared"] == 3 and diff["median_m"] == pytest.approx(0.01)
    assert tracks.error_figures(np.full((2, 2), np.nan))["rmse_m"] is None


def test_lost_tracks_are_long_spans_above_3_m():
    t = np.arange(12) * 0.5
    err = np.zeros((12, 2))
    err[2:9, 0] = 4.0  # 7 epochs = 3.5 s above 3 m: lost for 3.5 s
    err[5, 0] = 9.0
    err[0:3, 1] = 5.0  # 1.5 s: too short
    err[6, 1] = np.nan
    spans = tracks.lost_tracks(err, t, min_s=3.0)
    assert spans == [{"agent": 0, "start_s": 1.0, "duration_s": 3.5, "max_error_m": 9.0}]
    assert tracks.lost_tracks(err, t, min_s=1.5)[0] == {"agent": 1, "start_s": 0.0, "duration_s": 1.5,
                                                       "max_error_m": 5.0}


def test_slice_scenario_keeps_the_start():
    cut = tracks.slice_scenario(_tiny(), 0.75)
    np.testing.assert_array_equal(cut.ranges.t_s, [0.0, 0.5])
    assert cut.ranges.extra["blocked"] == ["0", "1"] and cut.ranges.node_b == ["t1", "t2"]
    np.testing.assert_array_equal(cut.truth.t_s, [0.0, 0.0, 0.5])


def test_running_mean_ignores_gaps():
    x = np.array([1.0, np.nan, 3.0, 5.0])
    np.testing.assert_allclose(tracks._running_mean(x, 3), [1.0, 2.0, 4.0, 4.0])


@pytest.fixture(scope="module")
def moving_slice():
    scn = simulate(MOVING_PRESET, DEFAULT_SEED, duration_s=SLICE_S)
    fixed = track_run(scn, "fixed")
    flt = track_run(scn, "float")
    return scn, fixed, flt


def test_fixed_tracks_like_the_float_twin_on_a_moving_slice(moving_slice):
    scn, fixed, flt = moving_slice
    np.testing.assert_array_equal(fixed["t_s"], flt["t_s"])
    assert len(fixed["t_s"]) == SLICE_S * 5
    truth = tracks.truth_per_epoch(scn, fixed["t_s"])
    e_fixed = tracks.error_figures(tracks.track_errors(fixed["est"], truth))
    e_float = tracks.error_figures(tracks.track_errors(flt["est"], truth))
    diff = tracks.difference_figures(fixed["est"], flt["est"])
    # Every tag is scored at every epoch it is present in (its truth rows): the late joiner
    # and the early leaver only while they are there.
    present = int(np.isin(scn.truth.node_id, scn.agent_ids).sum())
    assert present < 42 * 40
    assert e_fixed["scored"] == e_float["scored"] == diff["compared"] == present
    assert e_fixed["rmse_m"] <= RMSE_RATIO_TARGET * e_float["rmse_m"]  # issue 6: fixed <= 1.3 x float
    assert diff["median_m"] <= MEDIAN_DIFFERENCE_TARGET_M  # issue 6: within 0.02 m in median
    # And the tracking itself is sane for 0.1 m ranging with racks in the way.
    assert e_float["median_m"] < 0.6 and e_fixed["p90_m"] < 1.5


def test_pictures_of_a_moving_slice(moving_slice, tmp_path):
    import matplotlib.image as mpimg

    scn, fixed, flt = moving_slice
    t = fixed["t_s"]
    truth = tracks.truth_per_epoch(scn, t)
    agents = tracks.track_agents(scn, truth)
    roles = [scn.agent_extra["role"][i] for i in agents]
    assert len(agents) == 4 and {"forklift", "person"} <= set(roles)
    runs = [tracks.TrackRun("fixed", "#1f5fa6", fixed["est"]), tracks.TrackRun("float", "#e08a1e", flt["est"], True)]
    p1 = tracks.plot_tracks(tmp_path / "tracks.png", scn, t, truth, runs, agents, "tracks")
    err = tracks.track_errors(fixed["est"], truth)
    p2 = tracks.plot_error_over_time(tmp_path / "err.png", [tracks.ErrorSeries("fixed", "#1f5fa6", t, err)],
                                     "error", events=[(3.0, "tag-001 on")], window_s=4.0, smooth_s=1.0)
    for p in (p1, p2):
        img = mpimg.imread(p)
        assert img.shape[0] > 300 and img.shape[1] > 500
        assert np.mean(img[..., :3] < 0.99) > 0.02  # not a blank canvas


# The fixed core over the demo's whole recording (ten minutes, about 8 s of CPU): a guard
# against lost tracks, which a short slice and a comparison with the twin (same settings,
# same losses) cannot see.  Measured 2026-12-04: RMSE 0.531 m, longest span above 3 m
# 12.4 s (one tag, at the end).  A 3-sigma product gate (product_gate_sigma2 = 9) gave
# 3.49 m and a tag lost for 168 s, errors up to 54 m; these limits fail that.
FULL_RMSE_LIMIT_M = 1.0
LONGEST_LOST_LIMIT_S = 60.0


def test_fixed_core_keeps_every_track_over_the_whole_recording():
    scn = simulate(MOVING_PRESET, DEFAULT_SEED, duration_s=MOVING_DURATION_S)
    run = track_run(scn, "fixed")
    err = tracks.track_errors(run["est"], tracks.truth_per_epoch(scn, run["t_s"]))
    fig = tracks.error_figures(err)
    lost = tracks.lost_tracks(err, run["t_s"])
    assert fig["scored"] > 0
    assert fig["rmse_m"] <= FULL_RMSE_LIMIT_M, fig
    assert max((span["duration_s"] for span in lost), default=0.0) <= LONGEST_LOST_LIMIT_S, lost
