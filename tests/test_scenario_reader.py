"""Strict scenario reader: one case per error class (path, line, field), the agent-set rule, extras."""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np
import pytest
from scenario_helpers import BASE_FILES, make_folder

from peerfix.errors import InputError
from peerfix.scenario import read_scenario

DOC = Path(__file__).resolve().parents[1] / "docs" / "scenario-format.md"

SITE = BASE_FILES["site.toml"]
ANCHORS = BASE_FILES["anchors.csv"]
RANGES = BASE_FILES["ranges.csv"]
TRUTH = BASE_FILES["truth.csv"]
R_HEAD = "t_s,node_a,node_b,range_m\n"


def ranges_with(row: str) -> str:
    """The base ranges with one more row, which lands on line 7."""
    return RANGES + row + "\n"


def site_with(ranging_line: str) -> str:
    """The base site with one more [ranging] line, which lands on line 8."""
    return SITE + ranging_line + "\n"


def site_replace(old: str, new: str) -> str:
    assert old in SITE
    return SITE.replace(old, new)


def expect_error(folder: Path, file: str, line: int, field: str | None, text: str = "") -> InputError:
    with pytest.raises(InputError) as info:
        read_scenario(folder)
    err = info.value
    assert err.path == str(folder / file)
    assert (err.line, err.field) == (line, field)
    assert text in err.message
    return err


# --------------------------------------------------------------------------- valid input


def test_base_folder_reads(tmp_path: Path) -> None:
    s = read_scenario(make_folder(tmp_path))
    assert s.site.name == "hospital wing B"
    assert s.site.bounds_m == (0.0, 0.0, 40.0, 12.0)
    assert (s.site.ranging.sigma_m, s.site.ranging.radio_range_m) == (0.1, 25.0)
    assert s.site.ranging.absurd_range_limit_m() == 50.0
    assert s.anchor_ids == ["ward-a1", "ward-a2", "ward-a3"]
    assert np.array_equal(s.anchor_xy_m, [[0, 0], [40, 0], [20, 12]])
    assert s.agent_ids == ["tag-07", "tag-12"]
    assert s.ranges.node_a == ["tag-07", "tag-07", "tag-07", "tag-12", "tag-12"]
    assert s.ranges.range_m.tolist() == [10.02, 13.43, 16.45, 16.60, 8.47]
    assert s.ranges.line.tolist() == [2, 3, 4, 5, 6]
    assert s.truth is not None and s.truth.node_id == ["tag-07", "tag-12"]
    assert np.array_equal(s.truth.xy_m, [[8.0, 6.0], [24.0, 4.5]])


def test_lenient_spelling_is_accepted(tmp_path: Path) -> None:
    """Spaces around ids/names/numbers, columns in any order, BOM, CRLF, trailing blank lines."""
    ranges = "\ufeff range_m , node_b,t_s,node_a\r\n 10.5 , ward-a1 ,0, tag-07 \r\n\r\n\r\n"
    s = read_scenario(make_folder(tmp_path, ranges_csv=ranges))
    assert (s.ranges.node_a, s.ranges.node_b) == (["tag-07"], ["ward-a1"])
    assert s.ranges.range_m.tolist() == [10.5] and s.ranges.t_s.tolist() == [0.0]


def test_ids_keep_case(tmp_path: Path) -> None:
    agents = "node_id\ntag-07\nTAG-07\n"
    ranges = R_HEAD + "0,TAG-07,ward-a1,3\n0,tag-07,ward-a1,4\n"
    s = read_scenario(make_folder(tmp_path, agents_csv=agents, ranges_csv=ranges, truth_csv=None))
    assert s.agent_ids == ["tag-07", "TAG-07"]
    assert s.ranges.node_a == ["TAG-07", "tag-07"]


def test_range_at_the_limit_is_accepted(tmp_path: Path) -> None:
    s = read_scenario(make_folder(tmp_path, ranges_csv=ranges_with("1,tag-07,tag-12,50.0")))
    assert s.ranges.range_m[-1] == 50.0


def test_optional_ranging_keys(tmp_path: Path) -> None:
    site = SITE + "sigma_per_m = 0.002\nblocked_probability = 1\nblocked_bias_mean_m = 0.8\nmax_range_m = 30\n"
    r = read_scenario(make_folder(tmp_path, site_toml=site)).site.ranging
    assert (r.sigma_per_m, r.blocked_probability, r.blocked_bias_mean_m, r.max_range_m) == (0.002, 1.0, 0.8, 30.0)
    assert r.absurd_range_limit_m() == 30.0


def test_quoted_multiline_field_keeps_line_numbers(tmp_path: Path) -> None:
    """A record spanning lines 2-3 is reported on line 2; the next row on its own line 4."""
    head = "t_s,node_a,node_b,range_m,note\n"
    ranges = head + '0,tag-07,ward-a1,-1,"two\nlines"\n'
    expect_error(make_folder(tmp_path, "one", ranges_csv=ranges), "ranges.csv", 2, "range_m", "negative")
    ranges = head + '0,tag-07,ward-a1,10,"two\nlines"\n' + "0,tag-07,ward-a1,-1,x\n"
    folder = make_folder(tmp_path, "two", ranges_csv=ranges)
    err = expect_error(folder, "ranges.csv", 4, "range_m", "negative")
    assert str(err).startswith(f"{err.path}:4: field 'range_m':")
    good = head + '0,tag-07,ward-a1,10,"two\nlines"\n0,tag-07,ward-a1,11,x\n'
    s = read_scenario(make_folder(tmp_path, "three", ranges_csv=good))
    assert s.ranges.line.tolist() == [2, 4]
    assert s.ranges.extra["note"] == ["two\nlines", "x"]


def test_doc_example_reads(tmp_path: Path) -> None:
    """The example in docs/scenario-format.md is a valid scenario whose clear ranges fit its truth."""
    text = DOC.read_text(encoding="utf-8")
    example = text[text.index("## Example") :]
    blocks = re.findall(r"`([a-z]+\.(?:csv|toml))`\s*```[a-z]*\n(.*?)```", example, re.S)
    files = dict(blocks)
    assert set(files) == {"site.toml", "anchors.csv", "agents.csv", "ranges.csv", "truth.csv"}
    folder = tmp_path / "doc"
    folder.mkdir()
    for name, body in files.items():
        (folder / name).write_text(body, encoding="utf-8")
    s = read_scenario(folder)
    where = {**s.anchor_positions(), **s.truth.at(0.0)}
    for a, b, r, blocked in zip(s.ranges.node_a, s.ranges.node_b, s.ranges.range_m, s.ranges.extra["blocked"]):
        d = float(np.linalg.norm(where[a] - where[b]))
        if blocked == "0":
            assert abs(r - d) < 3 * s.site.ranging.sigma_m
        else:
            assert r > d  # a blocked path only lengthens the range


# --------------------------------------------------------------------------- folder and files


def test_missing_folder(tmp_path: Path) -> None:
    with pytest.raises(InputError) as info:
        read_scenario(tmp_path / "nowhere")
    assert (info.value.path, info.value.line, info.value.field) == (str(tmp_path / "nowhere"), 0, None)


def test_folder_is_a_file(tmp_path: Path) -> None:
    (tmp_path / "f").write_text("x")
    with pytest.raises(InputError) as info:
        read_scenario(tmp_path / "f")
    assert (info.value.path, info.value.line) == (str(tmp_path / "f"), 0)


@pytest.mark.parametrize("name", ["site.toml", "anchors.csv", "ranges.csv"])
def test_missing_required_file(tmp_path: Path, name: str) -> None:
    folder = make_folder(tmp_path, **{name.replace(".", "_"): None})
    expect_error(folder, name, 0, None, "missing")


def test_not_utf8(tmp_path: Path) -> None:
    anchors = b"node_id,x_m,y_m\nward-a1,0,0\nward-\xff2,40,0\n"
    expect_error(make_folder(tmp_path, anchors_csv=anchors), "anchors.csv", 3, None, "UTF-8")


# --------------------------------------------------------------------------- site.toml


def test_bad_toml_syntax(tmp_path: Path) -> None:
    expect_error(make_folder(tmp_path, site_toml=site_with("sigma_per_m = ")), "site.toml", 8, None, "TOML")


@pytest.mark.parametrize(
    "site, line, field",
    [
        ("[ranging]\nsigma_m = 0.1\nradio_range_m = 5.0\n", 0, "site"),
        ("site = 3\n[ranging]\nsigma_m = 0.1\nradio_range_m = 5.0\n", 1, "site"),
        (SITE[: SITE.index("[ranging]")], 0, "ranging"),
    ],
    ids=["no-site", "site-not-table", "no-ranging"],
)
def test_missing_table(tmp_path: Path, site: str, line: int, field: str) -> None:
    expect_error(make_folder(tmp_path, site_toml=site), "site.toml", line, field)


@pytest.mark.parametrize(
    "old, line, field",
    [
        ("sigma_m = 0.1\n", 5, "ranging.sigma_m"),
        ("radio_range_m = 25.0\n", 5, "ranging.radio_range_m"),
        ('name = "hospital wing B"\n', 1, "site.name"),
        ("bounds_m = [0.0, 0.0, 40.0, 12.0]\n", 1, "site.bounds_m"),
    ],
)
def test_missing_required_key(tmp_path: Path, old: str, line: int, field: str) -> None:
    """A missing key points at its table's header line."""
    expect_error(make_folder(tmp_path, site_toml=site_replace(old, "")), "site.toml", line, field, "missing")


def test_unknown_key_in_ranging(tmp_path: Path) -> None:
    err = expect_error(make_folder(tmp_path, site_toml=site_with("sigma = 0.2")), "site.toml", 8, "ranging.sigma")
    assert "did you mean 'sigma_m'" in err.message


def test_unknown_key_in_site(tmp_path: Path) -> None:
    site = site_replace('name = "hospital wing B"\n', 'name = "hospital wing B"\nbound_m = [0, 0, 1, 1]\n')
    expect_error(make_folder(tmp_path, site_toml=site), "site.toml", 3, "site.bound_m", "unknown key")


@pytest.mark.parametrize(
    "old, new, line, field",
    [
        ("sigma_m = 0.1", "sigma_m = 0", 6, "ranging.sigma_m"),
        ("sigma_m = 0.1", "sigma_m = -0.1", 6, "ranging.sigma_m"),
        ("sigma_m = 0.1", 'sigma_m = "0.1"', 6, "ranging.sigma_m"),
        ("sigma_m = 0.1", "sigma_m = nan", 6, "ranging.sigma_m"),
        ("sigma_m = 0.1", "sigma_m = inf", 6, "ranging.sigma_m"),
        ("sigma_m = 0.1", "sigma_m = true", 6, "ranging.sigma_m"),
        ("radio_range_m = 25.0", "radio_range_m = 0.0", 7, "ranging.radio_range_m"),
        ("radio_range_m = 25.0", "radio_range_m = 25.0\nblocked_probability = 1.5", 8, "ranging.blocked_probability"),
        ("radio_range_m = 25.0", "radio_range_m = 25.0\nblocked_probability = -0.1", 8, "ranging.blocked_probability"),
        ("radio_range_m = 25.0", "radio_range_m = 25.0\nsigma_per_m = -0.01", 8, "ranging.sigma_per_m"),
        ("radio_range_m = 25.0", "radio_range_m = 25.0\nblocked_bias_mean_m = 0", 8, "ranging.blocked_bias_mean_m"),
        ("radio_range_m = 25.0", "radio_range_m = 25.0\nmax_range_m = -5", 8, "ranging.max_range_m"),
        ('name = "hospital wing B"', 'name = ""', 2, "site.name"),
        ('name = "hospital wing B"', "name = 7", 2, "site.name"),
        ("[0.0, 0.0, 40.0, 12.0]", "[40.0, 0.0, 0.0, 12.0]", 3, "site.bounds_m"),
        ("[0.0, 0.0, 40.0, 12.0]", "[0.0, 12.0, 40.0, 12.0]", 3, "site.bounds_m"),
        ("[0.0, 0.0, 40.0, 12.0]", "[0.0, 0.0, 40.0]", 3, "site.bounds_m"),
        ("[0.0, 0.0, 40.0, 12.0]", "[0.0, 0.0, 40.0, nan]", 3, "site.bounds_m"),
        ("[0.0, 0.0, 40.0, 12.0]", '[0.0, 0.0, 40.0, "12"]', 3, "site.bounds_m"),
        ("[0.0, 0.0, 40.0, 12.0]", '"0 0 40 12"', 3, "site.bounds_m"),
    ],
)
def test_bad_site_value(tmp_path: Path, old: str, new: str, line: int, field: str) -> None:
    expect_error(make_folder(tmp_path, site_toml=site_replace(old, new)), "site.toml", line, field)


def test_other_tables_kept_verbatim(tmp_path: Path) -> None:
    site = SITE + '\n[simulation]\nseed = 11\npreset = "hospital-wing"\n\n[[obstacles]]\nxy_m = [[1, 2], [3, 4]]\n'
    s = read_scenario(make_folder(tmp_path, site_toml=site))
    assert s.site.extra == {
        "simulation": {"seed": 11, "preset": "hospital-wing"},
        "obstacles": [{"xy_m": [[1, 2], [3, 4]]}],
    }


# --------------------------------------------------------------------------- CSV structure


def test_bad_csv_quoting(tmp_path: Path) -> None:
    expect_error(make_folder(tmp_path, ranges_csv=ranges_with('1,"tag-07,ward-a1,3')), "ranges.csv", 7, None, "CSV")


@pytest.mark.parametrize("text", ["", "\n\n"], ids=["empty", "blank-header"])
def test_empty_file(tmp_path: Path, text: str) -> None:
    expect_error(make_folder(tmp_path, anchors_csv=text), "anchors.csv", 1, None, "header")


@pytest.mark.parametrize(
    "file, header, column",
    [
        ("ranges.csv", "t_s,node_a,node_b,range\n", "range_m"),
        ("anchors.csv", "node_id,x_m\n", "y_m"),
        ("agents.csv", "id\n", "node_id"),
        ("truth.csv", "t_s,node_id,x_m,ym\n", "y_m"),
    ],
)
def test_missing_column(tmp_path: Path, file: str, header: str, column: str) -> None:
    expect_error(make_folder(tmp_path, **{file.replace(".", "_"): header}), file, 1, column, "missing")


def test_repeated_column(tmp_path: Path) -> None:
    anchors = "node_id,x_m,y_m,x_m\nward-a1,0,0,1\n"
    expect_error(make_folder(tmp_path, anchors_csv=anchors, truth_csv=None), "anchors.csv", 1, "x_m", "twice")


def test_empty_column_name(tmp_path: Path) -> None:
    anchors = "node_id,x_m,y_m,\nward-a1,0,0,\n"
    expect_error(make_folder(tmp_path, anchors_csv=anchors), "anchors.csv", 1, None, "empty column")


def test_blank_line_between_rows(tmp_path: Path) -> None:
    ranges = R_HEAD + "0,tag-07,ward-a1,10\n\n0,tag-07,ward-a2,30\n"
    expect_error(make_folder(tmp_path, ranges_csv=ranges), "ranges.csv", 3, None, "blank line")


def test_whitespace_only_line_between_rows(tmp_path: Path) -> None:
    agents = "node_id\ntag-07\n   \ntag-12\n"
    expect_error(make_folder(tmp_path, agents_csv=agents), "agents.csv", 3, None, "blank line")


@pytest.mark.parametrize("row", ["0,tag-07,ward-a1", "0,tag-07,ward-a1,10,1"], ids=["short", "long"])
def test_wrong_number_of_fields(tmp_path: Path, row: str) -> None:
    expect_error(make_folder(tmp_path, ranges_csv=ranges_with(row)), "ranges.csv", 7, None, "fields")


# --------------------------------------------------------------------------- values


@pytest.mark.parametrize(
    "row, field",
    [
        ("abc,tag-07,ward-a1,10", "t_s"),
        ("nan,tag-07,ward-a1,10", "t_s"),
        ("0,tag-07,ward-a1,", "range_m"),
        ("0,tag-07,ward-a1,ten", "range_m"),
        ("0,tag-07,ward-a1,NaN", "range_m"),
        ("0,tag-07,ward-a1,inf", "range_m"),
        ("1e999,tag-07,ward-a1,10", "t_s"),
        ("0,tag-07,ward-a1,1_0", "range_m"),
    ],
)
def test_not_a_finite_number_in_ranges(tmp_path: Path, row: str, field: str) -> None:
    expect_error(make_folder(tmp_path, ranges_csv=ranges_with(row)), "ranges.csv", 7, field)


@pytest.mark.parametrize(
    "file, text, line, field",
    [
        ("anchors.csv", ANCHORS + "ward-a4,-inf,3\n", 5, "x_m"),
        ("anchors.csv", ANCHORS + "ward-a4,3,\n", 5, "y_m"),
        ("truth.csv", TRUTH + "1.0,tag-07,nan,1\n", 4, "x_m"),
        ("truth.csv", TRUTH + "soon,tag-07,1,1\n", 4, "t_s"),
    ],
)
def test_not_a_finite_coordinate(tmp_path: Path, file: str, text: str, line: int, field: str) -> None:
    expect_error(make_folder(tmp_path, **{file.replace(".", "_"): text}), file, line, field, "finite")


@pytest.mark.parametrize(
    "file, text, line, field",
    [
        ("ranges.csv", ranges_with("0, ,ward-a1,10"), 7, "node_a"),
        ("ranges.csv", ranges_with("0,tag-07,,10"), 7, "node_b"),
        ("anchors.csv", ANCHORS + ",1,1\n", 5, "node_id"),
        ("truth.csv", TRUTH + "1, ,1,1\n", 4, "node_id"),
        ("agents.csv", "node_id,floor\ntag-07,2\n,3\n", 3, "node_id"),
    ],
)
def test_empty_node_id(tmp_path: Path, file: str, text: str, line: int, field: str) -> None:
    expect_error(make_folder(tmp_path, **{file.replace(".", "_"): text}), file, line, field, "empty node id")


def test_duplicate_anchor(tmp_path: Path) -> None:
    err = expect_error(make_folder(tmp_path, anchors_csv=ANCHORS + " ward-a2 ,5,5\n"), "anchors.csv", 5, "node_id")
    assert "line 3" in err.message


def test_duplicate_agent(tmp_path: Path) -> None:
    expect_error(make_folder(tmp_path, agents_csv="node_id\ntag-07\ntag-12\ntag-07\n"), "agents.csv", 4, "node_id", "line 2")


def test_agent_that_is_an_anchor(tmp_path: Path) -> None:
    expect_error(make_folder(tmp_path, agents_csv="node_id\ntag-07\nward-a3\n"), "agents.csv", 3, "node_id", "anchor")


@pytest.mark.parametrize(
    "row, field",
    [("0,tag-99,ward-a1,10", "node_a"), ("0,tag-07,tag-99,10", "node_b")],
)
def test_unknown_node_in_ranges_with_agents_csv(tmp_path: Path, row: str, field: str) -> None:
    expect_error(make_folder(tmp_path, ranges_csv=ranges_with(row)), "ranges.csv", 7, field, "unknown node 'tag-99'")


def test_unknown_node_in_ranges_with_truth_only(tmp_path: Path) -> None:
    folder = make_folder(tmp_path, agents_csv=None, ranges_csv=ranges_with("0,tag-07,tag-99,10"))
    expect_error(folder, "ranges.csv", 7, "node_b", "unknown node")


def test_unknown_node_in_truth_with_agents_csv(tmp_path: Path) -> None:
    expect_error(make_folder(tmp_path, truth_csv=TRUTH + "0.0,tag-99,1,1\n"), "truth.csv", 4, "node_id", "unknown node")


def test_node_ranging_to_itself(tmp_path: Path) -> None:
    expect_error(make_folder(tmp_path, ranges_csv=ranges_with("0,tag-07, tag-07,0")), "ranges.csv", 7, "node_b", "itself")


def test_range_between_two_anchors(tmp_path: Path) -> None:
    expect_error(make_folder(tmp_path, ranges_csv=ranges_with("0,ward-a1,ward-a2,40")), "ranges.csv", 7, "node_b", "two anchors")


def test_negative_range(tmp_path: Path) -> None:
    expect_error(make_folder(tmp_path, ranges_csv=ranges_with("0,tag-07,ward-a1,-0.01")), "ranges.csv", 7, "range_m", "negative")


def test_absurd_range_default_limit(tmp_path: Path) -> None:
    """Without max_range_m the limit is twice radio_range_m (25 m here), so 50.01 m is absurd."""
    expect_error(make_folder(tmp_path, ranges_csv=ranges_with("0,tag-07,ward-a1,50.01")), "ranges.csv", 7, "range_m", "absurd")


def test_absurd_range_max_range(tmp_path: Path) -> None:
    folder = make_folder(tmp_path, site_toml=site_with("max_range_m = 16.5"))
    # Row 4 of the base ranges (line 5) is 16.60 m, above the 16.5 m limit.
    expect_error(folder, "ranges.csv", 5, "range_m", "absurd")


def test_duplicate_truth_row(tmp_path: Path) -> None:
    truth = TRUTH + "1.0,tag-07,8.1,6.0\n1.00,tag-07,8.2,6.0\n"
    expect_error(make_folder(tmp_path, truth_csv=truth), "truth.csv", 5, "node_id", "line 4")


def test_truth_same_node_other_epoch_is_fine(tmp_path: Path) -> None:
    truth = TRUTH + "0.5,tag-07,8.1,6.0\n"
    s = read_scenario(make_folder(tmp_path, truth_csv=truth))
    assert s.truth.t_s.tolist() == [0.0, 0.0, 0.5]


def test_error_in_last_file_means_no_result(tmp_path: Path) -> None:
    """Every other file is valid; one bad last row of ranges.csv still fails the whole read."""
    rows = "".join(f"{t},tag-07,ward-a1,10\n" for t in range(200))
    folder = make_folder(tmp_path, ranges_csv=R_HEAD + rows + "200,tag-07,ward-a1,-1\n")
    expect_error(folder, "ranges.csv", 202, "range_m")


# --------------------------------------------------------------------------- agent set rule


def test_agent_set_from_agents_csv_even_without_ranges(tmp_path: Path) -> None:
    """agents.csv wins: its order, and an agent with no range at all is still an agent."""
    folder = make_folder(tmp_path, agents_csv="node_id\ntag-12\ntag-30\ntag-07\n", truth_csv=None)
    assert read_scenario(folder).agent_ids == ["tag-12", "tag-30", "tag-07"]


def test_agent_set_from_truth(tmp_path: Path) -> None:
    """No agents.csv: the non-anchor ids of truth.csv, in order of first appearance."""
    truth = "t_s,node_id,x_m,y_m\n0,tag-12,24,4.5\n0,ward-a1,0,0\n0,tag-07,8,6\n1,tag-12,24,4.6\n0,tag-40,1,1\n"
    s = read_scenario(make_folder(tmp_path, agents_csv=None, truth_csv=truth))
    assert s.agent_ids == ["tag-12", "tag-07", "tag-40"]


def test_agent_set_from_ranges(tmp_path: Path) -> None:
    """Neither agents.csv nor truth.csv: non-anchor ids of ranges.csv, node_a before node_b on each row."""
    ranges = R_HEAD + "0,ward-a1,tag-33,5\n0,tag-07,tag-12,4\n0,tag-12,ward-a2,6\n0,tag-33,tag-07,7\n"
    s = read_scenario(make_folder(tmp_path, agents_csv=None, truth_csv=None, ranges_csv=ranges))
    assert s.agent_ids == ["tag-33", "tag-07", "tag-12"]
    assert s.truth is None


def test_agents_csv_takes_precedence_over_truth(tmp_path: Path) -> None:
    """With agents.csv, a truth-only agent is not added: it is an unknown node."""
    truth = TRUTH + "0.0,tag-40,1,1\n"
    expect_error(make_folder(tmp_path, truth_csv=truth), "truth.csv", 4, "node_id", "unknown node")


# --------------------------------------------------------------------------- extra columns


def test_extra_columns_kept(tmp_path: Path) -> None:
    folder = make_folder(
        tmp_path,
        anchors_csv="node_id,mount,x_m,y_m\nward-a1,wall,0,0\nward-a2, ceiling ,40,0\n",
        agents_csv="node_id,owner\ntag-07,ward nurse\ntag-12,\n",
        ranges_csv="blocked,t_s,node_a,node_b,range_m,rssi_dbm\n0,0,tag-07,ward-a1,10,-71\n1,0,tag-07,tag-12,16.4,-88\n",
        truth_csv="t_s,node_id,x_m,y_m,source\n0,tag-07,8,6,survey\n",
    )
    s = read_scenario(folder)
    assert s.anchor_extra == {"mount": ["wall", " ceiling "]}  # values as read, not stripped
    assert s.agent_extra == {"owner": ["ward nurse", ""]}
    assert s.ranges.extra == {"blocked": ["0", "1"], "rssi_dbm": ["-71", "-88"]}
    assert s.truth.extra == {"source": ["survey"]}
    assert np.array_equal(s.anchor_xy_m, [[0, 0], [40, 0]])
