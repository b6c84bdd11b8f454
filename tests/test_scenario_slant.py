"""Anchors mounted high: anchors.csv z_m, site tag_height_m, and slant ranges
reduced to the plane (docs/scenario-format.md, "Anchors mounted high"),
checked against plain 3-D geometry (numpy norms of true 3-D points)."""

from __future__ import annotations

import dataclasses
from pathlib import Path

import numpy as np
import pytest
from scenario_helpers import BASE_FILES, assert_scenarios_equal, make_folder

from peerfix.errors import InputError
from peerfix.network import epoch_links, plane_range
from peerfix.runner import run_scenario
from peerfix.scenario import read_scenario, write_scenario
from peerfix.scenario.epochs import group_epochs

HIGH_ANCHORS = "node_id,x_m,y_m,z_m,mount\nward-a1,0.0,0.0,3.5,ceiling\nward-a2,40.0,0.0,3.5,ceiling\nward-a3,20.0,12.0,1.2,wall\n"
SITE_WITH_HEIGHT = BASE_FILES["site.toml"].replace("bounds_m = [0.0, 0.0, 40.0, 12.0]\n", "bounds_m = [0.0, 0.0, 40.0, 12.0]\ntag_height_m = 1.2\n")


def test_reader_takes_z_m_and_tag_height(tmp_path: Path) -> None:
    s = read_scenario(make_folder(tmp_path, anchors_csv=HIGH_ANCHORS, site_toml=SITE_WITH_HEIGHT))
    assert s.anchor_z_m.tolist() == [3.5, 3.5, 1.2]
    assert s.site.tag_height_m == 1.2
    assert list(s.anchor_extra) == ["mount"]  # z_m is a number, not a text extra


def test_z_m_without_tag_height_is_an_error(tmp_path: Path) -> None:
    folder = make_folder(tmp_path, anchors_csv=HIGH_ANCHORS)
    with pytest.raises(InputError) as info:
        read_scenario(folder)
    assert (info.value.path, info.value.line, info.value.field) == (str(folder / "anchors.csv"), 1, "z_m")


def test_bad_z_m_and_tag_height_name_the_place(tmp_path: Path) -> None:
    bad_z = HIGH_ANCHORS.replace("20.0,12.0,1.2", "20.0,12.0,high")
    folder = make_folder(tmp_path / "z", anchors_csv=bad_z, site_toml=SITE_WITH_HEIGHT)
    with pytest.raises(InputError) as info:
        read_scenario(folder)
    assert (Path(info.value.path).name, info.value.line, info.value.field) == ("anchors.csv", 4, "z_m")
    folder = make_folder(tmp_path / "h", site_toml=SITE_WITH_HEIGHT.replace("tag_height_m = 1.2", 'tag_height_m = "low"'))
    with pytest.raises(InputError) as info:
        read_scenario(folder)
    assert (Path(info.value.path).name, info.value.line, info.value.field) == ("site.toml", 4, "site.tag_height_m")


def test_heights_and_tracking_round_trip(tmp_path: Path) -> None:
    site = SITE_WITH_HEIGHT + "\n[tracking]\nepoch_window_s = 0.05\nwalk_speed_mps = 1.4\nsilence_timeout_s = 8\n"
    s = read_scenario(make_folder(tmp_path, anchors_csv=HIGH_ANCHORS, site_toml=site))
    assert (s.site.tracking.epoch_window_s, s.site.tracking.walk_speed_mps, s.site.tracking.silence_timeout_s) == (0.05, 1.4, 8.0)
    assert "tracking" not in s.site.extra
    back = read_scenario(write_scenario(s, tmp_path / "copy"))
    assert_scenarios_equal(s, back)
    assert back.site == s.site and back.anchor_z_m.tolist() == s.anchor_z_m.tolist()


def test_unknown_tracking_key_is_an_error(tmp_path: Path) -> None:
    folder = make_folder(tmp_path, site_toml=BASE_FILES["site.toml"] + "\n[tracking]\nwalk_speed = 1.0\n")
    with pytest.raises(InputError) as info:
        read_scenario(folder)
    assert (info.value.line, info.value.field) == (10, "tracking.walk_speed")
    assert "walk_speed_mps" in info.value.message


def test_plane_range_matches_3d_geometry() -> None:
    rng = np.random.default_rng(7)
    anchors = rng.uniform([0, 0, 2.0], [40, 12, 6.0], size=(200, 3))
    tags = np.column_stack([rng.uniform(0, 40, 200), rng.uniform(0, 12, 200), np.full(200, 1.1)])
    for anchor, tag in zip(anchors, tags):
        slant = float(np.linalg.norm(anchor - tag))  # plain 3-D geometry
        flat = float(np.linalg.norm(anchor[:2] - tag[:2]))
        r_h, sigma_h = plane_range(slant, 0.1, anchor[2] - tag[2])
        if flat > 0.5:
            assert r_h == pytest.approx(flat, rel=1e-12, abs=1e-12)
            assert sigma_h == pytest.approx(min(0.1 * slant / flat, np.sqrt(2 * (anchor[2] - tag[2]) * 0.1)))


def test_plane_sigma_is_first_order_error_propagation() -> None:
    # sigma_h = sigma * dr_h/dr with dr_h/dr = r / r_h; checked by finite differences and by sampling.
    slant, dz, sigma = 6.0, 4.0, 0.01
    r_h, sigma_h = plane_range(slant, sigma, dz)
    step = 1e-6
    slope = (plane_range(slant + step, sigma, dz)[0] - plane_range(slant - step, sigma, dz)[0]) / (2 * step)
    assert sigma_h == pytest.approx(sigma * slope, rel=1e-6)
    assert sigma_h == pytest.approx(sigma * slant / np.sqrt(slant**2 - dz**2))
    noisy = slant + np.random.default_rng(3).normal(0.0, sigma, 40_000)
    sampled = np.sqrt(noisy**2 - dz**2)
    assert np.std(sampled) == pytest.approx(sigma_h, rel=0.03)
    assert np.mean(sampled) == pytest.approx(r_h, abs=3 * sigma_h / np.sqrt(len(noisy)) + 1e-4)


def test_slant_shorter_than_the_height_difference() -> None:
    dz, sigma = 3.0, 0.1
    near = np.sqrt(2 * dz * sigma)
    assert plane_range(2.9, sigma, dz) == (0.0, pytest.approx(near))
    assert plane_range(3.0, sigma, -dz) == (0.0, pytest.approx(near))  # below the tags: the same
    # Just above |dz| the first-order sigma would blow up; the spread stays at sqrt(2 |dz| sigma).
    r_h, sigma_h = plane_range(3.001, sigma, dz)
    assert 0 < r_h < 0.1 and sigma_h == pytest.approx(near)
    # Far from the anchor the first-order value rules, and it tends to sigma.
    assert plane_range(30.0, sigma, dz)[1] == pytest.approx(sigma * 30.0 / np.sqrt(30.0**2 - 9.0))
    assert plane_range(12.0, sigma, 0.0) == (12.0, sigma)


def slant_scenario(tmp_path: Path, rows: str):
    ranges = "t_s,node_a,node_b,range_m\n" + rows
    return read_scenario(make_folder(tmp_path, anchors_csv=HIGH_ANCHORS, site_toml=SITE_WITH_HEIGHT, ranges_csv=ranges, truth_csv=None))


def test_links_carry_plane_ranges_and_the_rule_is_counted(tmp_path: Path) -> None:
    # tag-07 at (8, 6, 1.2): ward-a1 at (0, 0, 3.5) is 2.3 m above; ward-a3 is at tag height.
    slant = float(np.linalg.norm(np.array([8.0, 6.0, 1.2]) - [0.0, 0.0, 3.5]))
    rows = f"0.0,tag-07,ward-a1,{slant!r}\n0.0,ward-a1,tag-07,{slant!r}\n0.0,tag-07,ward-a3,13.4\n0.0,tag-12,ward-a2,2.0\n"
    plan = group_epochs(slant_scenario(tmp_path, rows))
    links = epoch_links(plan.scenario, 0.0, rows=plan.rows(0))
    a1 = {l.other: l for l in links["tag-07"]}["ward-a1"]
    assert a1.range_m == pytest.approx(10.0, rel=1e-12) and a1.measurements == 2
    assert a1.sigma_m == pytest.approx(0.1 / np.sqrt(2) * slant / 10.0)  # fused, then reduced
    a3 = {l.other: l for l in links["tag-07"]}["ward-a3"]
    assert (a3.range_m, a3.sigma_m) == (13.4, 0.1)  # same height: untouched
    a2 = {l.other: l for l in links["tag-12"]}["ward-a2"]
    assert a2.range_m == 0.0  # 2.0 m slant to an anchor 2.3 m above
    assert plan.report.rules["slant_shorter_than_height"].count == 1
    assert plan.report.rules["slant_shorter_than_height"].lines == [5]


def test_run_with_high_anchors_locates_from_slant_ranges(tmp_path: Path) -> None:
    # Five ceiling anchors 3 m above the tags; exact slant ranges from plain 3-D geometry.
    anchors = {"ceil-1": (0.0, 0.0), "ceil-2": (40.0, 0.0), "ceil-3": (20.0, 12.0), "ceil-4": (0.0, 12.0), "ceil-5": (40.0, 12.0)}
    tags = {"tag-07": (8.0, 6.0), "tag-12": (24.0, 4.5)}
    anchor_csv = "node_id,x_m,y_m,z_m\n" + "".join(f"{a},{x},{y},4.2\n" for a, (x, y) in anchors.items())
    rows = ""
    for tag, (x, y) in tags.items():
        for a, (ax, ay) in anchors.items():
            rows += f"0.0,{tag},{a},{float(np.linalg.norm(np.array([x, y, 1.2]) - [ax, ay, 4.2]))!r}\n"
    truth = "t_s,node_id,x_m,y_m\n" + "".join(f"0.0,{t},{x},{y}\n" for t, (x, y) in tags.items())
    files = {"anchors_csv": anchor_csv, "site_toml": SITE_WITH_HEIGHT, "ranges_csv": "t_s,node_a,node_b,range_m\n" + rows, "truth_csv": truth}
    s = read_scenario(make_folder(tmp_path, **files))
    err = run_scenario(s, "float", iterations=3).metrics[-1]["iterations"][-1]["rmse_m"]
    flat = run_scenario(dataclasses.replace(s, anchor_z_m=None), "float", iterations=3).metrics[-1]["iterations"][-1]["rmse_m"]
    assert err < 0.1
    assert flat > 3 * err  # the same slant ranges read as plane ranges are worse
