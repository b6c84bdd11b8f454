"""Scenario writer: exact round trip, refusal to overwrite, nothing left behind on failure."""

from __future__ import annotations

import os
import tempfile
from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from scenario_helpers import BASE_FILES, assert_scenarios_equal, make_folder

from peerfix.scenario import RangeTable, RangingModel, Scenario, Site, Truth, read_scenario, write_scenario
from peerfix.scenario import writer as writer_module


def memory_scenario() -> Scenario:
    """A scenario made in memory (as the simulator would), with floats that have no short decimal."""
    rng = np.random.default_rng(20240611)
    n = 40
    ids = ["tag-07", "tag-12", "tag, \"odd\" 3"]  # comma and quotes need CSV quoting
    anchors = ["ward-a1", "ward-a2", "ward-a3", "ward-a4"]
    node_a = [ids[i % 3] for i in range(n)]
    node_b = [anchors[i % 4] if i % 5 else ids[(i + 1) % 3] for i in range(n)]
    return Scenario(
        site=Site(
            name="hospital wing C (night shift)",
            bounds_m=(-1.5, 0.0, 0.1 + 0.2, 12.000000000000002),
            ranging=RangingModel(
                sigma_m=0.1 / 3, radio_range_m=30.0, sigma_per_m=1e-3 / 7, blocked_probability=0.15, max_range_m=45.5
            ),
            extra={"simulation": {"seed": 3, "preset": "hospital-wing"}, "obstacles": [{"xy_m": [[1.0, 2.0]]}]},
        ),
        anchor_ids=anchors,
        anchor_xy_m=rng.uniform(-1.5, 0.3, size=(4, 2)),
        agent_ids=ids,
        ranges=RangeTable(
            t_s=np.repeat(np.arange(8) * 0.1, 5),
            node_a=node_a,
            node_b=node_b,
            range_m=rng.uniform(0.0, 45.5, size=n),
            extra={"blocked": [str(i % 2) for i in range(n)], "note": ["a\nb" if i == 3 else "" for i in range(n)]},
        ),
        truth=Truth(
            t_s=np.array([0.0, 0.0, 0.1]),
            node_id=["tag-07", "tag-12", "ward-a1"],
            xy_m=rng.normal(size=(3, 2)),
            extra={"source": ["sim", "sim", "survey"]},
        ),
        anchor_extra={"mount": ["wall", "wall", "ceiling", " pillar "]},
        agent_extra={"owner": ["", "ward nurse", "porter"]},
    )


# --------------------------------------------------------------------------- round trip


def test_round_trip_from_memory_is_exact(tmp_path: Path) -> None:
    s = memory_scenario()
    out = write_scenario(s, tmp_path / "out")
    assert out == tmp_path / "out"
    back = read_scenario(out)
    assert_scenarios_equal(s, back, lines=False)
    # The quoted multi-line note moves the rows after it down one line.
    assert back.ranges.line.tolist() == [*range(2, 6), *range(7, 43)]


def test_round_trip_from_folder_is_exact(tmp_path: Path) -> None:
    extra_site = BASE_FILES["site.toml"] + "sigma_per_m = 0.002\n\n[simulation]\nseed = 11\n"
    first = read_scenario(
        make_folder(
            tmp_path,
            site_toml=extra_site,
            ranges_csv="t_s,blocked,node_a,node_b,range_m\n0,1,tag-07,tag-12,16.45\n0.1,0,tag-12,ward-a2,16.6\n",
        )
    )
    again = read_scenario(write_scenario(first, tmp_path / "copy"))
    assert_scenarios_equal(first, again)


def test_floats_written_repr_exact(tmp_path: Path) -> None:
    out = write_scenario(memory_scenario(), tmp_path / "out")
    assert "0.30000000000000004" in (out / "site.toml").read_text()
    assert "12.000000000000002" in (out / "site.toml").read_text()


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(
    ranges=st.lists(st.floats(min_value=0.0, max_value=50.0, allow_nan=False), min_size=1, max_size=6),
    t=st.floats(allow_nan=False, allow_infinity=False),
    name=st.text(st.characters(blacklist_categories=("Cs", "Cc", "Zs", "Zl", "Zp")), min_size=1, max_size=8),
)
def test_round_trip_property(
    tmp_path: Path, ranges: list[float], t: float, name: str) -> None:
    """Any finite float and any printable id survive write -> read bit for bit."""
    agent = "tag-" + name
    s = Scenario(
        site=Site("wing", (0.0, 0.0, 1.0, 1.0), RangingModel(sigma_m=0.1, radio_range_m=25.0)),
        anchor_ids=["ward-a1"],
        anchor_xy_m=np.array([[t, -t]]),
        agent_ids=[agent],
        ranges=RangeTable(
            t_s=np.full(len(ranges), t), node_a=[agent] * len(ranges), node_b=["ward-a1"] * len(ranges),
            range_m=np.array(ranges),
        ),
    )
    with tempfile.TemporaryDirectory(dir=tmp_path) as root:  # hypothesis may replay an example
        assert_scenarios_equal(s, read_scenario(write_scenario(s, Path(root) / "p")), lines=False)


def test_agents_csv_always_written_truth_only_when_present(tmp_path: Path) -> None:
    s = read_scenario(make_folder(tmp_path, agents_csv=None, truth_csv=None))
    out = write_scenario(s, tmp_path / "out")
    assert sorted(p.name for p in out.iterdir()) == ["agents.csv", "anchors.csv", "ranges.csv", "site.toml"]
    assert (out / "agents.csv").read_text() == "node_id\ntag-07\ntag-12\n"


# --------------------------------------------------------------------------- target folder


def test_refuses_non_empty_folder(tmp_path: Path) -> None:
    target = tmp_path / "out"
    target.mkdir()
    (target / "keep.txt").write_text("mine")
    with pytest.raises(FileExistsError):
        write_scenario(memory_scenario(), target)
    assert [p.name for p in target.iterdir()] == ["keep.txt"]
    assert sorted(p.name for p in tmp_path.iterdir()) == ["out"]


def test_refuses_a_file(tmp_path: Path) -> None:
    (tmp_path / "out").write_text("x")
    with pytest.raises(FileExistsError):
        write_scenario(memory_scenario(), tmp_path / "out", overwrite=True)


def test_writes_into_empty_folder(tmp_path: Path) -> None:
    (tmp_path / "out").mkdir()
    write_scenario(memory_scenario(), tmp_path / "out")
    assert (tmp_path / "out" / "ranges.csv").is_file()
    assert sorted(p.name for p in tmp_path.iterdir()) == ["out"]


def test_overwrite_replaces_the_folder(tmp_path: Path) -> None:
    target = tmp_path / "out"
    write_scenario(memory_scenario(), target)
    (target / "stale.txt").write_text("old")
    s = read_scenario(make_folder(tmp_path))
    write_scenario(s, target, overwrite=True)
    assert not (target / "stale.txt").exists()
    assert_scenarios_equal(s, read_scenario(target))
    assert sorted(p.name for p in tmp_path.iterdir()) == ["out", "scn"]


# --------------------------------------------------------------------------- failures leave nothing


def bad_range(s: Scenario, value: float) -> Scenario:
    r = s.ranges.range_m.copy()
    r[6] = value
    return replace(s, ranges=replace(s.ranges, range_m=r))


@pytest.mark.parametrize(
    "spoil, text",
    [
        (lambda s: bad_range(s, float("nan")), "ranges.csv:9: field 'range_m'"),
        (lambda s: bad_range(s, -1.0), "ranges.csv:9: field 'range_m'"),
        (lambda s: replace(s, agent_ids=["ward-a1", *s.agent_ids], agent_extra={}), "agents.csv:2: field 'node_id'"),
        (lambda s: replace(s, site=replace(s.site, extra={"simulation": {"when": object()}})), "TOML"),
        (lambda s: replace(s, agent_ids=[" tag-07", *s.agent_ids[1:]]), "surrounding spaces"),
        (lambda s: replace(s, anchor_extra={"mount": ["wall"]}), "anchor_extra"),
        (lambda s: replace(s, anchor_xy_m=np.zeros((4, 3))), "anchor_xy_m"),
    ],
    ids=["nan-range", "negative-range", "anchor-as-agent", "bad-toml-extra", "spaced-id", "short-extra", "xy-shape"],
)
def test_failure_leaves_nothing_behind(tmp_path: Path, spoil, text: str) -> None:
    target = tmp_path / "out"
    with pytest.raises(ValueError) as info:
        write_scenario(spoil(memory_scenario()), target)
    assert text in str(info.value)
    assert list(tmp_path.iterdir()) == []  # no target, no hidden staging folder


def test_failure_keeps_existing_folder_intact(tmp_path: Path) -> None:
    target = write_scenario(memory_scenario(), tmp_path / "out")
    before = {p.name: p.read_bytes() for p in target.iterdir()}
    with pytest.raises(ValueError):
        write_scenario(bad_range(memory_scenario(), -5.0), target, overwrite=True)
    assert {p.name: p.read_bytes() for p in target.iterdir()} == before
    assert [p.name for p in tmp_path.iterdir()] == ["out"]


def test_failed_final_rename_restores_old_folder(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    """If moving the new folder into place fails, the old one is put back and the staging folder removed."""
    target = write_scenario(memory_scenario(), tmp_path / "out")
    before = {p.name: p.read_bytes() for p in target.iterdir()}
    real_rename = os.rename
    calls: list[str] = []

    def flaky_rename(src, dst):
        calls.append(Path(src).name)
        if Path(src).name.startswith(".out.writing-"):
            raise OSError("disk went away")
        return real_rename(src, dst)

    monkeypatch.setattr(writer_module.os, "rename", flaky_rename)
    with pytest.raises(OSError, match="disk went away"):
        write_scenario(read_scenario(make_folder(tmp_path)), target, overwrite=True)
    assert len(calls) == 3  # old aside, new in (fails), old back
    assert {p.name: p.read_bytes() for p in target.iterdir()} == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["out", "scn"]
