"""`peerfix run` end to end: outputs, JSON summary, and bad input (exit 2, nothing written)."""

import csv
import json

import pytest

from peerfix.cli import main
from scenario_helpers import make_folder

# (file override, expected "file:line: field 'name'" fragment) per error class of the format.
BAD_INPUTS = {
    "non-numeric range": ({"ranges_csv": "t_s,node_a,node_b,range_m\n0.0,tag-07,ward-a1,ten\n"}, "ranges.csv:2: field 'range_m'"),
    "NaN range": ({"ranges_csv": "t_s,node_a,node_b,range_m\n0.0,tag-07,ward-a1,nan\n"}, "ranges.csv:2: field 'range_m'"),
    "negative range": ({"ranges_csv": "t_s,node_a,node_b,range_m\n0.0,tag-07,ward-a1,10.0\n0.0,tag-12,ward-a2,-1.5\n"}, "ranges.csv:3: field 'range_m'"),
    "absurd range": ({"ranges_csv": "t_s,node_a,node_b,range_m\n0.0,tag-07,ward-a1,9000\n"}, "ranges.csv:2: field 'range_m'"),
    "unknown node": ({"ranges_csv": "t_s,node_a,node_b,range_m\n0.0,tag-99,ward-a1,10.0\n"}, "ranges.csv:2: field 'node_a'"),
    "range between anchors": ({"ranges_csv": "t_s,node_a,node_b,range_m\n0.0,ward-a1,ward-a2,40.0\n"}, "ranges.csv:2"),
    "duplicate anchor": ({"anchors_csv": "node_id,x_m,y_m\nward-a1,0,0\nward-a1,1,1\n"}, "anchors.csv:3: field 'node_id'"),
    "missing column": ({"ranges_csv": "t_s,node_a,range_m\n0.0,tag-07,10.0\n"}, "ranges.csv:1: field 'node_b'"),
}


@pytest.mark.parametrize("case", sorted(BAD_INPUTS))
def test_bad_input_exits_2_names_the_place_and_writes_nothing(tmp_path, capsys, case):
    files, where = BAD_INPUTS[case]
    folder = make_folder(tmp_path, **files)
    out = tmp_path / "out"
    assert main(["run", str(folder), "--out", str(out)]) == 2
    err = capsys.readouterr().err
    assert where in err, err
    assert not out.exists()  # no partial output


def test_run_writes_estimates_and_metrics(tmp_path, capsys):
    folder = make_folder(tmp_path)
    out = tmp_path / "out"
    assert main(["run", str(folder), "--engine", "float", "--iterations", "3", "--out", str(out), "--json"]) == 0
    summary = json.loads(capsys.readouterr().out)
    for key in ("fraction_within_1m", "rmse_m", "coverage_95", "peb_rms_m", "fraction_peb_below_0_33m"):
        assert key in summary
    with open(out / "estimates.csv") as f:
        rows = list(csv.DictReader(f))
    assert list(rows[0])[:8] == ["t_s", "node_id", "iteration", "x_m", "y_m", "cov_xx_m2", "cov_xy_m2", "cov_yy_m2"]
    assert len(rows) == 2 * 3  # one row per agent per iteration
    metrics = json.loads((out / "metrics.json").read_text())
    per_iter = metrics["epochs"][0]["iterations"]
    assert [m["iteration"] for m in per_iter] == [1, 2, 3]
    assert metrics["final"] == per_iter[-1]


def test_no_coop_and_schedule_options(tmp_path, capsys):
    folder = make_folder(tmp_path)
    for extra in (["--no-coop"], ["--schedule", "broadcast"], ["--components", "2", "--robust"]):
        out = tmp_path / ("out" + "_".join(extra))
        assert main(["run", str(folder), "--out", str(out), "--json", *extra]) == 0
        doc = json.loads(capsys.readouterr().out)
        assert doc["cooperative"] is ("--no-coop" not in extra)


def test_unknown_param_is_refused(tmp_path):
    folder = make_folder(tmp_path)
    with pytest.raises(SystemExit, match="NAME=VALUE"):
        main(["run", str(folder), "--out", str(tmp_path / "o"), "--param", "nonsense=1"])


def test_estimates_header_and_metrics_without_truth(tmp_path, capsys):
    folder = make_folder(tmp_path, truth_csv=None)
    out = tmp_path / "out"
    assert main(["run", str(folder), "--out", str(out), "--iterations", "2"]) == 0
    captured = capsys.readouterr()
    assert "no truth to score" in captured.out
    assert "log: 5 rows in 1 epochs (window 0 s); rules fired: none" in captured.err
    with open(out / "estimates.csv") as f:
        header = next(csv.reader(f))
    # The documented columns, in order (docs/scenario-format.md, "Run outputs").
    assert header == ["t_s", "node_id", "iteration", "x_m", "y_m", "cov_xx_m2", "cov_xy_m2", "cov_yy_m2", "mode_count", "components", "present"]
    metrics = json.loads((out / "metrics.json").read_text())
    assert metrics["epochs"] == [] and metrics["final"] == {}
    assert metrics["log"]["rows_used"] == 5 and metrics["time"]["epochs"] == 1
    assert metrics["latency"]["agents_heard"] == 2 and metrics["latency"]["agents_within_1m"] is None


def test_time_options_reach_the_run(tmp_path, capsys):
    ranges = (
        "t_s,node_a,node_b,range_m\n"
        "0.00,tag-07,ward-a1,10.02\n0.02,tag-07,ward-a3,13.43\n0.01,tag-12,ward-a2,16.60\n0.03,tag-12,ward-a3,8.47\n"
        "1.00,tag-07,ward-a1,10.02\n1.01,tag-07,ward-a3,13.43\n1.02,tag-12,ward-a2,16.60\n1.00,tag-12,ward-a3,8.47\n"
    )
    folder = make_folder(tmp_path, ranges_csv=ranges, truth_csv=None)
    out = tmp_path / "out"
    args = ["run", str(folder), "--out", str(out), "--epoch-window-s", "0.05", "--walk-speed-mps", "1.2", "--silence-timeout-s", "5", "--fix-sd-m", "0.4"]
    assert main(args) == 0
    assert "jitter_grouped 5" in capsys.readouterr().err
    metrics = json.loads((out / "metrics.json").read_text())
    assert metrics["time"]["epochs"] == 2 and metrics["time"]["epoch_window_s"] == 0.05
    assert metrics["time"]["motion"]["walk_speed_mps"] == 1.2 and metrics["time"]["silence_timeout_s"] == 5.0
    assert metrics["latency"]["criterion"]["sd_max_m"] == 0.4
    assert metrics["log"]["rules"]["jitter_grouped"]["lines"] == [3, 4, 5, 7, 8]


@pytest.mark.parametrize("option", [["--epoch-window-s", "-1"], ["--walk-speed-mps", "nan"], ["--silence-timeout-s", "0"]])
def test_bad_time_option_is_refused(tmp_path, option):
    folder = make_folder(tmp_path)
    with pytest.raises(SystemExit, match=option[0]):
        main(["run", str(folder), "--out", str(tmp_path / "o"), *option])
