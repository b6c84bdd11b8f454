"""Issue 6 item 6: `peerfix baseline check` catches a core built with a deliberate small change.

A snapshot of c_core/ and core/_build.py is copied to a temporary folder and
built there twice (python _build.py, as by hand): the reference, and a build
with PEERFIX_DEFINES=PFX_VARIANT_TIES_DOWN, under which the rounding shifts
(pfx_fixed_shr_round and the estimator's pfx_mixture_shr_round) send ties
down instead of up: a one-LSB change somewhere in the arithmetic.

Each build is loaded through PEERFIX_CORE_LIBRARY in a subprocess.  Before a
check is trusted to catch the variant, `peerfix run` shows that the variant
does change an estimate (else the test would be vacuous).
"""

from __future__ import annotations

import csv
import json
import os
import re
import shutil
import subprocess
import sys
from pathlib import Path

import pytest
from test_baseline_helpers import junit_cases, write_field

REPO = Path(__file__).resolve().parents[1]
ITERATIONS = "3"
VARIANT = "PFX_VARIANT_TIES_DOWN"

def _snapshot(dst: Path) -> Path:
    """c_core/ and _build.py in the layout _build.py expects (ROOT = parents[3] of the script)."""
    shutil.copytree(REPO / "c_core", dst / "c_core")
    script = dst / "python" / "peerfix" / "core" / "_build.py"
    script.parent.mkdir(parents=True)
    shutil.copy2(REPO / "python" / "peerfix" / "core" / "_build.py", script)
    return script


def _build(script: Path, folder: Path, defines: str) -> tuple[subprocess.Popen, Path]:
    """Start `python _build.py` in `folder` (the module lands in folder/peerfix/core/)."""
    folder.mkdir()
    env = {**os.environ, "PEERFIX_DEFINES": defines, "PEERFIX_CFLAGS": "", "PEERFIX_LDFLAGS": ""}
    with open(folder / "build.log", "w") as log:  # the child keeps its own copy of the descriptor
        job = subprocess.Popen([sys.executable, str(script)], cwd=folder, env=env, stdout=log, stderr=subprocess.STDOUT)
    return job, folder


def _module(folder: Path) -> Path:
    found = sorted((folder / "peerfix" / "core").glob("_pfx*.so"))
    assert len(found) == 1, (folder, found, (folder / "build.log").read_text()[-2000:])
    return found[0]


@pytest.fixture(scope="module")
def builds(tmp_path_factory):
    if shutil.which(os.environ.get("CC", "gcc")) is None:
        pytest.skip("no C compiler to build core variants with")
    root = tmp_path_factory.mktemp("variants")
    source = _snapshot(root / "src")
    jobs = {  # in parallel: about 2.5 s each on one core
        "reference": _build(source, root / "reference", ""),
        "variant": _build(source, root / "variant", VARIANT),
    }
    for name, (job, folder) in jobs.items():
        assert job.wait(timeout=300) == 0, f"build {name} failed:\n{(folder / 'build.log').read_text()[-3000:]}"
    return {name: _module(folder) for name, (_, folder) in jobs.items()}


def peerfix(args, library: Path) -> subprocess.CompletedProcess:
    env = {**os.environ, "PEERFIX_CORE_LIBRARY": str(library), "MPLBACKEND": "Agg"}
    return subprocess.run(
        [sys.executable, "-m", "peerfix.cli", *map(str, args)], env=env, capture_output=True, text=True, timeout=300, check=False
    )


@pytest.fixture(scope="module")
def recorded(builds, tmp_path_factory):
    root = tmp_path_factory.mktemp("suite")
    field = write_field(root / "field", seed=1)
    baseline = root / "baseline"
    proc = peerfix(["baseline", "record", field, "--out", baseline, "--iterations", ITERATIONS], builds["reference"])
    assert proc.returncode == 0, proc.stderr
    return field, baseline


@pytest.fixture(scope="module")
def reference_run(builds, recorded, tmp_path_factory):
    """estimates.csv of `peerfix run --engine fixed` with the reference build."""
    return _fixed_estimates(recorded[0], builds["reference"], tmp_path_factory.mktemp("run-reference"))


def _fixed_estimates(field: Path, library: Path, out: Path) -> dict[tuple[str, str, str], list[str]]:
    proc = peerfix(["run", field, "--engine", "fixed", "--iterations", ITERATIONS, "--out", out], library)
    assert proc.returncode == 0, proc.stderr
    with open(out / "estimates.csv", newline="") as f:
        return {(r["t_s"], r["node_id"], r["iteration"]): list(r.values()) for r in csv.DictReader(f)}


def test_baseline_records_the_build_it_ran(builds, recorded):
    _, baseline = recorded
    core = json.loads((baseline / "manifest.json").read_text())["core"]
    assert core["library"] == str(builds["reference"].resolve())
    assert core["loaded_via"] == "PEERFIX_CORE_LIBRARY"
    assert core["build_stamp"]["defines"] == []


def test_an_unchanged_build_passes(builds, recorded, tmp_path):
    field, baseline = recorded
    proc = peerfix(["baseline", "check", field, "--against", baseline, "--report-out", tmp_path / "rep"], builds["reference"])
    assert proc.returncode == 0, proc.stdout + proc.stderr
    assert all(c.find("failure") is None for c in junit_cases(tmp_path / "rep" / "junit.xml"))


def test_a_variant_build_is_caught(builds, recorded, reference_run, tmp_path):
    field, baseline = recorded
    variant = "variant"
    # The build did take the macro: a tie, 3/2, rounds to 1 instead of 2.
    probe = "from peerfix.core._pfx import lib; print(lib.pfx_fixed_shr_round(3, 1))"
    ties = {}
    for name in ("reference", "variant"):
        env = {**os.environ, "PEERFIX_CORE_LIBRARY": str(builds[name])}
        ties[name] = subprocess.run([sys.executable, "-c", probe], env=env, capture_output=True, text=True, check=True).stdout.strip()
    assert ties == {"reference": "2", "variant": "1"}, ties
    # Not vacuous: the variant itself changes at least one fixed-core estimate.
    before = reference_run
    after = _fixed_estimates(field, builds[variant], tmp_path / "run-variant")
    moved = sorted(k for k in before if before[k] != after[k])
    assert moved, f"{variant}: the variant build changes no estimate; the test would prove nothing"

    proc = peerfix(["baseline", "check", field, "--against", baseline, "--report-out", tmp_path / "rep"], builds[variant])
    assert proc.returncode == 1, proc.stdout + proc.stderr
    assert "field fixed_bit_exact: FAIL" in proc.stdout
    report = (tmp_path / "rep" / "report.md").read_text()
    assert report.startswith("# Baseline check: REGRESSION")
    assert VARIANT in report  # the build info of the checked core names the variant's define
    # The report names what moved and where.  Every estimate `peerfix run` saw change is
    # counted (the check also sees the mode weight, which estimates.csv does not hold) ...
    counted = int(re.search(r"estimates that differ: \*\*(\d+)\*\*", report).group(1))
    assert counted >= len(moved)
    # ... and the table of the largest changes lists agents that `peerfix run` saw change.
    table_agents = set(re.findall(r"^\| [0-9.]+ \| (\S+) \| \d+ \|", report, re.MULTILINE))
    assert table_agents & {k[1] for k in moved}
    failed = [c for c in junit_cases(tmp_path / "rep" / "junit.xml") if c.find("failure") is not None]
    assert [c.get("name") for c in failed] == ["fixed_bit_exact"]
