"""The look of peerfix pictures: colours per run, and one set of rcParams.

Figures are built with matplotlib.figure.Figure and saved through the Agg
canvas directly, so making a report never touches pyplot's global backend.
"""

from __future__ import annotations

from contextlib import contextmanager
from pathlib import Path
from typing import Iterator

import matplotlib as mpl
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure

# One colour per demo run (by run name), chosen to stay apart for common
# colour-vision deficiencies (blue / orange / purple; grey for the bound).
RUN_COLOURS = {
    "cooperative": "#1f5fa6",
    "anchors-only": "#e08a1e",
    "cooperative-plain": "#8e5fb5",
}
BOUND_COLOUR = "#444444"
BAD_COLOUR = "#c8372d"  # errors above 1 m
RACK_FACE = "#d8d8d8"
RACK_EDGE = "#a8a8a8"
ANCHOR_COLOUR = "#222222"
TRUTH_COLOUR = "#222222"

DPI = 130

_RC = {
    "figure.facecolor": "white",
    "axes.facecolor": "white",
    "axes.edgecolor": "#888888",
    "axes.linewidth": 0.8,
    "axes.spines.top": False,
    "axes.spines.right": False,
    "axes.grid": True,
    "grid.color": "#e6e6e6",
    "grid.linewidth": 0.7,
    "axes.titlesize": 11,
    "axes.titleweight": "bold",
    "axes.titlelocation": "left",
    "axes.labelsize": 10,
    "axes.labelcolor": "#333333",
    "xtick.color": "#555555",
    "ytick.color": "#555555",
    "xtick.labelsize": 9,
    "ytick.labelsize": 9,
    "legend.fontsize": 9,
    "legend.frameon": False,
    "font.size": 10,
    "lines.linewidth": 1.8,
}


@contextmanager
def styled() -> Iterator[None]:
    """rcParams for the duration of one picture."""
    with mpl.rc_context(_RC):
        yield


def new_figure(width_in: float, height_in: float) -> Figure:
    fig = Figure(figsize=(width_in, height_in), dpi=DPI, layout="constrained")
    FigureCanvasAgg(fig)
    return fig


def save(fig: Figure, path: Path) -> Path:
    fig.savefig(path, dpi=DPI, facecolor="white")
    return path
