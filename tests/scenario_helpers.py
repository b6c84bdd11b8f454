"""Shared pieces for the scenario reader/writer tests: a valid base folder and an exact comparison."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from peerfix.scenario import Scenario

# A small valid hospital-wing scenario.  Line numbers matter to the tests:
# site.toml: 1 [site], 2 name, 3 bounds_m, 5 [ranging], 6 sigma_m, 7 radio_range_m.
BASE_FILES: dict[str, str] = {
    "site.toml": (
        "[site]\n"
        'name = "hospital wing B"\n'
        "bounds_m = [0.0, 0.0, 40.0, 12.0]\n"
        "\n"
        "[ranging]\n"
        "sigma_m = 0.1\n"
        "radio_range_m = 25.0\n"
    ),
    "anchors.csv": (
        "node_id,x_m,y_m\n"
        "ward-a1,0.0,0.0\n"
        "ward-a2,40.0,0.0\n"
        "ward-a3,20.0,12.0\n"
    ),
    "agents.csv": "node_id\ntag-07\ntag-12\n",
    "ranges.csv": (
        "t_s,node_a,node_b,range_m\n"
        "0.0,tag-07,ward-a1,10.02\n"
        "0.0,tag-07,ward-a3,13.43\n"
        "0.0,tag-07,tag-12,16.45\n"
        "0.0,tag-12,ward-a2,16.60\n"
        "0.0,tag-12,ward-a3,8.47\n"
    ),
    "truth.csv": "t_s,node_id,x_m,y_m\n0.0,tag-07,8.0,6.0\n0.0,tag-12,24.0,4.5\n",
}


def make_folder(root: Path, name: str = "scn", **files: str | bytes | None) -> Path:
    """Write BASE_FILES into root/name, with per-file overrides.

    Keyword names use '_' for '.', e.g. ranges_csv="..."; None drops the file.
    """
    folder = root / name
    folder.mkdir(parents=True)
    contents: dict[str, str | bytes | None] = dict(BASE_FILES)
    for key, text in files.items():
        contents[key.replace("_csv", ".csv").replace("_toml", ".toml")] = text
    for file_name, text in contents.items():
        if text is None:
            continue
        if isinstance(text, bytes):
            (folder / file_name).write_bytes(text)
        else:
            (folder / file_name).write_text(text, encoding="utf-8", newline="")
    return folder


def assert_scenarios_equal(a: Scenario, b: Scenario, *, lines: bool = True) -> None:
    """Exact equality (floats bit for bit), including extras; `lines` also compares RangeTable.line."""
    assert a.site == b.site
    assert a.anchor_ids == b.anchor_ids
    assert np.array_equal(a.anchor_xy_m, b.anchor_xy_m)
    assert a.agent_ids == b.agent_ids
    assert a.anchor_extra == b.anchor_extra
    assert a.agent_extra == b.agent_extra
    ra, rb = a.ranges, b.ranges
    assert np.array_equal(ra.t_s, rb.t_s)
    assert ra.node_a == rb.node_a
    assert ra.node_b == rb.node_b
    assert np.array_equal(ra.range_m, rb.range_m)
    assert ra.extra == rb.extra
    if lines:
        assert np.array_equal(ra.line, rb.line)
    assert (a.truth is None) == (b.truth is None)
    if a.truth is not None:
        assert np.array_equal(a.truth.t_s, b.truth.t_s)
        assert a.truth.node_id == b.truth.node_id
        assert np.array_equal(a.truth.xy_m, b.truth.xy_m)
        assert a.truth.extra == b.truth.extra
