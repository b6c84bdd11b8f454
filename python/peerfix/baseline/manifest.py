"""The baseline folder: manifest.json, run settings, scenario content hashes.

Layout (docs/baseline.md)::

    BASELINE_DIR/
      manifest.json
      <scenario key>/float.csv     the float64 twin's estimates
      <scenario key>/fixed.csv     the fixed core's estimates (Q-format integers)

Every mismatch between a baseline and what a check is asked to do (a
scenario file that changed, other settings, a damaged file) is bad input:
InputError naming the file and the field.
"""

from __future__ import annotations

import dataclasses
import hashlib
import json
from dataclasses import dataclass, field
from pathlib import Path

from ..errors import InputError
from ..reference import EstimatorParams
from ..runner import _json_safe
from ..scenario.reader import (
    AGENTS_FILE,
    ANCHORS_FILE,
    RANGES_FILE,
    SITE_FILE,
    TRUTH_FILE,
)

FORMAT = "peerfix-baseline"
FORMAT_VERSION = 1
MANIFEST = "manifest.json"
FLOAT_CSV = "float.csv"
FIXED_CSV = "fixed.csv"
STORED = ("all", "final")  # every iteration of every epoch, or the last iteration of each epoch


@dataclass(frozen=True)
class RunSettings:
    """Everything besides the scenario and the build that fixes a run's estimates."""

    iterations: int = 4
    schedule: str = "slot"
    cooperative: bool = True
    air: bool = True  # the fixed core's broadcasts cross as frame bytes
    packet_loss: float = 0.0
    bit_error_rate: float = 0.0  # fixed core on the air only; the float twin has no bits to flip
    channel_seed: int = 0
    process_var_m2_per_s: float = 1.0  # runner.run_scenario's default; `peerfix run` does not change it
    params: EstimatorParams = field(default_factory=EstimatorParams)
    stored_iterations: str = "all"

    def as_dict(self) -> dict:
        d = dataclasses.asdict(self)
        d["params"] = self.params.as_dict()
        return d

    @classmethod
    def from_dict(cls, d: dict, path: Path) -> RunSettings:
        names = {f.name for f in dataclasses.fields(cls)}
        unknown = sorted(set(d) - names)
        missing = sorted(names - set(d))
        if unknown or missing:
            raise InputError(path, 0, "settings", f"unknown keys {unknown}, missing keys {missing}")
        params = d["params"]
        if not isinstance(params, dict):
            raise InputError(path, 0, "settings.params", "not a JSON object")
        pnames = {f.name for f in dataclasses.fields(EstimatorParams)}
        # The estimator's settings changed since the baseline was recorded: the recorded
        # run cannot be repeated exactly, so the baseline cannot judge this build.
        for name in sorted(set(params) - pnames):
            raise InputError(path, 0, f"settings.params.{name}", f"recorded {params[name]!r}; this peerfix has no such estimator setting: record a new baseline")
        for name in sorted(pnames - set(params)):
            raise InputError(path, 0, f"settings.params.{name}", "not recorded (a setting newer than the baseline): record a new baseline")
        return cls(**{**d, "params": EstimatorParams(**params)})


# The files the scenario reader reads (docs/scenario-format.md); other files may sit
# beside a scenario (plots, notes, run outputs) and are not its content.
SCENARIO_FILES = (SITE_FILE, ANCHORS_FILE, AGENTS_FILE, RANGES_FILE, TRUTH_FILE)


def scenario_hashes(folder: Path) -> dict[str, str]:
    """SHA-256 of each scenario file present in the folder (name -> hex)."""
    return {name: hashlib.sha256((folder / name).read_bytes()).hexdigest() for name in SCENARIO_FILES if (folder / name).is_file()}


def content_sha256(hashes: dict[str, str]) -> str:
    """One digest of a scenario's content: names and file digests (not paths, not dates)."""
    h = hashlib.sha256()
    for name in sorted(hashes):
        h.update(f"{name}\0{hashes[name]}\n".encode())
    return h.hexdigest()


def scenario_keys(folders: list[Path]) -> list[str]:
    """Each folder's key in the baseline: its name, made unique with -2, -3, ... in order."""
    keys: list[str] = []
    for folder in folders:
        base = folder.resolve().name or "scenario"
        key, k = base, 2
        while key in keys:
            key, k = f"{base}-{k}", k + 1
        keys.append(key)
    return keys


def write_manifest(doc: dict, folder: Path) -> None:
    # NaN (a figure with nothing to measure) is not JSON: written as null.
    (folder / MANIFEST).write_text(json.dumps(_json_safe(doc), indent=2, allow_nan=False) + "\n", encoding="utf-8")


def read_manifest(folder: Path) -> dict:
    """manifest.json of a baseline folder, checked for the fields a check needs."""
    path = folder / MANIFEST
    if not folder.is_dir():
        raise InputError(folder, 0, None, "baseline folder not found")
    if not path.is_file():
        raise InputError(path, 0, None, "baseline manifest missing")
    try:
        doc = json.loads(path.read_text(encoding="utf-8"))
    except (UnicodeDecodeError, json.JSONDecodeError) as err:
        line = getattr(err, "lineno", 0)
        raise InputError(path, line, None, f"not valid JSON: {err}") from None
    if not isinstance(doc, dict):
        raise InputError(path, 0, None, "not a JSON object")
    if doc.get("format") != FORMAT:
        raise InputError(path, 0, "format", f"{doc.get('format')!r} is not {FORMAT!r}")
    if doc.get("format_version") != FORMAT_VERSION:
        raise InputError(path, 0, "format_version", f"{doc.get('format_version')!r}; this peerfix reads version {FORMAT_VERSION}")
    for key, kind in (("settings", dict), ("core", dict), ("q_formats", dict), ("scenarios", list)):
        if not isinstance(doc.get(key), kind):
            raise InputError(path, 0, key, f"missing or not a JSON {kind.__name__}")
    if doc["settings"].get("stored_iterations") not in STORED:
        raise InputError(path, 0, "settings.stored_iterations", f"{doc['settings'].get('stored_iterations')!r} is not one of {STORED}")
    for i, s in enumerate(doc["scenarios"]):
        for key in ("key", "content_sha256", "files", "agent_ids", "float_sha256", "fixed_sha256"):
            if not isinstance(s, dict) or key not in s:
                raise InputError(path, 0, f"scenarios[{i}].{key}", "missing")
    return doc
