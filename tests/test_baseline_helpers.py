"""Shared pieces of the baseline tests (no tests here): small scenario suites and a JUnit structure check."""

from __future__ import annotations

import csv
import hashlib
import json
import xml.etree.ElementTree as ET
from pathlib import Path

from peerfix.scenario import write_scenario
from peerfix.simulate import simulate

# 30 tags on a 50 m x 50 m field (the open-field preset's anchors and 20 m
# radio range): connected enough that the fixed core stays within the
# tolerances of the float twin (measured 2026-12-02 with
# harness.compare.compare_scenario(..., air=True): all hold for seeds 1-6 at
# 2-4 iterations, p99 position difference at most 0.028 m against 0.05 m).
FIELD = {"agents": 30, "bounds_m": (0.0, 0.0, 50.0, 50.0)}


def write_field(folder: Path, seed: int, epochs: int = 1) -> Path:
    """A simulated field; with epochs > 1 the same ranges and truth repeat at t_s = 1, 2, ... s."""
    write_scenario(simulate("open-field", seed, **FIELD), folder)
    if epochs > 1:
        for name in ("ranges.csv", "truth.csv"):
            lines = (folder / name).read_text().splitlines()
            header, rows = lines[0], lines[1:]
            t_col = header.split(",").index("t_s")
            more = []
            for k in range(1, epochs):
                for row in rows:
                    cells = row.split(",")
                    cells[t_col] = f"{float(k)!r}"
                    more.append(",".join(cells))
            (folder / name).write_text("\n".join([header, *rows, *more]) + "\n")
    return folder


def rewrite_csv_cell(path: Path, match: dict[str, str], column: str, change) -> str:
    """Change one cell of the single row matching `match`; returns the old value."""
    with open(path, newline="") as f:
        rows = list(csv.reader(f))
    header = rows[0]
    hits = [r for r in rows[1:] if all(r[header.index(k)] == v for k, v in match.items())]
    assert len(hits) == 1, (match, len(hits))
    old = hits[0][header.index(column)]
    hits[0][header.index(column)] = change(old)
    with open(path, "w", newline="") as f:
        csv.writer(f).writerows(rows)
    return old


def reseal(baseline: Path, key: str, kind: str) -> None:
    """Update the manifest's digest of a baseline file changed on purpose (a baseline "from another build")."""
    manifest = json.loads((baseline / "manifest.json").read_text())
    entry = next(s for s in manifest["scenarios"] if s["key"] == key)
    entry[f"{kind}_sha256"] = hashlib.sha256((baseline / key / f"{kind}.csv").read_bytes()).hexdigest()
    (baseline / "manifest.json").write_text(json.dumps(manifest, indent=2))


def junit_cases(path: Path) -> list[ET.Element]:
    """Parse a JUnit file, check the structure CI readers rely on, return its testcases.

    The element and attribute names are those of the JUnit XML layout that
    Jenkins and GitLab read (common practice; no schema is checked here).
    """
    root = ET.parse(path).getroot()
    assert root.tag == "testsuites"
    suites = root.findall("testsuite")
    assert len(suites) == 1
    cases = suites[0].findall("testcase")
    for element in (root, suites[0]):
        assert int(element.get("tests")) == len(cases)
        assert int(element.get("failures")) == sum(1 for c in cases if c.find("failure") is not None)
        assert int(element.get("skipped")) == sum(1 for c in cases if c.find("skipped") is not None)
        assert int(element.get("errors")) == 0
        float(element.get("time"))
    names = set()
    for c in cases:
        assert c.get("classname") and c.get("name")
        float(c.get("time"))
        outcome = [e.tag for e in c]
        assert outcome in ([], ["failure"], ["skipped"]), outcome
        if outcome == ["failure"]:
            assert c.find("failure").get("message") and c.find("failure").get("type") == "regression"
        names.add((c.get("classname"), c.get("name")))
    assert len(names) == len(cases)  # one testcase per scenario x check
    return cases
