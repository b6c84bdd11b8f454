"""`peerfix baseline record|check` with the installed core: format, both checks, report, JUnit, bad input.

The build-variant test (a core compiled with a deliberate change) is in
test_baseline_variant.py; here regressions are made by editing a recorded
baseline, which is what a baseline from another build looks like.
"""

from __future__ import annotations

import json
import os
import shutil
import subprocess
import sys

import numpy as np
import pytest
from peerfix.baseline import RunSettings
from peerfix.baseline.buildinfo import file_sha256, parse_stamp
from peerfix.baseline.estimates import Estimates, read_csv, write_csv
from peerfix.baseline.manifest import content_sha256, scenario_hashes
from peerfix.baseline.record import run_engine
from peerfix.cli import main
from peerfix.scenario import read_scenario
from test_baseline_helpers import junit_cases, reseal, rewrite_csv_cell, write_field

ITERATIONS = "2"


@pytest.fixture(scope="module")
def suite(tmp_path_factory):
    """Two scenarios (one of 2 epochs) and a baseline of them recorded through the CLI."""
    root = tmp_path_factory.mktemp("suite")
    a = write_field(root / "field-a", seed=1, epochs=2)
    b = write_field(root / "field-b", seed=2)
    baseline = root / "baseline"
    assert main(["baseline", "record", str(a), str(b), "--out", str(baseline), "--iterations", ITERATIONS]) == 0
    return a, b, baseline


@pytest.fixture
def copy(tmp_path, suite):
    """A private copy of the suite's baseline, to damage or edit."""
    a, b, baseline = suite
    mine = tmp_path / "baseline"
    shutil.copytree(baseline, mine)
    return a, b, mine


def check(args, capsys):
    status = main(["baseline", "check", *map(str, args)])
    out = capsys.readouterr()
    return status, out.out, out.err


# --------------------------------------------------------------------------- record


def test_record_stores_manifest_and_exact_estimates(suite):
    a, _, baseline = suite
    manifest = json.loads((baseline / "manifest.json").read_text())
    assert manifest["format"] == "peerfix-baseline" and manifest["format_version"] == 1
    from peerfix.core import _pfx

    assert manifest["core"]["library_sha256"] == file_sha256(_pfx.__file__)
    assert manifest["core"]["bounds"]["PFX_MAX_COMPONENTS"] == _pfx.lib.PFX_MAX_COMPONENTS
    assert manifest["settings"]["iterations"] == int(ITERATIONS) and manifest["settings"]["stored_iterations"] == "all"
    entry = {s["key"]: s for s in manifest["scenarios"]}
    assert set(entry) == {"field-a", "field-b"}
    assert entry["field-a"]["content_sha256"] == content_sha256(scenario_hashes(a))
    assert "ranges.csv" in entry["field-a"]["files"] and entry["field-a"]["epochs"] == 2

    # The files hold exactly what the engines report: the fixed core's Q integers, the twin's float64s.
    scenario = read_scenario(a)
    settings = RunSettings(iterations=int(ITERATIONS))
    for kind in ("fixed", "float"):
        stored = read_csv(baseline / "field-a" / f"{kind}.csv", kind == "fixed", scenario.agent_ids)
        fresh = run_engine(scenario, kind, settings)
        assert stored.shape == (2, int(ITERATIONS), 30)
        assert np.array_equal(stored.mean_m, fresh.mean_m) and np.array_equal(stored.cov_m2, fresh.cov_m2)
        assert np.array_equal(stored.mode_weight, fresh.mode_weight) and np.array_equal(stored.components, fresh.components)
    header, first = (baseline / "field-a" / "fixed.csv").read_text().splitlines()[:2]
    assert header.startswith("t_s,node_id,iteration,x_q10,y_q10,cov_xx_q20")
    assert all(cell.lstrip("-").isdigit() for cell in first.split(",")[3:])


def test_record_refuses_an_existing_baseline_unless_replace(copy, capsys):
    a, _, baseline = copy
    before = (baseline / "manifest.json").read_bytes()
    assert main(["baseline", "record", str(a), "--out", str(baseline), "--iterations", ITERATIONS]) == 2
    assert "--replace" in capsys.readouterr().err
    assert (baseline / "manifest.json").read_bytes() == before
    assert main(["baseline", "record", str(a), "--out", str(baseline), "--iterations", ITERATIONS, "--replace"]) == 0
    manifest = json.loads((baseline / "manifest.json").read_text())
    assert [s["key"] for s in manifest["scenarios"]] == ["field-a"]
    assert not (baseline / "field-b").exists()  # replaced as a whole


def test_final_only_stores_the_last_iteration_of_each_epoch(tmp_path, suite, capsys):
    a, _, _ = suite
    out = tmp_path / "final"
    assert main(["baseline", "record", str(a), "--out", str(out), "--iterations", "3", "--final-only"]) == 0
    stored = read_csv(out / "field-a" / "fixed.csv", True, read_scenario(a).agent_ids)
    assert stored.shape == (2, 1, 30) and stored.iterations.tolist() == [3]
    status, _, _ = check([a, "--against", out], capsys)
    assert status == 0


def test_estimates_csv_round_trip_keeps_missing_estimates_and_refuses_non_q_values(tmp_path):
    rng = np.random.default_rng(5)
    mean = np.round(rng.normal(0, 50, (2, 1, 3, 2)) * 1024) / 1024
    cov = np.round(np.abs(rng.normal(0, 1e-2, (2, 1, 3, 2, 2))) * 2**20) / 2**20
    cov[..., 1, 0] = cov[..., 0, 1]
    est = Estimates(np.array([0.0, 0.2]), ["t1", "t2", "t3"], np.array([4]), mean, cov, np.ones((2, 1, 3), int), np.ones((2, 1, 3)), np.ones((2, 1, 3), int))
    est.mean_m[1, 0, 2] = np.nan  # t3 has left in the second epoch
    write_csv(est, tmp_path / "fixed.csv", fixed=True)
    back = read_csv(tmp_path / "fixed.csv", True, est.agent_ids)
    assert np.array_equal(back.mean_m, est.mean_m, equal_nan=True) and np.array_equal(back.cov_m2, est.cov_m2)
    est.mean_m[0, 0, 0, 0] += 1e-4  # not a multiple of 2^-10 m
    with pytest.raises(ValueError, match="not a multiple"):
        write_csv(est, tmp_path / "bad.csv", fixed=True)


# --------------------------------------------------------------------------- check


def test_unchanged_build_passes_with_report_and_junit(suite, tmp_path, capsys):
    a, b, baseline = suite
    status, out, _ = check([a, b, "--against", baseline, "--report-out", tmp_path / "rep"], capsys)
    assert status == 0, out
    report = (tmp_path / "rep" / "report.md").read_text()
    assert report.startswith("# Baseline check: all checks hold")
    assert "All 120 estimates" in report  # field-a: 2 epochs x 2 iterations x 30 agents
    cases = junit_cases(tmp_path / "rep" / "junit.xml")
    assert {(c.get("classname"), c.get("name")) for c in cases} == {
        (f"peerfix.baseline.{k}", check) for k in ("field-a", "field-b") for check in ("fixed_bit_exact", "fixed_within_tolerance")
    }
    assert all(c.find("failure") is None for c in cases)


def test_a_moved_fixed_estimate_is_a_regression_named_in_report_and_junit(copy, tmp_path, capsys):
    a, b, baseline = copy
    # The recorded fixed core put tag-007 3 LSB further east in epoch 1.0, iteration 2.
    rewrite_csv_cell(baseline / "field-a" / "fixed.csv", {"t_s": "1.0", "node_id": "tag-007", "iteration": "2"}, "x_q10", lambda v: str(int(v) - 3))
    reseal(baseline, "field-a", "fixed")
    status, out, _ = check([a, b, "--against", baseline, "--report-out", tmp_path / "rep"], capsys)
    assert status == 1
    assert "field-a fixed_bit_exact: FAIL" in out and "field-b fixed_bit_exact: pass" in out
    assert "field-a fixed_within_tolerance: pass" in out  # 3 mm is within the tolerance of the float twin
    report = (tmp_path / "rep" / "report.md").read_text()
    assert report.startswith("# Baseline check: REGRESSION")
    assert "| 1.0 | tag-007 | 2 | +0.002930 | +0.000000 | 0.002930 | 3 |" in report  # 3 / 1024 m
    assert "first difference: epoch t_s = 1.0, iteration 2" in report
    assert (tmp_path / "rep" / "plots" / "field-a-moved-map.png").stat().st_size > 0
    assert (tmp_path / "rep" / "plots" / "field-a-moved-histogram.png").stat().st_size > 0
    failed = [c for c in junit_cases(tmp_path / "rep" / "junit.xml") if c.find("failure") is not None]
    assert [(c.get("classname"), c.get("name")) for c in failed] == [("peerfix.baseline.field-a", "fixed_bit_exact")]
    assert "agent=tag-007 iteration=2" in failed[0].find("failure").text


def test_a_moved_float_reference_fails_tolerance_but_not_exactness(copy, capsys, tmp_path):
    a, _, baseline = copy
    # One agent of the float reference 1 m off in the final iteration: p99 over 30 agents sees it.
    rewrite_csv_cell(baseline / "field-a" / "float.csv", {"t_s": "0.0", "node_id": "tag-003", "iteration": ITERATIONS}, "x_m", lambda v: repr(float(v) + 1.0))
    reseal(baseline, "field-a", "float")
    status, out, _ = check([a, "--against", baseline, "--report-out", tmp_path / "rep"], capsys)
    assert status == 1
    assert "field-a fixed_bit_exact: pass" in out and "field-a fixed_within_tolerance: FAIL" in out
    report = (tmp_path / "rep" / "report.md").read_text()
    assert "| position_diff_p99 | ≤ 0.05 (`POSITION_P99_M`) |" in report and "| **NO** |" in report


def _record_outside(baseline, key, factor):
    """The manifest as if the baseline had been recorded with the tolerance check's current figures
    times `factor` (1: as now; < 1: better then than now), already outside tolerance."""
    from peerfix.baseline import check_baseline

    result = check_baseline([baseline.parent / key], baseline)
    summary = dict(result.scenarios[0].tolerance.summary)
    summary["position_diff_p99_m"] *= factor
    manifest = json.loads((baseline / "manifest.json").read_text())
    entry = next(s for s in manifest["scenarios"] if s["key"] == key)
    entry["tolerance_at_record"] = {k: v for k, v in summary.items() if isinstance(v, (int, float, dict))}
    (baseline / "manifest.json").write_text(json.dumps(manifest, indent=2))


def test_a_tolerance_outside_since_record_and_no_worse_is_not_a_regression(copy, capsys, tmp_path):
    """A release check asks what got worse: a baseline recorded already outside a tolerance passes
    while that figure is no worse, and the report still shows it outside."""
    a, _, baseline = copy
    shutil.copytree(a, baseline.parent / "field-a")
    rewrite_csv_cell(baseline / "field-a" / "float.csv", {"t_s": "0.0", "node_id": "tag-003", "iteration": ITERATIONS}, "x_m", lambda v: repr(float(v) + 1.0))
    reseal(baseline, "field-a", "float")
    _record_outside(baseline, "field-a", 1.0)
    status, out, _ = check([baseline.parent / "field-a", "--against", baseline, "--report-out", tmp_path / "rep"], capsys)
    assert status == 0, out
    assert "field-a fixed_within_tolerance: pass" in out
    report = (tmp_path / "rep" / "report.md").read_text()
    assert "outside since record, no worse: position_diff_p99" in report
    assert "| position_diff_p99 | ≤ 0.05 (`POSITION_P99_M`) |" in report and "no, as at record (no worse)" in report
    # the same figure, better at record than now: worse since, a regression
    _record_outside(baseline, "field-a", 0.5)
    status, out, _ = check([baseline.parent / "field-a", "--against", baseline, "--junit", tmp_path / "j.xml"], capsys)
    assert status == 1 and "field-a fixed_within_tolerance: FAIL" in out
    failures = [f for c in junit_cases(tmp_path / "j.xml") for f in c.findall("failure")]
    assert len(failures) == 1 and failures[0].get("message") == "outside tolerance: position_diff_p99"


def test_a_subset_of_the_suite_is_checked_and_the_rest_reported_skipped(suite, tmp_path, capsys):
    a, _, baseline = suite
    status, out, _ = check([a, "--against", baseline, "--junit", tmp_path / "j.xml"], capsys)
    assert status == 0 and "field-b: in the baseline, not checked" in out
    skipped = [c for c in junit_cases(tmp_path / "j.xml") if c.find("skipped") is not None]
    assert {c.get("classname") for c in skipped} == {"peerfix.baseline.field-b"} and len(skipped) == 2


# --------------------------------------------------------------------------- bad input: exit 2


def _drop(path):
    path.unlink()


BAD = {
    # case: (how to damage the copy of the baseline or scenario, extra check arguments, expected message fragments)
    "no baseline": (lambda a, bl: shutil.rmtree(bl), [], ["baseline folder not found"]),
    "no manifest": (lambda a, bl: _drop(bl / "manifest.json"), [], ["manifest.json", "manifest missing"]),
    "manifest not JSON": (lambda a, bl: (bl / "manifest.json").write_text('{"format": "peerfix-baseline",\n  oops\n'), [], ["manifest.json:2", "not valid JSON"]),
    "manifest field": (
        lambda a, bl: (bl / "manifest.json").write_text(json.dumps({**json.loads((bl / "manifest.json").read_text()), "format_version": 9})),
        [],
        ["field 'format_version'"],
    ),
    "damaged estimates": (
        lambda a, bl: rewrite_csv_cell(bl / "field-a" / "fixed.csv", {"t_s": "0.0", "node_id": "tag-001", "iteration": "1"}, "y_q10", lambda v: str(int(v) + 1)),
        [],
        ["field-a/fixed.csv", "damaged", "scenarios[0].fixed_sha256"],
    ),
    "missing estimates": (lambda a, bl: _drop(bl / "field-a" / "float.csv"), [], ["field-a/float.csv", "missing"]),
    "other iterations": (lambda a, bl: None, ["--iterations", "3"], ["field 'settings.iterations'", "recorded 2, asked 3"]),
    "other K": (lambda a, bl: None, ["--components", "3"], ["field 'settings.params.max_components'", "recorded 4, asked 3"]),
    "other param": (lambda a, bl: None, ["--param", "merge_gate_sigma2=2.0"], ["settings.params.merge_gate_sigma2"]),
    "other schedule": (lambda a, bl: None, ["--schedule", "broadcast"], ["settings.schedule"]),
}
# A changed scenario has its own test below (it needs a private copy of the scenario).


@pytest.mark.parametrize("case", sorted(BAD))
def test_bad_input_exits_2_naming_file_and_field(copy, tmp_path, capsys, case):
    a, _, baseline = copy
    damage, extra, fragments = BAD[case]
    damage(a, baseline)
    status, out, err = check([a, "--against", baseline, "--report-out", tmp_path / "rep", *extra], capsys)
    assert status == 2, out + err
    for fragment in fragments:
        assert fragment in err, err
    assert not (tmp_path / "rep").exists()  # nothing written on bad input


def test_a_changed_scenario_is_bad_input_not_a_regression(suite, tmp_path, capsys):
    a, _, baseline = suite
    mine = tmp_path / "field-a"
    shutil.copytree(a, mine)
    lines = (mine / "ranges.csv").read_text().splitlines()
    header = lines[0].split(",")
    cells = lines[1].split(",")
    cells[header.index("range_m")] = repr(float(cells[header.index("range_m")]) + 0.01)
    (mine / "ranges.csv").write_text("\n".join([lines[0], ",".join(cells), *lines[2:]]) + "\n")
    status, _, err = check([mine, "--against", baseline], capsys)
    assert status == 2
    assert "ranges.csv" in err and "field 'scenarios[0].files.ranges.csv'" in err and "not a regression" in err


def test_files_beside_a_scenario_are_not_its_content(suite, tmp_path, capsys):
    a, _, baseline = suite
    mine = tmp_path / "field-a"
    shutil.copytree(a, mine)
    (mine / "notes.txt").write_text("walked the site on Tuesday\n")
    status, out, err = check([mine, "--against", baseline], capsys)
    assert status == 0, out + err


def test_a_scenario_not_in_the_baseline_is_bad_input(suite, tmp_path, capsys):
    _, _, baseline = suite
    other = write_field(tmp_path / "field-c", seed=3)
    status, _, err = check([other, "--against", baseline], capsys)
    assert status == 2 and "not in the baseline" in err and "field-a, field-b" in err


def test_tolerance_on_moving_tags_counts_the_present_agents_only(tmp_path):
    """A moving scenario (a late joiner): the tolerance check compares, per epoch, the tags that took
    part (the run made now tells which; the recorded CSV files hold every tag, stale reports too)."""
    from peerfix.baseline import diff
    from peerfix.simulate import simulate

    scenario = simulate("cold-store-shift", seed=3, duration_s=4)
    settings = RunSettings(iterations=2)
    reference, now = run_engine(scenario, "float", settings), run_engine(scenario, "fixed", settings)
    write_csv(reference, tmp_path / "float.csv", fixed=False)
    recorded = read_csv(tmp_path / "float.csv", False, list(scenario.agent_ids))
    assert recorded.present is None and now.present is not None and not now.present.all()
    rows = diff.tolerance_rows(recorded, now, scenario)
    assert len(rows) == 2 * int(now.present.sum())
    away = {(float(t), a) for t, here in zip(now.t_s, now.present) for a, h in zip(scenario.agent_ids, here) if not h}
    assert away and not any((r["t_s"], r["node_id"]) in away for r in rows)
    assert all(np.isfinite(r["error_fixed_m"]) for r in rows)  # every present tag has its truth


def test_core_library_hook_refuses_a_missing_file(tmp_path):
    """PEERFIX_CORE_LIBRARY names a file that is not there: an ImportError, not the installed core."""
    env = {**os.environ, "PEERFIX_CORE_LIBRARY": str(tmp_path / "nothing.so")}
    proc = subprocess.run([sys.executable, "-c", "import peerfix.core"], env=env, capture_output=True, text=True, check=False)
    assert proc.returncode != 0 and "PEERFIX_CORE_LIBRARY" in proc.stderr and "no such file" in proc.stderr


def test_build_stamp_is_read_as_build_py_writes_it():
    """The wrapper comment of core/_build.py make_ffibuilder, and the same text bare."""
    text = "#include <x.h>\n/* build: PEERFIX_CFLAGS=-O1 -g PEERFIX_LDFLAGS= PEERFIX_DEFINES=PFX_VARIANT_TIES_DOWN PFX_MAX_COMPONENTS=4 */\n"
    want = {"cflags": "-O1 -g", "ldflags": "", "defines": ["PFX_VARIANT_TIES_DOWN", "PFX_MAX_COMPONENTS=4"]}
    assert parse_stamp(text) == want
    assert parse_stamp("PEERFIX_CFLAGS=-O1 -g PEERFIX_LDFLAGS= PEERFIX_DEFINES=PFX_VARIANT_TIES_DOWN PFX_MAX_COMPONENTS=4") == want
    assert parse_stamp("/* build: PEERFIX_CFLAGS= PEERFIX_LDFLAGS= PEERFIX_DEFINES= */")["defines"] == []
    assert parse_stamp("no stamp here") is None
