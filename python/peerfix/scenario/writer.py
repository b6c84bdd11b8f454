"""Writer for the scenario folder format (see docs/scenario-format.md).

Floats are written as repr(float(x)), the shortest text that reads back to
the same float64, so read_scenario(write_scenario(s)) gives back s exactly.
The folder is built next to the target, read back with the strict reader and
only then renamed into place: on any error nothing is left behind and an
existing target is untouched.
"""

from __future__ import annotations

import csv
import dataclasses
import os
import secrets
import shutil
from pathlib import Path
from typing import Any, Iterable, Sequence

import numpy as np
import tomli_w

from ..errors import InputError
from .model import Scenario
from .reader import (
    AGENT_COLUMNS,
    AGENTS_FILE,
    ANCHOR_COLUMNS,
    ANCHOR_Z_COLUMN,
    ANCHORS_FILE,
    CHECKED_TABLES,
    RANGE_COLUMNS,
    RANGES_FILE,
    SITE_FILE,
    TRUTH_COLUMNS,
    TRUTH_FILE,
    read_scenario,
)


def write_scenario(scenario: Scenario, folder: str | Path, *, overwrite: bool = False) -> Path:
    """Write `scenario` as a folder and return its path.

    Refuses (FileExistsError) a target folder that is not empty unless
    overwrite=True, in which case the whole folder is replaced.  A scenario
    that the reader would reject, or that would not read back unchanged
    (e.g. ids with surrounding spaces), raises ValueError and writes nothing.
    """
    target = Path(folder)
    if target.exists() and not target.is_dir():
        raise FileExistsError(f"{target} exists and is not a folder")
    if target.is_dir() and any(target.iterdir()) and not overwrite:
        raise FileExistsError(f"{target} is not empty; pass overwrite=True to replace it")
    _check_shapes(scenario)

    parent = target.absolute().parent
    parent.mkdir(parents=True, exist_ok=True)
    # Hidden sibling names, so the final rename stays on one file system.
    tag = secrets.token_hex(4)
    staging = parent / f".{target.name}.writing-{tag}"
    staging.mkdir()  # honours the umask, unlike tempfile.mkdtemp's 0o700
    try:
        _write_files(scenario, staging)
        _read_back(staging, target)
        _swap_into_place(staging, target, parent / f".{target.name}.old-{tag}")
    except BaseException:
        shutil.rmtree(staging, ignore_errors=True)
        raise
    return target


# --------------------------------------------------------------------------- checks


def _check_shapes(s: Scenario) -> None:
    """Catch in-memory mistakes the files could not show (lengths, shapes, id spelling)."""
    if len(s.anchor_ids) != np.shape(s.anchor_xy_m)[0] or np.ndim(s.anchor_xy_m) != 2 or np.shape(s.anchor_xy_m)[1] != 2:
        raise ValueError(f"anchor_xy_m must have shape ({len(s.anchor_ids)}, 2), has {np.shape(s.anchor_xy_m)}")
    r = s.ranges
    for name in ("t_s", "node_b", "range_m"):
        if len(getattr(r, name)) != len(r.node_a):
            raise ValueError(f"ranges.{name} has {len(getattr(r, name))} entries, ranges.node_a {len(r.node_a)}")
    if s.truth is not None:
        t = s.truth
        if len(t.t_s) != len(t.node_id) or np.shape(t.xy_m) != (len(t.node_id), 2):
            raise ValueError("truth.t_s, truth.node_id and truth.xy_m (N, 2) must have the same length N")
    for where, ids in (
        ("anchor_ids", s.anchor_ids),
        ("agent_ids", s.agent_ids),
        ("ranges.node_a", r.node_a),
        ("ranges.node_b", r.node_b),
        ("truth.node_id", s.truth.node_id if s.truth is not None else []),
    ):
        for node in ids:
            if not isinstance(node, str) or node != node.strip() or not node:
                # The reader strips ids, so such an id would not read back as itself.
                raise ValueError(f"{where}: node id {node!r} must be a non-empty str without surrounding spaces")
    tables: list[tuple[str, dict[str, list[str]], Sequence[str], int]] = [
        ("anchor_extra", s.anchor_extra, ANCHOR_COLUMNS, len(s.anchor_ids)),
        ("agent_extra", s.agent_extra, AGENT_COLUMNS, len(s.agent_ids)),
        ("ranges.extra", r.extra, RANGE_COLUMNS, len(r.node_a)),
    ]
    if s.truth is not None:
        tables.append(("truth.extra", s.truth.extra, TRUTH_COLUMNS, len(s.truth.node_id)))
    for where, extra, required, n in tables:
        for name, values in extra.items():
            if not isinstance(name, str) or name != name.strip() or not name or name in required:
                raise ValueError(f"{where}: bad extra column name {name!r}")
            if len(values) != n:
                raise ValueError(f"{where}[{name!r}] has {len(values)} values, expected {n}")
            if not all(isinstance(v, str) for v in values):
                raise ValueError(f"{where}[{name!r}] must hold str values (extra columns are text)")
    if any(name in s.site.extra for name in CHECKED_TABLES):
        raise ValueError(f"site.extra must not hold {', '.join(CHECKED_TABLES)}; those come from Site itself")
    if s.anchor_z_m is not None:
        if np.shape(s.anchor_z_m) != (len(s.anchor_ids),):
            raise ValueError(f"anchor_z_m must have shape ({len(s.anchor_ids)},), has {np.shape(s.anchor_z_m)}")
        if ANCHOR_Z_COLUMN in s.anchor_extra:
            raise ValueError("anchor_extra must not hold z_m when anchor_z_m is set")


def _read_back(staging: Path, target: Path) -> None:
    """Run the strict reader on what was written; report errors as if at the target."""
    try:
        read_scenario(staging)
    except InputError as err:
        name = Path(err.path).name if Path(err.path) != staging else ""
        where = InputError(target / name, err.line, err.field, err.message)
        raise ValueError(f"scenario cannot be written, the reader would reject it: {where}") from err


# --------------------------------------------------------------------------- files


def _num(x: Any) -> str:
    return repr(float(x))


def _write_files(s: Scenario, out: Path) -> None:
    site = s.site
    ranging = site.ranging
    ranging_doc: dict[str, Any] = {
        "sigma_m": float(ranging.sigma_m),
        "radio_range_m": float(ranging.radio_range_m),
        "sigma_per_m": float(ranging.sigma_per_m),
        "blocked_probability": float(ranging.blocked_probability),
        "blocked_bias_mean_m": float(ranging.blocked_bias_mean_m),
    }
    if ranging.max_range_m is not None:
        ranging_doc["max_range_m"] = float(ranging.max_range_m)
    site_doc: dict[str, Any] = {"name": site.name, "bounds_m": [float(v) for v in site.bounds_m]}
    if site.tag_height_m is not None:
        site_doc["tag_height_m"] = float(site.tag_height_m)
    doc: dict[str, Any] = {"site": site_doc, "ranging": ranging_doc}
    tracking = {k: float(v) for k, v in dataclasses.asdict(site.tracking).items() if v is not None}
    if tracking:
        doc["tracking"] = tracking
    doc.update(site.extra)
    try:
        text = tomli_w.dumps(doc)
    except TypeError as err:
        raise ValueError(f"site.extra cannot be written as TOML: {err}") from err
    (out / SITE_FILE).write_text(text, encoding="utf-8")

    xy = np.asarray(s.anchor_xy_m, dtype=float)
    z = None if s.anchor_z_m is None else np.asarray(s.anchor_z_m, dtype=float)
    _write_csv(
        out / ANCHORS_FILE,
        ANCHOR_COLUMNS if z is None else (*ANCHOR_COLUMNS, ANCHOR_Z_COLUMN),
        s.anchor_extra,
        (
            [node, _num(xy[i, 0]), _num(xy[i, 1]), *([] if z is None else [_num(z[i])])]
            for i, node in enumerate(s.anchor_ids)
        ),
    )
    _write_csv(out / AGENTS_FILE, AGENT_COLUMNS, s.agent_extra, ([node] for node in s.agent_ids))
    r = s.ranges
    _write_csv(
        out / RANGES_FILE,
        RANGE_COLUMNS,
        r.extra,
        ([_num(r.t_s[i]), r.node_a[i], r.node_b[i], _num(r.range_m[i])] for i in range(len(r.node_a))),
    )
    if s.truth is not None:
        t = s.truth
        txy = np.asarray(t.xy_m, dtype=float)
        _write_csv(
            out / TRUTH_FILE,
            TRUTH_COLUMNS,
            t.extra,
            ([_num(t.t_s[i]), node, _num(txy[i, 0]), _num(txy[i, 1])] for i, node in enumerate(t.node_id)),
        )


def _write_csv(path: Path, columns: Sequence[str], extra: dict[str, list[str]], rows: Iterable[list[str]]) -> None:
    names = list(extra)
    with path.open("w", encoding="utf-8", newline="") as f:
        writer = csv.writer(f, lineterminator="\n")
        writer.writerow([*columns, *names])
        for i, row in enumerate(rows):
            writer.writerow([*row, *(extra[name][i] for name in names)])


def _swap_into_place(staging: Path, target: Path, backup: Path) -> None:
    """Rename the finished folder onto the target, keeping the old one until it worked."""
    if not target.exists():
        os.rename(staging, target)
        return
    os.rename(target, backup)
    try:
        os.rename(staging, target)
    except BaseException:
        os.rename(backup, target)
        raise
    shutil.rmtree(backup, ignore_errors=True)
