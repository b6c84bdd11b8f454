"""`peerfix sweep SPEC.toml --out DIR`: run a campaign (scenarios x parameters x engines x seeds).

Finished cells are stored under DIR/cells and skipped by a rerun, so an
interrupted campaign picks up where it stopped.  Writes DIR/results.csv (and
.parquet with pyarrow), DIR/iterations.csv and DIR/plots/*.png.  Runs on local
processes (one per core) unless --scheduler names a Dask scheduler; its
workers need the same peerfix installed (cells travel as plain dicts, results
come back here and are stored in DIR).  The spec format is described in
python/peerfix/campaign/spec.py; shipped studies are in campaigns/.
"""

from __future__ import annotations

from pathlib import Path

from .common import print_json


def register(sub) -> None:
    p = sub.add_parser("sweep", help="run a campaign spec: a grid of networks, settings, engines and seeds", description=__doc__)
    p.add_argument("spec", type=Path, metavar="SPEC.toml")
    p.add_argument("--out", type=Path, required=True, metavar="DIR", help="folder for the cells, tables and plots")
    p.add_argument("--scheduler", metavar="ADDRESS", help="run on a Dask distributed cluster (e.g. tcp://host:8786)")
    p.add_argument("--workers", type=int, default=None, metavar="N", help="local worker processes (default: one per core)")
    p.add_argument("--max-cells", type=int, default=None, metavar="N", help="run at most N of the missing cells, then stop")
    p.add_argument("--dry-run", action="store_true", help="only count the cells, stored and missing")
    p.add_argument("--no-progress", action="store_true", help="no progress bar")
    p.add_argument("--json", action="store_true", help="print the run summary as JSON")
    p.set_defaults(handler=handle)


def handle(args) -> int:
    from ..campaign import CellStore, expand, load_spec, run_campaign

    spec = load_spec(args.spec)  # InputError (exit 2) before anything is written
    if args.workers is not None and args.workers < 1:
        raise SystemExit("peerfix: error: --workers must be at least 1")
    if args.dry_run:
        cells = expand(spec)
        store = CellStore(args.out)
        stored = sum(store.has(c.key) for c in cells)
        doc = {"campaign": spec.name, "cells": len(cells), "stored": stored, "missing": len(cells) - stored}
        print_json(doc) if args.json else print(f"{spec.name}: {doc['cells']} cells, {stored} stored, {doc['missing']} to run")
        return 0
    result = run_campaign(spec, args.out, scheduler=args.scheduler, workers=args.workers, max_cells=args.max_cells,
                          progress=not args.no_progress)
    doc = result.summary()
    if args.json:
        print_json(doc)
    else:
        per = f", {doc['seconds_per_cell']} s per cell" if doc["seconds_per_cell"] else ""
        print(f"{spec.name}: {doc['cells']} cells: {doc['ran']} run, {doc['skipped']} already stored, "
              f"{doc['failed']} failed, {doc['pending']} left; {doc['wall_s']:.1f} s on {doc['workers']} "
              f"{doc['backend']} workers{per} -> {args.out / 'results.csv'}")
        for f in result.failed[:5]:
            print(f"failed cell {f['key']}:\n{f['error']}")
    return 1 if result.failed else 0
