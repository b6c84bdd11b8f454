"""`peerfix baseline record`: run a suite of scenarios, store the reference estimates.

Both engines run every scenario with one RunSettings, through the same
runner as `peerfix run`.  Nothing is written until every scenario has been
read and run; the folder is built beside the target and renamed into place,
so an existing baseline is either untouched or wholly replaced.
"""

from __future__ import annotations

import datetime as dt
import platform
import secrets
import shutil
import sys
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from .. import __version__
from ..channel import Channel
from ..errors import InputError
from ..runner import run_scenario
from ..scenario import read_scenario
from ..scenario.model import Scenario
from . import diff
from .buildinfo import core_build_info, file_sha256
from .estimates import Q_FORMATS, Estimates, from_run, write_csv
from .manifest import (
    FIXED_CSV,
    FLOAT_CSV,
    FORMAT,
    FORMAT_VERSION,
    RunSettings,
    content_sha256,
    scenario_hashes,
    scenario_keys,
    write_manifest,
)


def run_engine(scenario: Scenario, engine: str, settings: RunSettings) -> Estimates:
    """One engine's estimates on one scenario, as `peerfix run` would make them."""
    ber = settings.bit_error_rate if engine == "fixed" else 0.0
    channel = Channel(settings.packet_loss, ber, settings.channel_seed)  # fresh: same draws every run
    result = run_scenario(
        scenario,
        engine=engine,
        params=settings.params,
        iterations=settings.iterations,
        schedule=settings.schedule,
        cooperative=settings.cooperative,
        process_var_m2_per_s=settings.process_var_m2_per_s,
        score=False,
        air=settings.air,
        channel=channel,
    )
    return from_run(result, final_only=settings.stored_iterations == "final")


def check_settings(settings: RunSettings) -> None:
    """Settings no run could honour: a usage error, before anything runs."""
    if settings.bit_error_rate and not settings.air:
        raise ValueError("a bit error rate needs the fixed core's frames on the air (air=True)")
    if settings.iterations < 1:
        raise ValueError("iterations must be at least 1")


@dataclass
class Recorded:
    key: str
    folder: Path
    scenario: Scenario
    float_est: Estimates
    fixed_est: Estimates
    tolerance: diff.ToleranceResult


def record_baseline(
    scenario_dirs: list[Path],
    out: Path,
    settings: RunSettings | None = None,
    replace: bool = False,
    progress=None,
) -> dict:
    """Record a baseline of every scenario into `out`; returns the manifest.

    Refuses (InputError) an existing, non-empty `out` unless replace=True.
    progress(key, engine) is called before each run.
    """
    settings = settings or RunSettings()
    check_settings(settings)
    out = Path(out)
    if out.exists() and (not out.is_dir() or any(out.iterdir())) and not replace:
        raise InputError(out, 0, None, "a baseline (or other content) is already there; pass --replace to overwrite it")
    if not scenario_dirs:
        raise ValueError("no scenarios to record")
    folders = [Path(d) for d in scenario_dirs]
    scenarios = [read_scenario(f) for f in folders]  # every scenario valid before anything runs
    runs: list[Recorded] = []
    for key, folder, scenario in zip(scenario_keys(folders), folders, scenarios):
        est = {}
        for engine in ("float", "fixed"):
            if progress is not None:
                progress(key, engine)
            est[engine] = run_engine(scenario, engine, settings)
        runs.append(Recorded(key, folder, scenario, est["float"], est["fixed"], diff.tolerance(est["float"], est["fixed"], scenario)))

    staging = out.absolute().parent / f".{out.name}.recording-{secrets.token_hex(4)}"
    staging.mkdir(parents=True)
    try:
        entries = []
        for r in runs:
            (staging / r.key).mkdir()
            write_csv(r.float_est, staging / r.key / FLOAT_CSV, fixed=False)
            write_csv(r.fixed_est, staging / r.key / FIXED_CSV, fixed=True)
            entries.append(_scenario_entry(r, staging))
        manifest = {
            "format": FORMAT,
            "format_version": FORMAT_VERSION,
            "created_utc": dt.datetime.now(dt.timezone.utc).isoformat(timespec="seconds"),
            "peerfix_version": __version__,
            "host": {"python": sys.version.split()[0], "numpy": np.__version__, "platform": platform.platform()},
            "core": core_build_info(),
            "settings": settings.as_dict(),
            "q_formats": dict(Q_FORMATS),
            "scenarios": entries,
        }
        write_manifest(manifest, staging)
        _swap_into_place(staging, out)
    except BaseException:
        shutil.rmtree(staging, ignore_errors=True)
        raise
    return manifest


def _scenario_entry(r: Recorded, staging: Path) -> dict:
    hashes = scenario_hashes(r.folder)
    tol = r.tolerance
    return {
        "key": r.key,
        "source": str(r.folder.resolve()),
        "site": r.scenario.site.name,
        "content_sha256": content_sha256(hashes),
        "files": hashes,
        "agent_ids": list(r.scenario.agent_ids),
        "epochs": len(r.float_est.t_s),
        "iterations_stored": [int(i) for i in r.float_est.iterations],
        "float_csv": f"{r.key}/{FLOAT_CSV}",
        "fixed_csv": f"{r.key}/{FIXED_CSV}",
        "float_sha256": file_sha256(staging / r.key / FLOAT_CSV),
        "fixed_sha256": file_sha256(staging / r.key / FIXED_CSV),
        # The fixed core against the float twin when recorded (what "within tolerance" is judged on later).
        "tolerance_at_record": {k: v for k, v in tol.summary.items() if isinstance(v, (int, float, dict))},
    }


def _swap_into_place(staging: Path, target: Path) -> None:
    if target.exists():
        old = target.absolute().parent / f".{target.name}.old-{secrets.token_hex(4)}"
        target.rename(old)
        staging.rename(target)
        shutil.rmtree(old) if old.is_dir() else old.unlink()
    else:
        staging.rename(target)
