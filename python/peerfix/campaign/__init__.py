"""Campaigns: grids of scenarios x parameters x engines x seeds (`peerfix sweep`).

    spec = load_spec("campaigns/blocked-share.toml")    # spec.py: the TOML format
    cells = expand(spec)                                 # grid.py: one Cell per run
    result = run_campaign(spec, "out/blocked-share")     # execute.py: local or Dask, resumable

Finished cells are stored one JSON each (store.py); the tidy tables and their
summaries are in table.py, the figures in plots.py.
"""

from .execute import CampaignResult, run_campaign, stored_results, write_outputs
from .grid import Cell, expand
from .spec import Axis, CampaignSpec, PlotSpec, load_spec, parse_spec
from .store import CellStore
from .table import ITERATION_METRICS, METRIC_COLUMNS, summarise, summarise_iterations

__all__ = [
    "ITERATION_METRICS",
    "METRIC_COLUMNS",
    "Axis",
    "CampaignResult",
    "CampaignSpec",
    "Cell",
    "CellStore",
    "PlotSpec",
    "expand",
    "load_spec",
    "parse_spec",
    "run_campaign",
    "stored_results",
    "summarise",
    "summarise_iterations",
    "write_outputs",
]
