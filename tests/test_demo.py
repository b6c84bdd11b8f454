"""`peerfix demo` and the report package: files, numbers, pictures, and the point of the tool.

The full static demo (cold-store, the demo's default seed, 6 iterations) runs once per module
(about 8 s) with a 10 s moving part (the float twin over its first 4 s, in
this process); the CLI test uses 2 iterations and a 4 s moving part with the
float twin in a second process, to stay fast.
"""

from __future__ import annotations

import json
import math
import re
from pathlib import Path

import matplotlib.image as mpimg
import numpy as np
import pytest
from scipy.stats import chi2, multivariate_normal

from peerfix.cli import main
from peerfix.report.demo import DEFAULT_SEED
from peerfix.driver import IterationRecord
from peerfix.reference import Mixture
from peerfix.report import RUNS, run_demo
from peerfix.report.belief import mass_levels, mixture_density, pick_agent, window_m
from peerfix.report.demo import PICTURES, TRACK_PICTURES
from peerfix.report.plots import ellipse_95
from peerfix.scenario import read_scenario
from peerfix.simulate import simulate, summarize
from scenario_helpers import assert_scenarios_equal

PNG_MAGIC = b"\x89PNG\r\n\x1a\n"  # PNG signature (PNG specification, section 5.2)
# The report prints shares as percentages with one decimal and lengths in
# metres with three: a printed figure may differ from the file by half a unit
# of its last digit, and no more.
SHARE_TOL = 0.05e-2 + 1e-12
METRE_TOL = 0.5e-3 + 1e-12


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    out = tmp_path_factory.mktemp("demo")
    summary = run_demo(out, progress=False, moving_duration_s=MOVING_S, float_duration_s=FLOAT_S, parallel=False)
    return out, summary


MOVING_S, FLOAT_S = 10.0, 4.0


def _metrics(out: Path, name: str) -> dict:
    return json.loads((out / "runs" / name / "metrics.json").read_text())


def _number(cell: str) -> tuple[float, str]:
    cell = cell.strip()
    if cell.endswith("%"):
        return float(cell[:-1]) / 100.0, "share"
    return float(cell), "metres"


def _close(printed: str, value: float) -> bool:
    x, kind = _number(printed)
    return abs(x - value) <= (SHARE_TOL if kind == "share" else METRE_TOL)


def _table(text: str, heading: str) -> list[list[str]]:
    """Body rows of the first Markdown table after `## heading`, as cell lists."""
    section = text.split(f"## {heading}\n", 1)[1]
    rows = [ln for ln in section.splitlines() if ln.startswith("|")]
    body = []
    for ln in rows[2:]:  # header and the alignment row
        body.append([c.strip() for c in ln.strip().strip("|").split("|")])
        if not section.split(ln, 1)[1].startswith("\n|"):
            break
    return body


# --------------------------------------------------------------------------- files


def test_demo_writes_report_pictures_scenario_and_runs(demo):
    out, summary = demo
    assert (out / "report.md").stat().st_size > 0
    for name in PICTURES.values():
        raw = (out / name).read_bytes()
        assert raw[:8] == PNG_MAGIC, name
        img = mpimg.imread(out / name)
        h, w = img.shape[:2]
        assert 300 <= h <= 3000 and 500 <= w <= 3000, (name, img.shape)
        # Not a blank canvas: a fair share of ink, and many distinct colours.
        rgb = np.round(img[..., :3] * 255).astype(np.uint32)
        packed = (rgb[..., 0] << 16) | (rgb[..., 1] << 8) | rgb[..., 2]
        assert np.mean(packed != 0xFFFFFF) > 0.02, name
        assert np.unique(packed).size > 50, name
    for run in RUNS:
        assert (out / "runs" / run.name / "estimates.csv").stat().st_size > 0
        doc = _metrics(out, run.name)
        assert doc["cooperative"] is run.cooperative
        assert doc["params"]["robust"] is run.robust
        assert doc["iterations"] == 6


def test_scenario_folder_reads_back_as_the_simulated_scenario(demo):
    out, _ = demo
    back = read_scenario(out / "scenario")
    assert_scenarios_equal(back, simulate("cold-store", seed=DEFAULT_SEED), lines=False)


def test_demo_writes_the_moving_part(demo):
    out, summary = demo
    moving = summary["moving"]
    assert moving["epochs"] == MOVING_S * 5 and moving["float_epochs"] == FLOAT_S * 5
    assert moving["iterations_per_epoch"] == 1
    assert_scenarios_equal(read_scenario(out / "moving" / "scenario"),
                           simulate("cold-store-shift", seed=DEFAULT_SEED, duration_s=MOVING_S), lines=False)
    for engine, epochs in (("fixed", MOVING_S * 5), ("float", FLOAT_S * 5)):
        run = out / "moving" / "runs" / engine
        with open(run / "estimates.csv") as f:
            assert sum(1 for _ in f) == 1 + epochs * moving["agents"]
        doc = json.loads((run / "metrics.json").read_text())
        assert doc["engine"] == engine and doc["iterations"] == 1
    for name in TRACK_PICTURES.values():
        assert (out / name).read_bytes()[:8] == PNG_MAGIC
        img = mpimg.imread(out / name)
        assert np.mean(img[..., :3] < 0.99) > 0.02, name  # not a blank canvas
    # The limits hold on this slice too.
    assert moving["rmse_ratio"] <= 1.3 and moving["difference"]["median_m"] <= 0.02
    assert moving["targets"]["rmse_ratio_met"] and moving["targets"]["median_difference_met"]


def test_report_moving_section_equals_the_summary(demo):
    out, summary = demo
    text = (out / "report.md").read_text()
    assert text.index("## Moving tags") < text.index("## Reproduce") and text.count("## Reproduce") == 1
    rows = {r[0]: r[1:] for r in _table(text, f"Moving tags: cold-store-shift, seed {DEFAULT_SEED}")}
    m = summary["moving"]
    assert _close(rows["RMSE (m)"][0], m["fixed"]["whole"]["rmse_m"])
    assert _close(rows["RMSE (m)"][1], m["fixed"]["head"]["rmse_m"])
    assert _close(rows["RMSE (m)"][2], m["float"]["head"]["rmse_m"])
    assert _close(rows["RMSE fixed / float"][1], m["rmse_ratio"])
    assert float(rows["median distance fixed to float (m)"][1]) == pytest.approx(m["difference"]["median_m"], abs=0.5e-4)
    assert "met" in rows["RMSE fixed / float"][3] and "1 iteration per epoch" in text
    assert "--moving-duration-s 10 --float-duration-s 4" in text
    assert "tracks.png" in text and "error_over_time.png" in text


def test_existing_scenario_folder_is_refused_without_overwrite(demo):
    out, _ = demo
    with pytest.raises(FileExistsError):
        run_demo(out, progress=False)


# --------------------------------------------------------------------------- numbers


def test_report_metrics_table_equals_metrics_json(demo):
    out, _ = demo
    text = (out / "report.md").read_text()
    rows = _table(text, "Final iteration")
    assert len(rows) == len(RUNS)
    keys = ["fraction_within_1m", "rmse_m", "error_p90_m", "coverage_95", "peb_rms_m"]
    for run, row in zip(RUNS, rows):
        assert f"`runs/{run.name}`" in row[0]
        final = _metrics(out, run.name)["final"]
        for key, cell in zip(keys, row[1:]):
            assert _close(cell, final[key]), (run.name, key, cell, final[key])


def test_report_iteration_table_equals_metrics_json(demo):
    out, _ = demo
    rows = _table((out / "report.md").read_text(), "Per iteration")
    per_run = [_metrics(out, r.name)["epochs"][-1]["iterations"] for r in RUNS]
    assert len(rows) == 6
    n = len(RUNS)
    for k, row in enumerate(rows):
        assert int(row[0]) == k + 1
        for j in range(n):
            assert _close(row[1 + j], per_run[j][k]["fraction_within_1m"])
            assert _close(row[1 + n + j], per_run[j][k]["rmse_m"])


def test_summary_equals_metrics_json(demo):
    out, summary = demo
    for run in RUNS:
        assert summary["runs"][run.name]["fraction_within_1m"] == _metrics(out, run.name)["final"]["fraction_within_1m"]
        assert summary["runs"][run.name]["rmse_m"] == _metrics(out, run.name)["final"]["rmse_m"]


def test_report_site_paragraph_states_the_blocked_share(demo):
    out, _ = demo
    text = (out / "report.md").read_text()
    m = re.search(r"(\d+\.\d)% of all ranges are on a blocked path", text)
    assert m is not None
    share = summarize(read_scenario(out / "scenario"))["blocked_share"]
    assert abs(float(m.group(1)) / 100 - share) <= SHARE_TOL
    assert "36 racks" in text  # cold_store_racks_m: 9 double racks x 2 halves x 2 single racks
    assert "peerfix demo --out" in text and f"--seed {DEFAULT_SEED}" in text
    assert "not a certified safety function" in text


def test_cooperation_beats_anchors_only(demo):
    """The point of the tool: tags that also range to each other end up within 1 m more often."""
    out, _ = demo
    coop = _metrics(out, "cooperative")["final"]["fraction_within_1m"]
    anchors = _metrics(out, "anchors-only")["final"]["fraction_within_1m"]
    assert coop > anchors


def test_belief_agent_is_ambiguous_with_anchors_and_resolved(demo):
    """On this seed an agent is bimodal from anchors alone and ends within 1 m, unimodal."""
    out, summary = demo
    pick = summary["belief_agent"]
    assert pick["resolved"] and pick["reason"] in ("multimodal-first-iteration", "multimodal-anchors-only")
    assert pick["error_end_m"] <= 1.0
    # Cross-check with the files: the chosen agent's rows in estimates.csv.
    import csv

    def row(run: str, iteration: int) -> dict:
        with open(out / "runs" / run / "estimates.csv") as f:
            return next(r for r in csv.DictReader(f) if r["node_id"] == pick["agent_id"] and int(r["iteration"]) == iteration)

    start_run, start_it = ("anchors-only", 6) if pick["reason"] == "multimodal-anchors-only" else ("cooperative", 1)
    assert int(row(start_run, start_it)["mode_count"]) >= 2
    assert int(row("cooperative", 6)["mode_count"]) == 1


# --------------------------------------------------------------------------- CLI


def test_cli_json_prints_the_summary(tmp_path, capsys):
    out = tmp_path / "d"
    tiny = ["--moving-duration-s", "4", "--float-duration-s", "2"]
    assert main(["demo", "--out", str(out), "--iterations", "2", "--quiet", "--json", *tiny]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert doc["moving"]["epochs"] == 20 and doc["moving"]["float"]["parallel"] in (True, False)
    assert (out / "moving" / "runs" / "float" / "estimates.csv").stat().st_size > 0
    assert set(doc["runs"]) == {r.name for r in RUNS}
    for r in RUNS:
        assert doc["runs"][r.name]["fraction_within_1m"] == _metrics(out, r.name)["final"]["fraction_within_1m"]
        assert doc["runs"][r.name]["iteration"] == 2
    # A second run into the same folder is refused (exit 2) unless --overwrite.
    assert main(["demo", "--out", str(out), "--iterations", "2", "--quiet", *tiny]) == 2
    assert "--overwrite" in capsys.readouterr().err
    assert main(["demo", "--out", str(tmp_path / "e"), "--quiet", "--moving-duration-s", "4",
                 "--float-duration-s", "5"]) == 2  # the float twin's part must fit in the recording
    assert "float twin duration" in capsys.readouterr().err


# --------------------------------------------------------------------------- pieces


def _mix(weights, means, covs) -> Mixture:
    return Mixture(np.log(np.asarray(weights, float)), np.asarray(means, float), np.asarray(covs, float))


def test_mixture_density_matches_scipy():
    mix = _mix([0.3, 0.7], [[0.0, 0.0], [3.0, 1.0]], [[[1.0, 0.3], [0.3, 0.5]], [[0.2, 0.0], [0.0, 2.0]]])
    x, y = np.meshgrid(np.linspace(-3, 6, 7), np.linspace(-3, 4, 5))
    pts = np.stack([x, y], axis=-1)
    # scipy.stats.multivariate_normal as the reference density
    ref = 0.3 * multivariate_normal([0, 0], [[1.0, 0.3], [0.3, 0.5]]).pdf(pts) + 0.7 * multivariate_normal(
        [3, 1], [[0.2, 0.0], [0.0, 2.0]]
    ).pdf(pts)
    assert np.allclose(mixture_density(mix, x, y), ref, rtol=1e-12, atol=0)


def test_mass_levels_of_one_gaussian():
    """The region holding share p of N(0, I) is the disc of squared radius chi2.ppf(p, 2) (scipy.stats.chi2)."""
    mix = _mix([1.0], [[0.0, 0.0]], [np.eye(2)])
    g = np.linspace(-6, 6, 601)
    x, y = np.meshgrid(g, g)
    dens = mixture_density(mix, x, y)
    levels = mass_levels(dens, (g[1] - g[0]) ** 2, shares=(0.9, 0.5))
    expected = sorted(np.exp(-0.5 * chi2.ppf(p, 2)) / (2 * np.pi) for p in (0.9, 0.5))
    # 2 % relative: a grid of 0.02 m cells only approximates the level set.
    assert np.allclose(levels, expected, rtol=0.02)


def test_ellipse_95_axes():
    e = ellipse_95(np.array([1.0, 2.0]), np.diag([4.0, 1.0]))
    k = math.sqrt(chi2.ppf(0.95, 2))  # 95% radius in sigmas, 2 dof: sqrt(5.991) (scipy.stats.chi2)
    assert e.width == pytest.approx(2 * k * 2.0) and e.height == pytest.approx(2 * k * 1.0)
    assert abs(math.cos(math.radians(e.angle))) == pytest.approx(1.0)  # major axis along x
    assert ellipse_95(np.zeros(2), np.diag([1.0, 0.0])) is None  # not positive definite


def _record(it: int, mean, modes) -> IterationRecord:
    n = len(modes)
    return IterationRecord(
        iteration=it,
        mean=np.asarray(mean, float),
        cov=np.tile(np.eye(2), (n, 1, 1)),
        mode_count=np.asarray(modes),
        mode_weight=np.ones(n),
        components=np.ones(n, int),
        messages_sent=0,
        bytes_sent=0,
    )


def test_pick_agent_rules():
    truth = np.zeros((3, 2))
    end = _record(2, [[0.5, 0], [0.2, 0], [0.1, 0]], [1, 1, 1])
    # Rule 1: multimodal after iteration 1 and settled at the end.
    first = _record(1, [[3, 0], [1, 0], [9, 0]], [2, 1, 1])
    p = pick_agent([first, end], truth)
    assert (p.index, p.reason, p.resolved) == (0, "multimodal-first-iteration", True)
    # Rule 2: nobody multimodal at iteration 1; agent 1 is with anchors alone.
    first = _record(1, [[3, 0], [1, 0], [9, 0]], [1, 1, 1])
    anchors = _record(2, [[3, 0], [4, 0], [9, 0]], [1, 3, 1])
    p = pick_agent([first, end], truth, anchors)
    assert (p.index, p.reason, p.resolved) == (1, "multimodal-anchors-only", True)
    assert p.error_start_m == pytest.approx(4.0) and p.error_end_m == pytest.approx(0.2)
    # Fallback: largest drop (agent 2: 9 m -> 0.1 m), not claimed as resolved.
    p = pick_agent([first, end], truth, _record(2, [[3, 0], [4, 0], [9, 0]], [1, 1, 1]))
    assert (p.index, p.reason, p.resolved) == (2, "largest-error-drop", False)
    # A multimodal start that ends more than 1 m off is not "resolved".
    far = _record(2, [[1.5, 0], [0.2, 0], [0.1, 0]], [1, 1, 1])
    p = pick_agent([_record(1, [[3, 0], [1, 0], [9, 0]], [2, 1, 1]), far], truth)
    assert p.reason == "largest-error-drop"


def test_window_holds_truth_and_heavy_components_within_clamp():
    mix = _mix([0.5, 0.5], [[10.0, 10.0], [14.0, 10.0]], [np.eye(2)] * 2)
    xmin, xmax, ymin, ymax = window_m(np.array([10.0, 10.0]), [mix, None])
    assert xmin <= 10 - 2 and xmax >= 14 + 2 and xmax - xmin == pytest.approx(ymax - ymin)
    far = _mix([0.5, 0.5], [[10.0, 10.0], [500.0, 10.0]], [np.eye(2)] * 2)
    xmin, xmax, _, _ = window_m(np.array([10.0, 10.0]), [far], max_half_m=15.0)
    assert xmax - xmin == pytest.approx(30.0)
