"""Tests of the network simulator (peerfix.simulate) and `peerfix simulate`.

Statistical checks use two-sided acceptance regions at a stated false-alarm
probability, computed with scipy.stats (chi2, gamma, binom, kstest); the
seeds are fixed, so a run is deterministic, and a wrong model (e.g. a sigma
off by 10 %, or a bias mean off by 10 %) falls far outside the regions.
"""

from __future__ import annotations

import json
from collections import Counter
from pathlib import Path

import numpy as np
import pytest
from scipy import stats
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import connected_components

from peerfix.simulate import PRESETS, SimulationSettings, list_presets, resolve_settings, simulate, summarize
from peerfix.simulate.anchors import lattice, perimeter, strip_walls
from peerfix.simulate.deployments import grid_nodes, strip_region
from peerfix.simulate.geometry import points_in_rects, segment_overlap_m, segments_cross_rects
from peerfix.simulate.presets import cold_store_racks_m

# False-alarm probability of each two-sided statistical check (0.1 %).
ALPHA = 1e-3


# --------------------------------------------------------------------------- helpers


def truth_xy(scn) -> dict[str, np.ndarray]:
    return scn.truth.at(0.0)


def true_distances(scn) -> np.ndarray:
    xy = truth_xy(scn)
    return np.array([np.linalg.norm(xy[a] - xy[b]) for a, b in zip(scn.ranges.node_a, scn.ranges.node_b)])


def blocked_mask(scn) -> np.ndarray:
    return np.array([v == "1" for v in scn.ranges.extra["blocked"]])


def brute_force_pairs(scn, radio_range_m: float) -> set[tuple[str, str]]:
    """All unordered non anchor-anchor pairs within radio range, by a full distance matrix."""
    ids = scn.anchor_ids + scn.agent_ids
    xy = np.array([truth_xy(scn)[n] for n in ids])
    d = np.linalg.norm(xy[:, None, :] - xy[None, :, :], axis=2)
    anchors = set(scn.anchor_ids)
    out = set()
    for i in range(len(ids)):
        for j in range(i + 1, len(ids)):
            if d[i, j] <= radio_range_m and not (ids[i] in anchors and ids[j] in anchors):
                out.add(frozenset((ids[i], ids[j])))
    return out


def chi2_region(dof: int) -> tuple[float, float]:
    """Two-sided acceptance region of a chi-square statistic (scipy.stats.chi2)."""
    return stats.chi2.ppf(ALPHA / 2, dof), stats.chi2.ppf(1 - ALPHA / 2, dof)


def crosses_rect_by_edges(p: np.ndarray, q: np.ndarray, rect) -> bool:
    """Independent check of the clipping code: does segment pq enter the rectangle's inside?

    Classic orientation test: pq enters the open rectangle iff an endpoint is
    inside or pq properly crosses one of the four edges.  Touching cases
    (through a corner, along a face) have zero probability here.
    """
    xmin, ymin, xmax, ymax = rect

    def inside(pt):
        return xmin < pt[0] < xmax and ymin < pt[1] < ymax

    def orient(a, b, c):
        return np.sign((b[0] - a[0]) * (c[1] - a[1]) - (b[1] - a[1]) * (c[0] - a[0]))

    if inside(p) or inside(q):
        return True
    corners = [(xmin, ymin), (xmax, ymin), (xmax, ymax), (xmin, ymax)]
    for k in range(4):
        a, b = corners[k], corners[(k + 1) % 4]
        if orient(p, q, a) * orient(p, q, b) < 0 and orient(a, b, p) * orient(a, b, q) < 0:
            return True
    return False


# --------------------------------------------------------------------------- reproducibility


def test_same_seed_gives_identical_scenario_and_other_seed_differs():
    a = simulate("cold-store", seed=3)
    b = simulate("cold-store", seed=3)
    c = simulate("cold-store", seed=4)
    assert a.anchor_ids == b.anchor_ids and a.agent_ids == b.agent_ids
    np.testing.assert_array_equal(a.truth.xy_m, b.truth.xy_m)
    assert a.ranges.node_a == b.ranges.node_a and a.ranges.node_b == b.ranges.node_b
    np.testing.assert_array_equal(a.ranges.range_m, b.ranges.range_m)
    assert a.ranges.extra == b.ranges.extra
    assert a.site == b.site
    assert not np.array_equal(a.truth.xy_m, c.truth.xy_m)
    assert a.site.extra["simulation"]["seed"] == 3 and c.site.extra["simulation"]["seed"] == 4


def test_override_of_loss_keeps_positions_and_noise_of_surviving_rows():
    # One random stream per stage: packet loss only removes rows.
    full = simulate("open-field", seed=5)
    lossy = simulate("open-field", seed=5, packet_loss=0.3)
    np.testing.assert_array_equal(full.truth.xy_m, lossy.truth.xy_m)
    full_rows = {(a, b): r for a, b, r in zip(full.ranges.node_a, full.ranges.node_b, full.ranges.range_m)}
    assert 0 < len(lossy.ranges) < len(full.ranges)
    for a, b, r in zip(lossy.ranges.node_a, lossy.ranges.node_b, lossy.ranges.range_m):
        assert full_rows[(a, b)] == r


# --------------------------------------------------------------------------- radio and rows


@pytest.mark.parametrize("preset", ["open-field", "cold-store", "mine-drift"])
def test_rows_are_the_pairs_in_radio_range_once_each_without_anchor_pairs(preset):
    scn = simulate(preset, seed=2)
    rr = scn.site.ranging.radio_range_m
    anchors = set(scn.anchor_ids)
    rows = [frozenset((a, b)) for a, b in zip(scn.ranges.node_a, scn.ranges.node_b)]
    assert not any(a in anchors and b in anchors for a, b in zip(scn.ranges.node_a, scn.ranges.node_b))
    assert len(rows) == len(set(rows))  # one row per unordered pair
    assert set(rows) == brute_force_pairs(scn, rr)  # no loss: every pair in range ranges
    assert np.all(true_distances(scn) <= rr)
    assert np.all(scn.ranges.t_s == 0.0)
    # Stable order: anchors before agents, then by index.
    order = {n: i for i, n in enumerate(scn.anchor_ids + scn.agent_ids)}
    keys = [(order[a], order[b]) for a, b in zip(scn.ranges.node_a, scn.ranges.node_b)]
    assert all(i < j for i, j in keys) and keys == sorted(keys)


@pytest.mark.parametrize("preset", ["open-field", "cold-store", "mine-drift"])
def test_range_errors_are_plausible(preset):
    scn = simulate(preset, seed=7)
    model = scn.site.ranging
    d = true_distances(scn)
    err = scn.ranges.range_m - d
    sigma = model.sigma_m + model.sigma_per_m * d
    blocked = blocked_mask(scn)
    assert np.all(scn.ranges.range_m >= 0.0)
    # 6 sigma: P(|z| > 6) = 2e-9 per row (normal tail, scipy.stats.norm.sf).
    assert np.all(np.abs(err[~blocked]) <= 6 * sigma[~blocked])
    # Exponential bias above 25 means has probability exp(-25) per row.
    assert np.all(err[blocked] >= -6 * sigma[blocked])
    assert np.all(err[blocked] <= 6 * sigma[blocked] + 25 * model.blocked_bias_mean_m)


# --------------------------------------------------------------------------- presets


def test_open_field_counts_and_anchor_layout():
    scn = simulate("open-field", seed=0)
    assert list_presets() == ["open-field", "cold-store", "mine-drift"]
    assert len(scn.agent_ids) == 100 and scn.agent_ids[0] == "tag-000" and scn.agent_ids[-1] == "tag-099"
    assert scn.anchor_ids == [f"anc-{i:02d}" for i in range(13)]
    expected = [(10, 10), (50, 10), (90, 10), (10, 50), (50, 50), (90, 50), (10, 90), (50, 90), (90, 90),
                (30, 30), (70, 30), (30, 70), (70, 70)]
    np.testing.assert_allclose(scn.anchor_xy_m, np.array(expected, dtype=float))
    assert scn.site.bounds_m == (0.0, 0.0, 100.0, 100.0)
    assert scn.site.ranging.radio_range_m == 20.0 and scn.site.ranging.sigma_m == 0.1
    assert scn.site.ranging.blocked_probability == 0.0
    assert not blocked_mask(scn).any()
    assert len(scn.truth.node_id) == 113 and np.all(scn.truth.t_s == 0.0)
    xy = scn.truth.xy_m[13:]
    assert np.all((xy >= 0.0) & (xy <= 100.0))


def test_mine_drift_anchors_alternate_along_the_walls_and_agents_stay_in_the_strip():
    scn = simulate("mine-drift", seed=1)
    s = PRESETS["mine-drift"]
    assert len(scn.agent_ids) == 30
    expected = [(20.0 + 40.0 * k, 0.0 if k % 2 == 0 else 5.0) for k in range(10)]
    np.testing.assert_allclose(scn.anchor_xy_m, np.array(expected))
    assert scn.site.ranging.sigma_m == 0.15 and scn.site.ranging.blocked_probability == 0.05
    xmin, ymin, xmax, ymax = strip_region(s.bounds_m, s.strip_length_m, s.strip_width_m)
    assert (xmin, ymin, xmax, ymax) == (0.0, 0.5, 400.0, 4.5)  # 4 m strip centred in the 5 m drift
    xy = np.array([truth_xy(scn)[t] for t in scn.agent_ids])
    assert np.all((xy[:, 0] >= xmin) & (xy[:, 0] <= xmax) & (xy[:, 1] >= ymin) & (xy[:, 1] <= ymax))


def test_strip_deployment_is_uniform_inside_the_strip():
    # 500 agents in a 100 m x 10 m strip across the open field.
    scn = simulate("open-field", seed=9, agents=500, deployment="strip", strip_width_m=10.0)
    xy = scn.truth.xy_m[len(scn.anchor_ids):]
    assert np.all((xy[:, 1] >= 45.0) & (xy[:, 1] <= 55.0))
    assert np.all((xy[:, 0] >= 0.0) & (xy[:, 0] <= 100.0))
    # Kolmogorov-Smirnov against the uniform law along and across (scipy.stats.kstest).
    assert stats.kstest(xy[:, 0], stats.uniform(0.0, 100.0).cdf).pvalue > ALPHA
    assert stats.kstest(xy[:, 1], stats.uniform(45.0, 10.0).cdf).pvalue > ALPHA


# --------------------------------------------------------------------------- error statistics


def test_line_of_sight_error_std_matches_sigma():
    sigma = 0.1
    scn = simulate("open-field", seed=11, agents=400)
    d = true_distances(scn)
    keep = d > 1.0  # far from the clip at 0 (needs z < -10)
    err = scn.ranges.range_m[keep] - d[keep]
    n = err.size
    assert n > 5000
    # With known mean 0, sum(e^2) / sigma^2 ~ chi-square with n dof (scipy.stats.chi2).
    lo, hi = chi2_region(n)
    assert lo < np.sum(err**2) / sigma**2 < hi
    # Same data would fail for a sigma 5 % off: the check can fail.
    assert not lo < np.sum(err**2) / (1.05 * sigma) ** 2 < hi
    # Mean: normal with std sigma / sqrt(n) (scipy.stats.norm).
    assert abs(err.mean()) < stats.norm.ppf(1 - ALPHA / 2) * sigma / np.sqrt(n)


def test_distance_dependent_sigma():
    s0, k = 0.05, 0.01
    scn = simulate("open-field", seed=12, agents=400, sigma_m=s0, sigma_per_m=k)
    assert scn.site.ranging.sigma_per_m == k
    d = true_distances(scn)
    err = scn.ranges.range_m - d
    for group in (d < 7.0, d > 14.0):
        z = err[group] / (s0 + k * d[group])
        lo, hi = chi2_region(z.size)
        assert lo < np.sum(z**2) < hi, "normalised error must have unit variance at every distance"
    far = d > 14.0
    lo, hi = chi2_region(int(far.sum()))
    assert np.sum((err[far] / s0) ** 2) > hi, "far ranges must be noisier than sigma_m alone"


def test_blocked_bias_is_exponential_with_the_stated_mean_and_share():
    p, mean_m, sigma = 0.5, 1.0, 1e-3
    scn = simulate("open-field", seed=13, agents=600, blocked_probability=p,
                   blocked_bias_mean_m=mean_m, sigma_m=sigma)
    d = true_distances(scn)
    blocked = blocked_mask(scn)
    n, nb = len(d), int(blocked.sum())
    assert nb > 5000
    # Share of blocked rows: binomial(n, p) (scipy.stats.binom).
    assert stats.binom.ppf(ALPHA / 2, n, p) <= nb <= stats.binom.ppf(1 - ALPHA / 2, n, p)
    bias = scn.ranges.range_m[blocked] - d[blocked]  # noise of 1 mm is negligible against 1 m
    # Sum of nb exponentials of mean mu is gamma(nb, scale=mu) (scipy.stats.gamma).
    lo = stats.gamma.ppf(ALPHA / 2, nb, scale=mean_m) / nb
    hi = stats.gamma.ppf(1 - ALPHA / 2, nb, scale=mean_m) / nb
    assert lo < bias.mean() < hi
    assert not lo < bias.mean() / 1.1 < hi  # a bias mean 10 % off would be caught
    assert stats.kstest(bias, stats.expon(scale=mean_m).cdf).pvalue > ALPHA
    assert np.all(np.abs(scn.ranges.range_m[~blocked] - d[~blocked]) < 6 * sigma)


def test_packet_loss_share_is_binomial():
    p = 0.2
    scn = simulate("open-field", seed=14, agents=300, packet_loss=p)
    candidates = brute_force_pairs(scn, 20.0)
    rows = {frozenset((a, b)) for a, b in zip(scn.ranges.node_a, scn.ranges.node_b)}
    assert rows <= candidates
    n, lost = len(candidates), len(candidates) - len(rows)
    # Lost exchanges: binomial(n, p) (scipy.stats.binom).
    assert stats.binom.ppf(ALPHA / 2, n, p) <= lost <= stats.binom.ppf(1 - ALPHA / 2, n, p)


def test_negative_draws_are_clipped_to_zero():
    settings = SimulationSettings(
        name="clip-test", bounds_m=(0.0, 0.0, 10.0, 10.0), agents=60, anchor_rule="explicit",
        explicit_anchors=(("a", 0.0, 0.0), ("b", 10.0, 10.0)), radio_range_m=3.0, sigma_m=2.0,
    )
    scn = simulate(settings, seed=1)
    assert np.all(scn.ranges.range_m >= 0.0)
    assert np.sum(scn.ranges.range_m == 0.0) > 10  # sigma 2 m on ranges below 3 m: many clipped
    assert scn.anchor_ids == ["a", "b"]


# --------------------------------------------------------------------------- geometry and the cold store


def test_segment_through_racks_hand_computed():
    racks = cold_store_racks_m()
    # Rack k covers x in [5 + 5.9 j, +1.2] and [6.2 + 5.9 j, +1.2], y in [3, 16] and [20, 33].
    assert racks[0] == (5.0, 3.0, 6.2, 16.0) and racks[2] == (6.2, 3.0, 7.4, 16.0) and len(racks) == 36
    # Along y = 10 from x = 0 to 20: through the lower halves of racks 0-2 (6 single racks, 1.2 m each).
    overlap = segment_overlap_m([[0.0, 10.0]], [[20.0, 10.0]], racks)[0]
    hit = {i for i, v in enumerate(overlap) if v > 0}
    assert hit == {0, 2, 4, 6, 8, 10}
    np.testing.assert_allclose(overlap[sorted(hit)], 1.2)
    # Slope 1/2 from (4, 5) to (8, 7): inside rack 0 and 2 for 1.2 m of x each -> 1.2 * sqrt(1.25).
    overlap = segment_overlap_m([[4.0, 5.0]], [[8.0, 7.0]], racks)[0]
    np.testing.assert_allclose(overlap[[0, 2]], 1.2 * np.sqrt(1.25))
    assert np.count_nonzero(overlap) == 2
    cases = {
        ((0.0, 10.0), (20.0, 10.0)): True,  # across three double racks
        ((0.0, 18.0), (60.0, 18.0)): False,  # along the cross aisle
        ((9.0, 0.0), (9.0, 36.0)): False,  # along a picking aisle (x 7.4 .. 10.9)
        ((0.0, 0.0), (60.0, 36.0)): True,  # hall diagonal
        ((4.0, 2.0), (4.0, 34.0)): False,  # dock-side aisle
        ((5.0, 0.0), (5.0, 36.0)): False,  # along a rack face: grazing is line of sight
    }
    p0 = np.array([c[0] for c in cases])
    p1 = np.array([c[1] for c in cases])
    assert list(segments_cross_rects(p0, p1, racks)) == list(cases.values())


def test_cold_store_blocked_flags_follow_the_racks():
    scn = simulate("cold-store", seed=6)
    racks = scn.site.extra["obstacles"]["racks_m"]
    assert racks == [list(r) for r in cold_store_racks_m()]
    xy = truth_xy(scn)
    flags = blocked_mask(scn)
    expected = np.array([
        any(crosses_rect_by_edges(xy[a], xy[b], r) for r in racks)
        for a, b in zip(scn.ranges.node_a, scn.ranges.node_b)
    ])
    np.testing.assert_array_equal(flags, expected)  # probability 1 through racks, 0 elsewhere
    assert 0.3 < flags.mean() < 0.95
    # Agents stand in the aisles, not in racks, and off the walls.
    agents = np.array([xy[t] for t in scn.agent_ids])
    assert not points_in_rects(agents, racks, 0.3).any()
    assert np.all((agents >= 0.5) & (agents <= (59.5, 35.5)))
    sim = scn.site.extra["simulation"]
    assert sim["preset"] == "cold-store" and sim["seed"] == 6 and sim["agents"] == 50 and sim["anchors"] == 12
    # The site's ranging model carries the expected blocked share of this layout.
    assert abs(scn.site.ranging.blocked_probability - flags.mean()) < 0.05


def test_cold_store_is_connected_and_needs_cooperation():
    lt3 = []
    for seed in range(5):
        scn = simulate("cold-store", seed=seed)
        ids = scn.anchor_ids + scn.agent_ids
        ix = {n: i for i, n in enumerate(ids)}
        i = [ix[a] for a in scn.ranges.node_a]
        j = [ix[b] for b in scn.ranges.node_b]
        graph = coo_matrix((np.ones(len(i)), (i, j)), shape=(len(ids), len(ids)))
        assert connected_components(graph, directed=False)[0] == 1
        s = summarize(scn)
        lt3.append(s["agents_lt3_anchor_neighbours"])
        assert s["agents_lt3_los_anchor_neighbours"] >= 10  # racks hide most anchors from most tags
    assert sum(lt3) > 0


def test_summary_counts_by_hand():
    scn = simulate("mine-drift", seed=3)
    s = summarize(scn)
    anchors = set(scn.anchor_ids)
    deg = Counter(scn.ranges.node_a) + Counter(scn.ranges.node_b)
    anc = Counter(b for a, b in zip(scn.ranges.node_a, scn.ranges.node_b) if a in anchors)
    assert s["ranges"] == len(scn.ranges)
    assert s["mean_agent_degree"] == pytest.approx(np.mean([deg[t] for t in scn.agent_ids]), abs=1e-3)
    assert s["agents_lt3_anchor_neighbours"] == sum(anc[t] < 3 for t in scn.agent_ids)
    assert s["blocked_share"] == pytest.approx(blocked_mask(scn).mean(), abs=1e-4)


# --------------------------------------------------------------------------- anchors and deployments


def test_anchor_rules_by_hand():
    np.testing.assert_allclose(perimeter((0, 0, 10, 10), 4), [[0, 0], [10, 0], [10, 10], [0, 10]])
    np.testing.assert_allclose(perimeter((0, 0, 10, 10), 8)[1::2], [[5, 0], [10, 5], [5, 10], [0, 5]])
    np.testing.assert_allclose(lattice((0, 0, 30, 20), 6), [[5, 5], [15, 5], [25, 5], [5, 15], [15, 15], [25, 15]])
    np.testing.assert_allclose(strip_walls((0, 0, 5, 100), 25), [[0, 12.5], [5, 37.5], [0, 62.5], [5, 87.5]])
    scn = simulate("open-field", seed=0, anchor_rule="lattice", anchor_count=16)
    assert len(scn.anchor_ids) == 16 and scn.site.extra["simulation"]["anchor_rule"] == "lattice"


def test_grid_deployment_jitter():
    np.testing.assert_allclose(grid_nodes(12, (0, 0, 40, 30))[:5], [[5, 5], [15, 5], [25, 5], [35, 5], [5, 15]])
    jitter = 0.5
    scn = simulate("open-field", seed=15, agents=400, deployment="grid", grid_jitter_m=jitter)
    dev = scn.truth.xy_m[13:] - grid_nodes(400, (0, 0, 100, 100))
    # 20 x 20 grid of 5 m cells: no node is near the bounds, so nothing was clipped.
    lo, hi = chi2_region(dev.size)
    assert lo < np.sum(dev**2) / jitter**2 < hi  # Gaussian jitter per axis (scipy.stats.chi2)
    assert scn.site.extra["simulation"]["grid_jitter_m"] == jitter
    store = simulate("cold-store", seed=15, deployment="grid", grid_jitter_m=1.0)
    agents = store.truth.xy_m[len(store.anchor_ids):]
    assert not points_in_rects(agents, cold_store_racks_m(), 0.3).any()


def test_ids_widen_with_count():
    scn = simulate("open-field", seed=0, agents=1000, radio_range_m=5.0)
    assert scn.agent_ids[0] == "tag-000" and scn.agent_ids[-1] == "tag-999"
    scn = simulate("open-field", seed=0, agents=1001, radio_range_m=5.0)
    assert scn.agent_ids[0] == "tag-0000" and scn.agent_ids[-1] == "tag-1000"
    scn = simulate("open-field", seed=0, anchor_rule="perimeter", anchor_count=120)
    assert scn.anchor_ids[0] == "anc-000" and scn.anchor_ids[-1] == "anc-119"


def test_bad_settings_are_refused():
    with pytest.raises(TypeError, match="sigma"):
        simulate("open-field", seed=0, sigma=0.1)
    with pytest.raises(ValueError, match="packet_loss"):
        simulate("open-field", seed=0, packet_loss=1.5)
    with pytest.raises(ValueError, match="unknown preset"):
        simulate("hospital", seed=0)
    with pytest.raises(ValueError, match="seed"):
        simulate("open-field", seed=-1)
    with pytest.raises(ValueError, match="anchor_count"):
        resolve_settings("open-field", anchor_rule="perimeter")


def test_site_extra_is_toml_ready():
    import tomli_w

    for name in list_presets():
        text = tomli_w.dumps(simulate(name, seed=0).site.extra)
        assert "[simulation]" in text


# --------------------------------------------------------------------------- command line (end to end)


def test_cli_writes_reproducible_folders(tmp_path: Path, capsys):
    from peerfix.cli import main
    from peerfix.scenario import read_scenario

    a, b = tmp_path / "a", tmp_path / "b"
    assert main(["simulate", "--preset", "cold-store", "--seed", "4", "--out", str(a), "--json"]) == 0
    report = json.loads(capsys.readouterr().out)
    expected = summarize(simulate("cold-store", seed=4))
    for key in ("agents", "anchors", "ranges", "mean_agent_degree", "agents_lt3_anchor_neighbours", "blocked_share"):
        assert report[key] == expected[key]
    assert main(["simulate", "--preset", "cold-store", "--seed", "4", "--out", str(b)]) == 0
    line = capsys.readouterr().out
    assert line.count("\n") == 1 and "50 agents" in line and "12 anchors" in line
    files = sorted(p.name for p in a.iterdir())
    assert files == sorted(p.name for p in b.iterdir()) and "ranges.csv" in files
    for name in files:
        assert (a / name).read_bytes() == (b / name).read_bytes()

    back = read_scenario(a)
    mem = simulate("cold-store", seed=4)
    # 1e-9 m: the file holds decimal text, at least 15 significant digits.
    np.testing.assert_allclose(back.ranges.range_m, mem.ranges.range_m, rtol=0, atol=1e-9)
    np.testing.assert_allclose(back.truth.xy_m, mem.truth.xy_m, rtol=0, atol=1e-9)
    assert back.ranges.node_a == mem.ranges.node_a and back.agent_ids == mem.agent_ids
    assert back.ranges.extra["blocked"] == mem.ranges.extra["blocked"]
    assert back.site.extra == mem.site.extra and back.site.ranging == mem.site.ranging

    # Existing folder: refused without --overwrite, replaced with it.
    assert main(["simulate", "--preset", "open-field", "--out", str(a)]) == 2
    assert main(["simulate", "--preset", "open-field", "--out", str(a), "--overwrite",
                 "--agents", "20", "--anchors", "perimeter:8", "--packet-loss", "0.1"]) == 0
    capsys.readouterr()
    over = read_scenario(a)
    assert len(over.agent_ids) == 20 and len(over.anchor_ids) == 8
    assert over.site.extra["simulation"]["packet_loss"] == 0.1
    assert main(["simulate", "--preset", "open-field", "--out", str(b), "--anchors", "ring:3"]) == 2
    assert "ring" in capsys.readouterr().err
