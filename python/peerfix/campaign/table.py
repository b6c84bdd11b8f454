"""The tidy results tables of a campaign, and their summaries.

results.csv (and .parquet when pyarrow is there): one row per cell, settings
columns then metric columns (final iteration).  iterations.csv: one row per
cell per iteration.  A metric with nothing to average over (e.g. RMSE within
1 m when no agent is within 1 m) is empty in the CSV and null in Parquet.
"""

from __future__ import annotations

import csv
import math
from pathlib import Path
from typing import Any, Iterable

import numpy as np

METRIC_COLUMNS = (
    "n_agents",
    "n_anchors",
    "fraction_within_1m",  # share of agents with error <= 1 m
    "rmse_m",
    "rmse_within_1m_m",
    "error_p50_m",
    "error_p90_m",
    "error_p99_m",
    "coverage_95",  # share whose truth lies in the 95% ellipse
    "peb_rms_m",
    "fraction_peb_below_0_33m",
    "within_1m_best",  # best share within 1 m over the iterations
    "within_1m_drop",  # best minus final: > 0 when it got worse again (oscillation)
    "bytes_per_agent_per_iteration",
    "bytes_per_network",
    "messages_per_iteration",
    "frames_lost",
    "frames_corrupted",
    "frames_rejected",
    "simulate_s",
    "run_s",  # the estimator alone (run_scenario without scoring)
    "score_s",
    "cpu_s",  # CPU seconds of the whole cell (simulate, run, score)
)
ITERATION_METRICS = (
    "fraction_within_1m",
    "rmse_m",
    "rmse_within_1m_m",
    "error_p50_m",
    "error_p90_m",
    "coverage_95",
    "bytes_per_agent",
    "messages_sent",
    "frames_lost",
)


def _settings(result: dict) -> dict[str, Any]:
    from .grid import Cell

    return Cell.from_doc(result["cell"]).settings_row()


def result_rows(results: Iterable[dict]) -> list[dict]:
    """One row per cell: settings, then metrics (None where not finite)."""
    return [{**_settings(r), **{k: r["metrics"].get(k) for k in METRIC_COLUMNS}} for r in results]


def iteration_rows(results: Iterable[dict]) -> list[dict]:
    rows = []
    for r in results:
        s = _settings(r)
        for m in r["iterations"]:
            rows.append({**s, "iteration": m["iteration"], **{k: m.get(k) for k in ITERATION_METRICS}})
    return rows


def _csv_value(v: Any) -> Any:
    if v is None or (isinstance(v, float) and not math.isfinite(v)):
        return ""
    if isinstance(v, float):
        return repr(v)
    if isinstance(v, (list, tuple)):
        return repr(v)
    return v


def write_table(rows: list[dict], stem: Path) -> list[Path]:
    """stem.csv, and stem.parquet when pyarrow is installed; returns the files written."""
    stem.parent.mkdir(parents=True, exist_ok=True)
    columns = list(rows[0]) if rows else []
    written = [stem.with_suffix(".csv")]
    tmp = stem.with_suffix(".csv.tmp")
    with open(tmp, "w", newline="") as f:
        w = csv.writer(f)
        w.writerow(columns)
        for row in rows:
            w.writerow([_csv_value(row.get(c)) for c in columns])
    tmp.replace(written[0])
    try:
        import pyarrow as pa
        import pyarrow.parquet as pq
    except ImportError:  # optional: CSV is the table of record
        return written
    if rows:
        # List-valued settings (e.g. explicit_anchors) go in as their text.
        table = pa.Table.from_pylist([{c: (repr(v) if isinstance(v, (list, tuple)) else v) for c, v in r.items()} for r in rows])
        pq.write_table(table, stem.with_suffix(".parquet.tmp"))
        stem.with_suffix(".parquet.tmp").replace(stem.with_suffix(".parquet"))
        written.append(stem.with_suffix(".parquet"))
    return written


def read_csv(path: Path) -> list[dict]:
    """A results CSV back as dicts of str (empty string = no value)."""
    with open(path, newline="") as f:
        return list(csv.DictReader(f))


def _mean(values: list) -> float:
    v = [x for x in values if x is not None and math.isfinite(x)]
    return float(np.mean(v)) if v else math.nan


def summarise(results: list[dict], by: list[str]) -> list[dict]:
    """One row per combination of the `by` settings columns, over its networks (seeds).

    Means over networks of the per-network figures, and figures pooled over all
    agents of all networks: error_p90_m_pooled (90th percentile of the final
    errors), rmse_within_1m_m_pooled (RMSE of the agents within 1 m).
    """
    groups: dict[tuple, list[dict]] = {}
    for r in results:
        s = _settings(r)
        groups.setdefault(tuple(_hashable(s[c]) for c in by), []).append(r)
    out = []
    for combo, rs in groups.items():
        errors = np.concatenate([np.asarray(r["errors_m"], float) for r in rs])
        within = errors <= 1.0
        row: dict[str, Any] = dict(zip(by, combo))
        row["networks"] = len(rs)
        for k in METRIC_COLUMNS:
            row[k] = _mean([r["metrics"].get(k) for r in rs])
        row["fraction_within_1m_min"] = min(r["metrics"]["fraction_within_1m"] for r in rs)
        row["error_p90_m_pooled"] = float(np.percentile(errors, 90)) if errors.size else math.nan
        row["rmse_within_1m_m_pooled"] = float(np.sqrt(np.mean(errors[within] ** 2))) if within.any() else math.nan
        out.append(row)
    return sorted(out, key=lambda row: tuple(_sort_key(row[c]) for c in by))


def summarise_iterations(results: list[dict], by: list[str]) -> list[dict]:
    """Per `by` combination and iteration: mean over networks of each iteration metric."""
    groups: dict[tuple, list[dict]] = {}
    for r in results:
        s = _settings(r)
        for m in r["iterations"]:
            groups.setdefault(tuple(_hashable(s[c]) for c in by) + (m["iteration"],), []).append(m)
    out = []
    for combo, ms in groups.items():
        row: dict[str, Any] = dict(zip(by + ["iteration"], combo))
        row["networks"] = len(ms)
        for k in ITERATION_METRICS:
            row[k] = _mean([m.get(k) for m in ms])
        row["fraction_within_1m_min"] = min(m["fraction_within_1m"] for m in ms)
        out.append(row)
    return sorted(out, key=lambda row: tuple(_sort_key(row[c]) for c in by + ["iteration"]))


def _hashable(v: Any) -> Any:
    return tuple(_hashable(x) for x in v) if isinstance(v, list) else v


def _sort_key(v: Any) -> tuple:
    return (0, v, "") if isinstance(v, (int, float)) else (1, 0, str(v))
