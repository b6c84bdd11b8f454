"""`peerfix baseline check`: re-run a suite against a recorded baseline.

All input is checked before anything runs: the manifest, the digests of the
baseline's estimate files, each scenario's content against the digests
recorded for it, and the settings.  Any mismatch is InputError (exit 2): a
changed scenario or other settings make a comparison meaningless, which is
not the same as a regression.  Then the fixed core runs every scenario with
the recorded settings and two checks are made per scenario (diff.py).
"""

from __future__ import annotations

import time
from dataclasses import dataclass, field
from pathlib import Path

from ..errors import InputError
from ..scenario import read_scenario
from ..scenario.model import Scenario
from . import diff
from .buildinfo import core_build_info, file_sha256
from .estimates import Estimates, read_csv
from .manifest import (
    MANIFEST,
    RunSettings,
    content_sha256,
    read_manifest,
    scenario_hashes,
)
from .record import check_settings, run_engine

CHECKS = ("fixed_bit_exact", "fixed_within_tolerance")


@dataclass
class ScenarioCheck:
    key: str
    folder: Path
    scenario: Scenario
    entry: dict  # the manifest's entry
    reference: Estimates  # float twin, recorded
    recorded_fixed: Estimates
    now_fixed: Estimates | None = None
    exact: diff.ExactResult | None = None
    tolerance: diff.ToleranceResult | None = None
    seconds: float = 0.0

    def held(self, check: str) -> bool:
        result = self.exact if check == "fixed_bit_exact" else self.tolerance
        return result is not None and result.held


@dataclass
class CheckResult:
    baseline: Path
    manifest: dict
    settings: RunSettings
    core_now: dict
    scenarios: list[ScenarioCheck] = field(default_factory=list)
    not_checked: list[str] = field(default_factory=list)  # baseline scenarios not given this time

    @property
    def passed(self) -> bool:
        return all(s.held(c) for s in self.scenarios for c in CHECKS)


def _match(folder: Path, entries: dict[str, dict], manifest_path: Path) -> dict:
    """The manifest entry for a scenario folder: by content digest, else by name (then it changed)."""
    hashes = scenario_hashes(folder)
    digest = content_sha256(hashes)
    by_digest = [e for e in entries.values() if e["content_sha256"] == digest]
    name = folder.resolve().name
    if by_digest:
        same_name = [e for e in by_digest if e["key"] == name]
        return (same_name or by_digest)[0]
    entry = entries.get(name)
    if entry is None:
        raise InputError(
            folder, 0, None, f"not in the baseline {manifest_path} (it holds: {', '.join(entries) or 'nothing'}); record it first"
        )
    i = list(entries).index(entry["key"])
    recorded = entry["files"]
    for fname in sorted(set(recorded) | set(hashes)):
        if recorded.get(fname) != hashes.get(fname):
            was = recorded.get(fname, "absent")
            now = hashes.get(fname, "absent")
            raise InputError(
                folder / fname,
                0,
                f"scenarios[{i}].files.{fname}",
                f"scenario content changed since the baseline was recorded (sha256 recorded {was[:12]}, now {now[:12]}; "
                f"{manifest_path}): record a new baseline, this is not a regression",
            )
    raise InputError(folder, 0, f"scenarios[{i}].content_sha256", "scenario content changed")  # pragma: no cover


def load(scenario_dirs: list[Path], baseline: Path, overrides: dict[str, object] | None = None) -> CheckResult:
    """Everything a check needs, every input checked; no engine has run yet.

    overrides: settings the caller asked for, by name ("iterations",
    "params.max_components"); each must equal the recorded one (else InputError).
    """
    baseline = Path(baseline)
    manifest = read_manifest(baseline)
    mpath = baseline / MANIFEST
    settings = RunSettings.from_dict(manifest["settings"], mpath)
    recorded = settings.as_dict()
    for name, now in (overrides or {}).items():
        top, _, sub = name.partition(".")
        was = recorded[top][sub] if sub else recorded[top]
        if was != now:
            raise InputError(mpath, 0, f"settings.{name}", f"recorded {was!r}, asked {now!r}: re-record, or check with the recorded settings")
    try:
        check_settings(settings)
    except ValueError as err:
        raise InputError(mpath, 0, "settings", str(err)) from None
    entries = {e["key"]: e for e in manifest["scenarios"]}
    q = manifest["q_formats"]
    result = CheckResult(baseline, manifest, settings, core_build_info())
    if not scenario_dirs:
        raise ValueError("no scenarios to check")
    seen: set[str] = set()
    for folder in (Path(d) for d in scenario_dirs):
        scenario = read_scenario(folder)  # InputError on a bad scenario
        entry = _match(folder, entries, mpath)
        if entry["key"] in seen:
            raise InputError(folder, 0, None, f"scenario {entry['key']!r} given twice")
        seen.add(entry["key"])
        i = list(entries).index(entry["key"])
        if list(scenario.agent_ids) != entry["agent_ids"]:
            raise InputError(mpath, 0, f"scenarios[{i}].agent_ids", "the scenario's agents differ from the recorded ones")
        est = {}
        for kind in ("float", "fixed"):
            path = baseline / entry[f"{kind}_csv"]
            if not path.is_file():
                raise InputError(path, 0, None, f"baseline estimates missing (manifest scenarios[{i}].{kind}_csv)")
            if file_sha256(path) != entry[f"{kind}_sha256"]:
                raise InputError(path, 0, None, f"damaged: its sha256 is not the one in {mpath} (scenarios[{i}].{kind}_sha256)")
            est[kind] = read_csv(path, kind == "fixed", entry["agent_ids"], q)
        result.scenarios.append(ScenarioCheck(entry["key"], folder, scenario, entry, est["float"], est["fixed"]))
    result.not_checked = [k for k in entries if k not in seen]
    return result


def run_checks(result: CheckResult, progress=None) -> CheckResult:
    """Run the fixed core on every scenario and make both comparisons."""
    for sc in result.scenarios:
        if progress is not None:
            progress(sc.key)
        t0 = time.perf_counter()
        sc.now_fixed = run_engine(sc.scenario, "fixed", result.settings)
        sc.exact = diff.exact(sc.recorded_fixed, sc.now_fixed, result.manifest["q_formats"])
        sc.tolerance = diff.tolerance(sc.reference, sc.now_fixed, sc.scenario, sc.entry.get("tolerance_at_record"))
        sc.seconds = time.perf_counter() - t0
    return result


def check_baseline(
    scenario_dirs: list[Path], baseline: Path, overrides: dict[str, object] | None = None, progress=None
) -> CheckResult:
    """load() then run_checks(): InputError on bad input, else the result (result.passed)."""
    return run_checks(load(scenario_dirs, baseline, overrides), progress)
