"""A campaign's figures: its main metric against its swept setting.

Each [[plot]] of the spec gives one PNG: the mean over networks (seeds) of the
metric against x, one line per combination of the series settings, with a band
over the middle half of the networks (25th to 75th percentile).  Without [[plot]], one figure of the
share within 1 m against the first swept setting (or against the iteration
when nothing is swept).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
from matplotlib.ticker import MaxNLocator

from ..report.style import new_figure, save, styled
from .spec import CampaignSpec, PlotSpec
from .table import _hashable, _settings

LABELS = {
    "fraction_within_1m": "share of agents within 1 m",
    "rmse_within_1m_m": "RMSE of agents within 1 m (m)",
    "rmse_m": "RMSE (m)",
    "error_p90_m": "90th percentile error (m)",
    "error_p50_m": "median error (m)",
    "coverage_95": "share inside the 95% ellipse",
    "bytes_per_agent_per_iteration": "bytes per agent per iteration",
    "run_s": "estimator run time per network (s)",
    "blocked_probability": "share of blocked paths",
    "channel_packet_loss": "broadcasts lost (channel)",
    "K": "components per belief K",
    "iteration": "iteration",
    "agents": "agents",
    "anchor_count": "anchors",
}


# Short names for legend entries.
SHORT = {"channel_packet_loss": "lost", "channel_bit_error_rate": "BER", "hold_last_heard": "hold",
         "blocked_probability": "blocked", "iterations": "iterations", "cooperative": "cooperative"}


def default_plots(spec: CampaignSpec) -> tuple[PlotSpec, ...]:
    x = spec.swept[0] if spec.swept else "iteration"
    return (PlotSpec(x, "fraction_within_1m", None),)


def _label(column: str, value) -> str:
    """A legend entry: strings as they are (a preset, a schedule), others with a short name."""
    if isinstance(value, str):
        return value
    if isinstance(value, bool):
        return SHORT.get(column, column) if value else f"no {SHORT.get(column, column)}"
    return f"{SHORT.get(column, column)} {value}"


def _points(results: list[dict], plot: PlotSpec, series: list[str]) -> dict[tuple, dict[float, list[float]]]:
    lines: dict[tuple, dict] = {}
    for r in results:
        s = _settings(r)
        label = tuple(_hashable(s[c]) for c in series)
        if plot.x == "iteration":
            for m in r["iterations"]:
                lines.setdefault(label, {}).setdefault(m["iteration"], []).append(m.get(plot.y))
        else:
            lines.setdefault(label, {}).setdefault(s[plot.x], []).append(r["metrics"].get(plot.y))
    return lines


def write_plots(spec: CampaignSpec, results: list[dict], folder: Path) -> list[Path]:
    folder.mkdir(parents=True, exist_ok=True)
    written = []
    for plot in spec.plots or default_plots(spec):
        series = list(plot.series) if plot.series is not None else [c for c in spec.swept if c != plot.x]
        if plot.series is None and len(spec.engines) > 1:
            series.append("engine")
        lines = _points(results, plot, series)
        outside = len(lines) > 4  # a long legend goes beside the axes
        with styled():
            fig = new_figure(9.0 if outside else 6.4, 3.9)
            ax = fig.add_subplot()
            for label, pts in sorted(lines.items(), key=lambda kv: str(kv[0])):
                xs = sorted(pts)
                vals = [[v for v in pts[x] if v is not None] for x in xs]
                mean = [np.mean(v) if v else np.nan for v in vals]
                name = ", ".join(_label(c, v) for c, v in zip(series, label)) or spec.name
                line, = ax.plot(xs, mean, marker="o", markersize=4, label=name)
                if any(len(v) > 1 for v in vals):
                    lo = [np.percentile(v, 25) if v else np.nan for v in vals]
                    hi = [np.percentile(v, 75) if v else np.nan for v in vals]
                    ax.fill_between(xs, lo, hi, color=line.get_color(), alpha=0.12, linewidth=0)
            xs_all = [x for pts in lines.values() for x in pts]
            if xs_all and all(isinstance(x, int) and not isinstance(x, bool) for x in xs_all):
                ax.xaxis.set_major_locator(MaxNLocator(integer=True))
            ax.set_xlabel(LABELS.get(plot.x, plot.x))
            ax.set_ylabel(LABELS.get(plot.y, plot.y))
            ax.set_title(spec.name, fontsize=10)
            ax.set_title(f"mean of {len(spec.seeds)} networks; band: middle half of them", loc="right", fontsize=7,
                         color="#777777", fontweight="normal")
            if outside:
                ax.legend(loc="upper left", bbox_to_anchor=(1.01, 1.0), fontsize=8)
            elif len(lines) > 1:
                ax.legend()
            written.append(save(fig, folder / f"{plot.y}_vs_{plot.x}.png"))
    return written
