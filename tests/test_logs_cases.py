"""Logs from outside: one test per documented case of docs/scenario-format.md
("Logs from outside"), each asserting the count its rule reports and the lines.

The base folder (tests/scenario_helpers.py) is a hospital wing with anchors
ward-a1..a3 and declared agents tag-07, tag-12; line 1 of ranges.csv is the
header, so the n-th row below it is line n + 1.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest
from scenario_helpers import make_folder

from peerfix.cli import main
from peerfix.errors import InputError
from peerfix.network import epoch_links
from peerfix.scenario import read_scenario
from peerfix.scenario.epochs import RULES, group_epochs

HEAD = "t_s,node_a,node_b,range_m\n"


def plan_of(tmp_path: Path, rows: str, window_s: float = 0.0, set_aside: bool = False):
    folder = make_folder(tmp_path, ranges_csv=HEAD + rows, truth_csv=None)
    return group_epochs(read_scenario(folder, set_aside_bad_rows=set_aside), window_s)


def fired(plan) -> dict[str, int]:
    return plan.report.fired()


def epoch_lines(plan) -> list[list[int]]:
    return [plan.scenario.ranges.line[plan.rows(e)].tolist() for e in range(len(plan.epoch_t_s))]


def test_sorted_exact_log_fires_nothing(tmp_path):
    plan = plan_of(tmp_path, "0.0,tag-07,ward-a1,10.0\n0.0,tag-12,ward-a2,16.6\n1.0,tag-07,ward-a1,10.1\n")
    assert fired(plan) == {}
    assert plan.epoch_t_s.tolist() == [0.0, 1.0]
    assert set(RULES) == set(plan.report.rules)


def test_unsorted_rows_are_sorted_stably_and_counted(tmp_path):
    rows = (
        "1.0,tag-07,ward-a1,10.0\n"  # line 2
        "0.0,tag-12,ward-a2,16.6\n"  # line 3: earlier than line 2, another node -> out_of_order
        "0.0,tag-12,ward-a3,8.47\n"  # line 4: out_of_order
        "1.0,tag-12,ward-a2,16.5\n"  # line 5
    )
    plan = plan_of(tmp_path, rows)
    assert fired(plan) == {"out_of_order": 2}
    assert plan.report.rules["out_of_order"].lines == [3, 4]
    assert epoch_lines(plan) == [[3, 4], [2, 5]]  # sorted by time, file order kept within a time


def test_clock_going_backwards_for_one_node(tmp_path):
    rows = (
        "0.0,tag-07,ward-a1,10.0\n"  # line 2
        "2.0,tag-07,ward-a1,10.1\n"  # line 3
        "2.0,tag-12,ward-a2,16.6\n"  # line 4
        "1.0,tag-07,ward-a3,13.4\n"  # line 5: tag-07 stamped 2.0 before -> its clock went back
        "3.0,tag-12,ward-a2,16.7\n"  # line 6
    )
    plan = plan_of(tmp_path, rows)
    assert fired(plan) == {"clock_backwards": 1}
    assert plan.report.rules["clock_backwards"].lines == [5]
    # The stamp is trusted: the row sits in the epoch of its own time.
    assert plan.epoch_t_s.tolist() == [0.0, 1.0, 2.0, 3.0]
    assert epoch_lines(plan)[1] == [5]


def test_repeated_measurements_of_one_pair_are_fused(tmp_path):
    rows = "0.0,tag-07,ward-a1,10.0\n0.0,tag-07,ward-a1,10.2\n0.0,tag-07,ward-a1,10.4\n0.0,tag-12,ward-a2,16.6\n"
    plan = plan_of(tmp_path, rows)
    assert fired(plan) == {"repeated_range": 2}
    assert plan.report.rules["repeated_range"].lines == [3, 4]
    link = {l.other: l for l in epoch_links(plan.scenario, 0.0, rows=plan.rows(0))["tag-07"]}["ward-a1"]
    assert link.measurements == 3
    assert link.range_m == pytest.approx(10.2)
    assert link.sigma_m == pytest.approx(0.1 / np.sqrt(3))  # base site sigma_m = 0.1


def test_both_directions_of_one_pair_are_fused(tmp_path):
    rows = (
        "0.0,tag-07,tag-12,16.4\n"  # line 2
        "0.0,tag-12,tag-07,16.6\n"  # line 3: the other direction
        "0.0,ward-a1,tag-07,10.0\n"  # line 4
        "0.0,tag-07,ward-a1,10.2\n"  # line 5: the other direction
        "0.0,tag-07,ward-a1,10.1\n"  # line 6: a repeat of line 5's direction
    )
    plan = plan_of(tmp_path, rows)
    assert fired(plan) == {"both_directions": 2, "repeated_range": 1}
    assert plan.report.rules["both_directions"].lines == [3, 5]
    assert plan.report.rules["repeated_range"].lines == [6]
    links = epoch_links(plan.scenario, 0.0, rows=plan.rows(0))
    by_other = {l.other: l for l in links["tag-07"]}
    assert by_other["tag-12"].measurements == 2 and by_other["tag-12"].range_m == pytest.approx(16.5)
    assert by_other["ward-a1"].measurements == 3 and by_other["ward-a1"].range_m == pytest.approx(10.1)
    assert {l.other: l.range_m for l in links["tag-12"]}["tag-07"] == pytest.approx(16.5)


def test_gap_epochs_simply_absent_and_counted(tmp_path):
    times = [0.0, 1.0, 2.0, 3.0, 8.0, 9.0]
    rows = "".join(f"{t},tag-07,ward-a1,10.0\n" for t in times)
    plan = plan_of(tmp_path, rows)
    assert plan.epoch_t_s.tolist() == times  # no epochs invented for 4..7 s
    assert fired(plan) == {"gap": 1}
    assert plan.report.rules["gap"].lines == [6]  # the first row after the gap (t = 8)


def test_clock_jitter_within_the_window_groups_into_one_epoch(tmp_path):
    rows = (
        "0.00,tag-07,ward-a1,10.0\n"  # line 2
        "0.02,tag-12,ward-a2,16.6\n"  # line 3
        "0.05,tag-07,ward-a3,13.4\n"  # line 4
        "1.01,tag-07,ward-a1,10.1\n"  # line 5
        "0.98,tag-12,ward-a2,16.5\n"  # line 6: earlier than line 5, but within the window: not out of order
    )
    plan = plan_of(tmp_path, rows, window_s=0.1)
    assert plan.epoch_t_s.tolist() == [0.0, 0.98]  # an epoch's t_s is its first stamp
    assert epoch_lines(plan) == [[2, 3, 4], [6, 5]]
    assert fired(plan) == {"jitter_grouped": 3}
    assert plan.report.rules["jitter_grouped"].lines == [3, 4, 5]
    assert plan.scenario.ranges.t_s.tolist() == [0.0, 0.0, 0.0, 0.98, 0.98]
    np.testing.assert_array_equal(plan.raw_t_s, [0.0, 0.02, 0.05, 0.98, 1.01])
    # Without a window the same log has five epochs and line 6 arrived late.
    exact = plan_of(tmp_path / "exact", rows, window_s=0.0)
    # (and the 0.93 s step is a gap against the median step of 0.03 s).
    assert len(exact.epoch_t_s) == 5 and fired(exact) == {"out_of_order": 1, "gap": 1}


def test_truth_is_restamped_to_its_epoch(tmp_path):
    truth = "t_s,node_id,x_m,y_m\n0.0,tag-07,8.0,6.0\n0.0,tag-12,24.0,4.5\n1.0,tag-07,8.5,6.0\n1.0,tag-12,24.0,5.0\n"
    rows = "0.01,tag-07,ward-a1,10.0\n0.03,tag-12,ward-a2,16.6\n0.99,tag-07,ward-a1,10.4\n1.02,tag-12,ward-a2,16.2\n"
    folder = make_folder(tmp_path, ranges_csv=HEAD + rows, truth_csv=truth)
    plan = group_epochs(read_scenario(folder), 0.1)
    assert plan.epoch_t_s.tolist() == [0.01, 0.99]
    # Truth at 0.0 is before the first stamp (0.01): outside every window, kept at its own time.
    at = plan.scenario.truth.at(0.99)
    assert sorted(at) == ["tag-07", "tag-12"]
    np.testing.assert_array_equal(at["tag-07"], [8.5, 6.0])
    np.testing.assert_array_equal(at["tag-12"], [24.0, 5.0])
    assert plan.scenario.truth.at(0.01) == {}


# --------------------------------------------------------------------------- malformed rows

BAD_ROWS = {
    # case: (row on line 3, reason, field)
    "unknown node": ("0.0,tag-99,ward-a1,10.0", "unknown_node", "node_a"),
    "NaN": ("0.0,tag-07,ward-a1,nan", "nan", "range_m"),
    "negative range": ("0.0,tag-07,ward-a1,-1.5", "negative_range", "range_m"),
    "non-numeric": ("zero,tag-07,ward-a1,10.0", "not_a_number", "t_s"),
    "infinite": ("0.0,tag-07,ward-a1,inf", "infinite", "range_m"),
    "absurd range": ("0.0,tag-07,ward-a1,9000", "absurd_range", "range_m"),
    "range to itself": ("0.0,tag-07,tag-07,1.0", "self_range", "node_b"),
    "two anchors": ("0.0,ward-a1,ward-a2,40.0", "anchor_to_anchor", "node_b"),
    "empty node id": ("0.0, ,ward-a1,10.0", "empty_node_id", "node_a"),
    "wrong field count": ("0.0,tag-07,ward-a1", "wrong_field_count", None),
}


@pytest.mark.parametrize("case", sorted(BAD_ROWS))
def test_malformed_row_is_an_error_by_default(tmp_path, case):
    row, _reason, field = BAD_ROWS[case]
    folder = make_folder(tmp_path, ranges_csv=HEAD + "0.0,tag-07,ward-a1,10.0\n" + row + "\n0.0,tag-12,ward-a2,16.6\n")
    with pytest.raises(InputError) as info:
        read_scenario(folder)
    assert (info.value.path, info.value.line, info.value.field) == (str(folder / "ranges.csv"), 3, field)


@pytest.mark.parametrize("case", sorted(BAD_ROWS))
def test_malformed_row_set_aside_on_request(tmp_path, case):
    row, reason, field = BAD_ROWS[case]
    rows = "0.0,tag-07,ward-a1,10.0\n" + row + "\n0.0,tag-12,ward-a2,16.6\n" + row + "\n"
    folder = make_folder(tmp_path, ranges_csv=HEAD + rows, truth_csv=None)
    scenario = read_scenario(folder, set_aside_bad_rows=True)
    assert [(r.line, r.field, r.reason) for r in scenario.set_aside] == [(3, field, reason), (5, field, reason)]
    assert scenario.ranges.line.tolist() == [2, 4]  # the good rows, nothing else
    report = group_epochs(scenario).report.as_dict()
    assert report["set_aside"] == {reason: {"count": 2, "lines": [3, 5]}}
    assert report["rows_set_aside"] == 2 and report["rows_used"] == 2


def test_blank_line_set_aside_on_request(tmp_path):
    folder = make_folder(tmp_path, ranges_csv=HEAD + "0.0,tag-07,ward-a1,10.0\n\n0.0,tag-12,ward-a2,16.6\n")
    with pytest.raises(InputError, match="blank line"):
        read_scenario(folder)
    scenario = read_scenario(folder, set_aside_bad_rows=True)
    assert [(r.line, r.reason) for r in scenario.set_aside] == [(3, "blank_line")]


def test_other_files_stay_strict_with_set_aside(tmp_path):
    folder = make_folder(tmp_path, anchors_csv="node_id,x_m,y_m\nward-a1,0,nan\nward-a2,40,0\nward-a3,20,12\n")
    with pytest.raises(InputError) as info:
        read_scenario(folder, set_aside_bad_rows=True)
    assert (Path(info.value.path).name, info.value.line, info.value.field) == ("anchors.csv", 2, "y_m")


def test_cli_reports_rules_and_set_aside_rows(tmp_path, capsys):
    rows = (
        "1.0,tag-07,ward-a1,10.3\n"  # line 2
        "0.0,tag-07,ward-a1,10.02\n"  # line 3: tag-07 stamped 1.0 before: clock_backwards
        "0.0,tag-07,ward-a3,13.43\n"  # line 4: clock_backwards
        "0.0,tag-07,tag-12,nan\n"  # line 5: set aside (nan)
        "0.0,tag-12,ward-a2,16.60\n"  # line 6: out_of_order
        "0.0,ward-a2,tag-12,16.62\n"  # line 7: out_of_order, both_directions
        "0.0,tag-12,ward-a3,-8.47\n"  # line 8: set aside (negative_range)
        "0.0,tag-12,ward-a3,8.47\n"  # line 9: out_of_order
    )
    folder = make_folder(tmp_path, ranges_csv=HEAD + rows)
    out = tmp_path / "out"
    assert main(["run", str(folder), "--out", str(out)]) == 2  # strict by default
    assert not out.exists()
    capsys.readouterr()
    assert main(["run", str(folder), "--out", str(out), "--set-aside-bad-rows", "--json"]) == 0
    captured = capsys.readouterr()
    summary = json.loads(captured.out)
    assert summary["set_aside"] == {"nan": 1, "negative_range": 1}
    assert summary["log_rules"]["clock_backwards"] == 2 and summary["log_rules"]["out_of_order"] == 3
    assert "set aside: 1 row(s), nan, line(s) 5" in captured.err
    assert "set aside: 1 row(s), negative_range, line(s) 8" in captured.err
    assert "clock_backwards 2" in captured.err
    log = json.loads((out / "metrics.json").read_text())["log"]
    assert log["rules"]["clock_backwards"]["lines"] == [3, 4]
    assert log["rules"]["out_of_order"]["lines"] == [6, 7, 9]
    assert log["rules"]["both_directions"]["lines"] == [7]
    assert log["set_aside"] == {"nan": {"count": 1, "lines": [5]}, "negative_range": {"count": 1, "lines": [8]}}
    assert log["epochs"] == 2 and log["rows_used"] == 6
