"""Run a campaign: the cells not yet stored, in parallel, then the tables and plots.

Local by default: a process pool with one worker per core.  With a scheduler
address (or a dask.distributed Client) the same cells go to a Dask cluster.
Either way the results come back to this process, which stores each one as it
arrives, so an interrupted campaign loses only the cells still running.
"""

from __future__ import annotations

import json
import os
import time
from concurrent.futures import ProcessPoolExecutor, as_completed
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable, Iterator

from .cell import run_cell
from .grid import Cell, expand
from .spec import CampaignSpec
from .store import CellStore


@dataclass
class CampaignResult:
    spec: CampaignSpec
    out: Path
    cells: int  # in the spec
    skipped: int  # already stored before this run
    ran: int  # finished and stored by this run
    failed: list[dict] = field(default_factory=list)  # {"key", "cell", "error"}
    pending: int = 0  # left for a later run (max_cells)
    wall_s: float = 0.0  # this run, cells only
    workers: int = 0
    backend: str = "local"
    files: list[Path] = field(default_factory=list)

    def summary(self) -> dict:
        return {
            "campaign": self.spec.name,
            "out": str(self.out),
            "cells": self.cells,
            "skipped": self.skipped,
            "ran": self.ran,
            "failed": len(self.failed),
            "pending": self.pending,
            "wall_s": round(self.wall_s, 3),
            "seconds_per_cell": round(self.wall_s / self.ran, 4) if self.ran else None,
            "workers": self.workers,
            "backend": self.backend,
            "files": [str(p) for p in self.files],
        }


def _local(docs: list[dict], workers: int) -> Iterator[dict]:
    if workers == 1:  # in this process: simplest to debug and profile
        for d in docs:
            yield run_cell(d)
        return
    with ProcessPoolExecutor(max_workers=workers) as pool:
        futures = [pool.submit(run_cell, d) for d in docs]
        try:
            for fut in as_completed(futures):
                yield fut.result()
        except BaseException:  # interrupted: drop what has not started, keep what is stored
            pool.shutdown(wait=False, cancel_futures=True)
            raise


def _dask(docs: list[dict], scheduler: Any) -> tuple[Iterator[dict], int]:
    from dask.distributed import Client, as_completed as dask_completed

    own = not isinstance(scheduler, Client)
    client = Client(scheduler) if own else scheduler
    workers = sum(client.nthreads().values())

    def results() -> Iterator[dict]:
        futures = [client.submit(run_cell, d, key=f"peerfix-cell-{d['campaign']}-{Cell.from_doc(d).key}", pure=False)
                   for d in docs]
        try:
            for fut in dask_completed(futures):
                yield fut.result()
        finally:
            client.cancel(futures)
            if own:
                client.close()

    return results(), workers


def run_campaign(
    spec: CampaignSpec,
    out: str | Path,
    scheduler: Any = None,
    workers: int | None = None,
    max_cells: int | None = None,
    progress: bool = True,
    on_result: Callable[[dict], None] | None = None,
    write: bool = True,
) -> CampaignResult:
    """Run every cell of the spec that out/cells does not hold yet.

    scheduler: a Dask scheduler address or Client (None: local processes).
    workers: local processes (default: the machine's cores); 1 runs in this process.
    max_cells: run at most this many of the missing cells (the rest stay pending).
    on_result(result) is called for every finished cell (after it is stored).
    write: also write the tables and plots of every stored cell of the spec.
    """
    out = Path(out)
    store = CellStore(out)
    cells = expand(spec)
    todo = [c for c in cells if not store.has(c.key)]
    skipped = len(cells) - len(todo)
    batch = todo if max_cells is None else todo[: max(0, max_cells)]
    docs = [c.as_doc() for c in batch]
    out.mkdir(parents=True, exist_ok=True)
    # The keys of this run's cells: what the spec meant with the defaults in force now (a later
    # change of a default gives other keys; the manifest still finds this run's results).
    manifest = {"name": spec.name, "spec": str(spec.path), "cells": len(cells), "description": spec.description,
                "keys": [c.key for c in cells]}
    tmp = out / ".campaign.json.tmp"
    tmp.write_text(json.dumps(manifest, indent=1))
    tmp.replace(out / "campaign.json")

    result = CampaignResult(spec, out, len(cells), skipped, 0, pending=len(todo) - len(batch))
    if scheduler is None:
        result.workers = max(1, workers or os.cpu_count() or 1)
        result.workers = min(result.workers, max(1, len(docs)))
        stream = _local(docs, result.workers)
    else:
        result.backend = "dask"
        stream, result.workers = _dask(docs, scheduler)

    from tqdm import tqdm

    load_before = os.getloadavg()

    bar = tqdm(total=len(cells), initial=skipped, desc=spec.name, unit="cell", disable=not progress, smoothing=0.1)
    t0 = time.perf_counter()
    try:
        for r in stream:
            if "error" in r:
                result.failed.append(r)
            else:
                store.save(r)
                result.ran += 1
                if on_result is not None:
                    on_result(r)
            bar.update(1)
            bar.set_postfix(failed=len(result.failed), refresh=False)
    finally:
        stream.close()  # an interrupt cancels the cells that have not started
        result.wall_s = time.perf_counter() - t0
        bar.close()
    if write:
        result.files = write_outputs(spec, out, cells)
    log_run(out, {**result.summary(), "load_before": load_before, "load_after": os.getloadavg(),
                  "cores": os.cpu_count(), "finished_utc": time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime())})
    return result


def log_run(out: Path, summary: dict) -> None:
    """One line per run in out/runs.jsonl: how long this run took, on how many workers,
    how busy the machine was (load averages, 1/5/15 min)."""
    with open(out / "runs.jsonl", "a") as f:
        f.write(json.dumps(summary) + "\n")


def read_runs(out: str | Path) -> list[dict]:
    path = Path(out) / "runs.jsonl"
    if not path.is_file():
        return []
    return [json.loads(line) for line in path.read_text().splitlines() if line.strip()]


def stored_results(spec: CampaignSpec, out: str | Path, cells: list[Cell] | None = None) -> list[dict]:
    """The stored results of the spec's cells, in grid order (missing cells left out)."""
    store = CellStore(out)
    return [store.load(c.key) for c in (cells or expand(spec)) if store.has(c.key)]


def manifest_results(out: str | Path) -> tuple[list[dict], int]:
    """The stored results of the cells of the last run in out (campaign.json), and how many cells it had."""
    path = Path(out) / "campaign.json"
    if not path.is_file():
        return [], 0
    keys = json.loads(path.read_text()).get("keys", [])
    store = CellStore(out)
    return [store.load(k) for k in keys if store.has(k)], len(keys)


def write_outputs(spec: CampaignSpec, out: str | Path, cells: list[Cell] | None = None) -> list[Path]:
    """results.csv/.parquet, iterations.csv/.parquet and the spec's plots, from the stored cells."""
    from .plots import write_plots
    from .table import iteration_rows, result_rows, write_table

    out = Path(out)
    results = stored_results(spec, out, cells)
    if not results:
        return []
    files = write_table(result_rows(results), out / "results")
    files += write_table(iteration_rows(results), out / "iterations")
    files += write_plots(spec, results, out / "plots")
    return files
