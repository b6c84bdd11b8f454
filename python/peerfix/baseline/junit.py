"""JUnit XML of a baseline check, for CI: one testcase per scenario and check.

The layout is the one CI servers read (Jenkins, GitLab, GitHub actions that
publish test results): <testsuites> holding one <testsuite>, each
<testcase classname name time> with a <failure message type> when the check
did not hold and <skipped> for a baseline scenario not given this time.
Written with the standard library's xml.etree.
"""

from __future__ import annotations

import datetime as dt
import xml.etree.ElementTree as ET
from pathlib import Path

from .check import CHECKS, CheckResult, ScenarioCheck
from .diff import Moved

SUITE = "peerfix.baseline"


def _failure_text(sc: ScenarioCheck, check: str) -> tuple[str, str]:
    """(one-line message, details) of a check that did not hold."""
    if check == "fixed_bit_exact":
        ex = sc.exact
        if ex.shape_error:
            return f"runs do not line up: {ex.shape_error}", ex.shape_error
        s = ex.summary()
        first = s["first_moved"]
        msg = (
            f"{s['moved']} of {s['compared']} estimates differ ({s['agents_moved']} agents, {s['epochs_moved']} epochs; "
            f"first at t_s={first['t_s']} iteration {first['iteration']}); largest position change "
            f"{s['position_diff_max_m']:.6f} m ({s['position_diff_max_lsb']} LSB)"
        )
        lines = [
            f"t_s={m.t_s} agent={m.node_id} iteration={m.iteration} dx_m={m.dx_m:+.6f} dy_m={m.dy_m:+.6f} "
            f"cov_lsb={m.cov_lsb} mode_weight_lsb={m.mode_weight_lsb} modes={m.mode_count[0]}->{m.mode_count[1]} "
            f"components={m.components[0]}->{m.components[1]}"
            for m in sorted(ex.moved, key=Moved.largest_first)[:50]
        ]
        return msg, "\n".join(lines)
    tol = sc.tolerance
    if tol.shape_error:
        return f"runs do not line up: {tol.shape_error}", tol.shape_error
    known = set(tol.outside_since_record)
    state = {k: "held" if ok else ("outside since record, no worse" if k in known else "OUTSIDE") for k, ok in tol.verdict.items()}
    return "outside tolerance: " + ", ".join(tol.regressed), "\n".join(f"{k}: {v}" for k, v in state.items())


def junit_tree(result: CheckResult) -> ET.ElementTree:
    cases = []
    failures = 0
    total_s = 0.0
    for sc in result.scenarios:
        for check in CHECKS:
            case = ET.Element("testcase", classname=f"{SUITE}.{sc.key}", name=check, time=f"{sc.seconds / len(CHECKS):.3f}")
            total_s += sc.seconds / len(CHECKS)
            if not sc.held(check):
                failures += 1
                message, details = _failure_text(sc, check)
                ET.SubElement(case, "failure", message=message, type="regression").text = details
            cases.append(case)
    skipped = 0
    for key in result.not_checked:
        for check in CHECKS:
            case = ET.Element("testcase", classname=f"{SUITE}.{key}", name=check, time="0.000")
            ET.SubElement(case, "skipped", message="scenario in the baseline but not given to this check")
            cases.append(case)
            skipped += 1
    counts = {"tests": str(len(cases)), "failures": str(failures), "errors": "0", "skipped": str(skipped), "time": f"{total_s:.3f}"}
    root = ET.Element("testsuites", name="peerfix baseline check", **counts)
    suite = ET.SubElement(
        root, "testsuite", name=SUITE, timestamp=dt.datetime.now(dt.timezone.utc).isoformat(timespec="seconds"), **counts
    )
    props = ET.SubElement(suite, "properties")
    for name, value in (
        ("baseline", str(result.baseline)),
        ("core.library_sha256.recorded", str(result.manifest["core"].get("library_sha256"))),
        ("core.library_sha256.now", str(result.core_now.get("library_sha256"))),
    ):
        ET.SubElement(props, "property", name=name, value=value)
    suite.extend(cases)
    ET.indent(root)
    return ET.ElementTree(root)


def write_junit(result: CheckResult, path: Path) -> Path:
    junit_tree(result).write(path, encoding="utf-8", xml_declaration=True)
    return path
