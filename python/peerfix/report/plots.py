"""The four demo pictures: site map, one agent's belief, error CDF, share within 1 m.

Each function takes plain arrays (and the scenario for the site geometry),
writes one PNG and returns its path.  Nothing here runs an estimator.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from matplotlib.axes import Axes
from matplotlib.colors import ListedColormap
from matplotlib.lines import Line2D
from matplotlib.patches import Circle, Ellipse, Rectangle
from scipy.stats import chi2

from ..reference.mixture import Mixture
from ..scenario.model import Scenario
from . import style
from .belief import mass_levels, mixture_density
from .site import obstacle_noun, obstacle_rects

# Squared Mahalanobis radius of a 95% ellipse in 2-D: chi-square, 2 dof (scipy.stats.chi2).
CHI2_2DOF_95 = float(chi2.ppf(0.95, 2))
WITHIN_M = 1.0
# Sites longer than this ratio are drawn with a stretched short axis (a
# 400 m x 5 m drift at equal scale is a hairline).
MAX_EQUAL_ASPECT = 5.0


# --------------------------------------------------------------------------- shared drawing


def _draw_obstacles(ax: Axes, scenario: Scenario, label: bool = True) -> None:
    for name, rects in obstacle_rects(scenario).items():
        for k, (x0, y0, x1, y1) in enumerate(rects):
            ax.add_patch(
                Rectangle(
                    (x0, y0), x1 - x0, y1 - y0,
                    facecolor=style.RACK_FACE, edgecolor=style.RACK_EDGE, linewidth=0.5, zorder=1,
                    label=obstacle_noun(name) if (label and k == 0) else None,
                )
            )


def _draw_bounds(ax: Axes, scenario: Scenario) -> None:
    x0, y0, x1, y1 = scenario.site.bounds_m
    ax.add_patch(Rectangle((x0, y0), x1 - x0, y1 - y0, fill=False, edgecolor="#777777", linewidth=1.0, zorder=1))


def ellipse_95(mean: np.ndarray, cov: np.ndarray, **kw) -> Ellipse | None:
    """The 95% ellipse of N(mean, cov) as a patch; None when cov is not positive definite."""
    cov = 0.5 * (np.asarray(cov, float) + np.asarray(cov, float).T)
    if not np.all(np.isfinite(cov)):
        return None
    vals, vecs = np.linalg.eigh(cov)
    if vals[0] <= 0:
        return None
    width, height = 2.0 * np.sqrt(CHI2_2DOF_95 * vals[::-1])  # major first
    angle = math.degrees(math.atan2(vecs[1, 1], vecs[0, 1]))
    return Ellipse(tuple(mean), width, height, angle=angle, **kw)


def _site_layer(
    ax: Axes,
    scenario: Scenario,
    est_xy: np.ndarray,
    est_cov: np.ndarray,
    truth_xy: np.ndarray,
    colour: str,
    marker_scale: float,
    max_ellipse_m: float,
    clip_anchors: bool = False,
) -> None:
    """Racks, anchors, truth, estimates, error lines and 95% ellipses on one axes."""
    _draw_bounds(ax, scenario)
    _draw_obstacles(ax, scenario)
    err = np.hypot(*(est_xy - truth_xy).T)
    for i in range(len(truth_xy)):
        bad = err[i] > WITHIN_M
        ax.plot(
            [truth_xy[i, 0], est_xy[i, 0]], [truth_xy[i, 1], est_xy[i, 1]],
            color=style.BAD_COLOUR if bad else "#777777", linewidth=1.6 if bad else 0.8, zorder=3,
        )
        e = ellipse_95(est_xy[i], est_cov[i], fill=False, edgecolor=colour, linewidth=0.9, alpha=0.9, zorder=4)
        if e is not None and e.width / 2 <= max_ellipse_m:
            ax.add_patch(e)
    ax.scatter(truth_xy[:, 0], truth_xy[:, 1], s=14 * marker_scale, color=style.TRUTH_COLOUR, zorder=5, linewidths=0)
    ax.scatter(est_xy[:, 0], est_xy[:, 1], s=28 * marker_scale, marker="x", color=colour, zorder=6, linewidths=1.2)
    ax.scatter(
        scenario.anchor_xy_m[:, 0], scenario.anchor_xy_m[:, 1], s=70 * marker_scale, marker="^",
        color=style.ANCHOR_COLOUR, edgecolor="white", linewidths=0.8, zorder=7,
        clip_on=clip_anchors,  # wall anchors sit on the frame of the whole-site map
    )


def _set_site_limits(ax: Axes, scenario: Scenario, pad_m: float) -> bool:
    """Limits with a pad; equal scale unless the site is very elongated. Returns True if equal."""
    x0, y0, x1, y1 = scenario.site.bounds_m
    ax.set_xlim(x0 - pad_m, x1 + pad_m)
    ax.set_ylim(y0 - pad_m, y1 + pad_m)
    ratio = max(x1 - x0, y1 - y0) / max(min(x1 - x0, y1 - y0), 1e-9)
    equal = ratio <= MAX_EQUAL_ASPECT
    ax.set_aspect("equal" if equal else "auto")
    return equal


# --------------------------------------------------------------------------- a. site map


def plot_site_map(
    path: Path,
    scenario: Scenario,
    est_xy: np.ndarray,
    est_cov: np.ndarray,
    truth_xy: np.ndarray,
    title: str,
    colour: str,
    focus_xy: np.ndarray | None = None,
    zoom_half_m: float = 6.0,
) -> Path:
    """The whole site, and (when focus_xy is given) a true-scale zoom around it
    where the 95% ellipses of centimetre-level estimates can be seen."""
    est_xy, truth_xy = np.asarray(est_xy, float), np.asarray(truth_xy, float)
    x0, y0, x1, y1 = scenario.site.bounds_m
    w, h = x1 - x0, y1 - y0
    elongated = max(w, h) / max(min(w, h), 1e-9) > MAX_EQUAL_ASPECT
    with style.styled():
        if elongated:
            fig = style.new_figure(12.0, 3.2 if focus_xy is None else 6.4)
            axes = fig.subplots(2 if focus_xy is not None else 1, 1, squeeze=False)[:, 0]
        else:
            main_w = 8.5
            main_h = main_w * h / w + 0.9
            fig = style.new_figure(main_w + (4.2 if focus_xy is not None else 0.0), max(main_h, 4.2))
            ratios = {"width_ratios": [main_w, 4.2]} if focus_xy is not None else None
            axes = fig.subplots(1, 2 if focus_xy is not None else 1, squeeze=False, gridspec_kw=ratios)[0]
        ax = axes[0]
        pad = 0.03 * max(w, h)
        _site_layer(ax, scenario, est_xy, est_cov, truth_xy, colour, 1.0, max_ellipse_m=0.5 * max(w, h))
        equal = _set_site_limits(ax, scenario, pad)
        ax.set_xlabel("x (m)")
        ax.set_ylabel("y (m)" if equal else "y (m, stretched)")
        ax.set_title(title)
        ax.grid(False)

        if focus_xy is not None:
            fx, fy = _zoom_centre(scenario, focus_xy, zoom_half_m)
            ax.add_patch(Rectangle((fx - zoom_half_m, fy - zoom_half_m), 2 * zoom_half_m, 2 * zoom_half_m,
                                   fill=False, edgecolor="#111111", linestyle="--", linewidth=1.0, zorder=8))
            zx = axes[1]
            _site_layer(zx, scenario, est_xy, est_cov, truth_xy, colour, 1.6, max_ellipse_m=zoom_half_m,
                        clip_anchors=True)
            zx.set_xlim(fx - zoom_half_m, fx + zoom_half_m)
            zx.set_ylim(fy - zoom_half_m, fy + zoom_half_m)
            zx.set_aspect("equal")
            zx.set_title(f"Zoom, true scale ({2 * zoom_half_m:.0f} m square)")
            zx.set_xlabel("x (m)")
            zx.set_ylabel("y (m)")
            zx.grid(False)
            for side in ("top", "right"):
                zx.spines[side].set_visible(True)
            for spine in zx.spines.values():
                spine.set_linestyle("--")
                spine.set_edgecolor("#111111")

        handles = [
            Line2D([], [], marker="^", linestyle="", color=style.ANCHOR_COLOUR, markersize=8, label="anchor"),
            Line2D([], [], marker="o", linestyle="", color=style.TRUTH_COLOUR, markersize=4, label="true position"),
            Line2D([], [], marker="x", linestyle="", color=colour, markersize=6, markeredgewidth=1.2, label="estimate"),
            Line2D([], [], color=colour, linewidth=0.9, label="95% ellipse"),
            Line2D([], [], color="#777777", linewidth=0.8, label="error <= 1 m"),
            Line2D([], [], color=style.BAD_COLOUR, linewidth=1.6, label="error > 1 m"),
        ]
        for name in obstacle_rects(scenario):
            handles.append(Rectangle((0, 0), 1, 1, facecolor=style.RACK_FACE, edgecolor=style.RACK_EDGE,
                                     label=obstacle_noun(name)))
        fig.legend(handles=handles, loc="outside lower center", ncol=len(handles))
        return style.save(fig, path)


def _zoom_centre(scenario: Scenario, focus_xy, half_m: float) -> tuple[float, float]:
    """Centre of the zoom square: the focus, moved inside the site when it fits there."""
    x0, y0, x1, y1 = scenario.site.bounds_m
    c = []
    for v, lo, hi in ((float(focus_xy[0]), x0, x1), (float(focus_xy[1]), y0, y1)):
        c.append(min(max(v, lo + half_m), hi - half_m) if hi - lo >= 2 * half_m else 0.5 * (lo + hi))
    return c[0], c[1]


def _legend_rows(fig, rows: list[list], **kw) -> None:
    """A figure legend that reads row by row (matplotlib fills legends column by column)."""
    ncol = max(len(r) for r in rows)
    blank = Line2D([], [], linestyle="", label=" ")
    padded = [r + [blank] * (ncol - len(r)) for r in rows]
    handles = [padded[r][c] for c in range(ncol) for r in range(len(padded))]
    fig.legend(handles=handles, ncol=ncol, **kw)


# --------------------------------------------------------------------------- b. belief panels


@dataclass
class BeliefPanel:
    title: str
    belief: Mixture | None  # None: still the flat prior
    estimate_xy: np.ndarray  # (2,)
    peers: bool  # draw the agent's peer neighbours (cooperative panels)


@dataclass
class Neighbour:
    xy: np.ndarray  # (2,) true position (anchor: its known position)
    range_m: float
    is_anchor: bool
    blocked: bool | None  # None: the scenario does not say


_MASS_CMAP = ListedColormap(["#d6e4f3", "#8db3dd", "#2f6db3"])


def plot_belief_panels(
    path: Path,
    scenario: Scenario,
    agent_id: str,
    truth_xy: np.ndarray,
    panels: list[BeliefPanel],
    neighbours: list[Neighbour],
    window: tuple[float, float, float, float],
    title: str,
    grid_n: int = 301,
) -> Path:
    """Small multiples of one agent's belief: the regions holding 50/90/99% of its
    mass, the truth, the point estimate, anchor range rings and peer neighbours."""
    xmin, xmax, ymin, ymax = window
    gx = np.linspace(xmin, xmax, grid_n)
    gy = np.linspace(ymin, ymax, grid_n)
    xx, yy = np.meshgrid(gx, gy)
    cell = (gx[1] - gx[0]) * (gy[1] - gy[0])
    n = len(panels)
    ncols = min(4, n)
    nrows = math.ceil(n / ncols)
    with style.styled():
        fig = style.new_figure(3.0 * ncols + 0.4, 3.0 * nrows + 1.1)
        axes = fig.subplots(nrows, ncols, squeeze=False, sharex=True, sharey=True)
        for k, ax in enumerate(axes.ravel()):
            if k >= n:
                ax.set_axis_off()
                continue
            p = panels[k]
            # Outside the site is shaded, so a mode beyond a wall stands out.
            ax.set_facecolor("#ececec")
            sx0, sy0, sx1, sy1 = scenario.site.bounds_m
            ax.add_patch(Rectangle((sx0, sy0), sx1 - sx0, sy1 - sy0, facecolor="white", edgecolor="#777777",
                                   linewidth=1.0, zorder=0))
            _draw_obstacles(ax, scenario, label=False)
            if p.belief is not None and len(p.belief):
                dens = mixture_density(p.belief, xx, yy)
                levels = mass_levels(dens, cell)
                if levels:
                    top = max(float(dens.max()), levels[-1]) * 1.0001
                    ax.contourf(xx, yy, dens, levels=levels + [top], cmap=_MASS_CMAP,
                                vmin=levels[0], vmax=top, zorder=2, alpha=0.95)
                    ax.contour(xx, yy, dens, levels=levels[:1], colors=["#2f6db3"], linewidths=0.6, zorder=2)
            else:
                ax.text(0.5, 0.5, "flat prior\n(heard nothing)", transform=ax.transAxes, ha="center",
                        va="center", color="#777777")
            for nb in neighbours:
                if nb.is_anchor:
                    ax.add_patch(Circle(tuple(nb.xy), nb.range_m, fill=False, edgecolor="#555555",
                                        linewidth=0.7, linestyle="--" if nb.blocked else "-", zorder=3))
                    ax.scatter([nb.xy[0]], [nb.xy[1]], marker="^", s=60, color=style.ANCHOR_COLOUR,
                               edgecolor="white", zorder=6)
                elif p.peers:
                    ax.scatter([nb.xy[0]], [nb.xy[1]], marker="o", s=14, facecolor="white",
                               edgecolor="#555555", linewidths=0.8, zorder=5)
            ax.scatter([truth_xy[0]], [truth_xy[1]], marker="o", s=40, color=style.TRUTH_COLOUR, zorder=7)
            ax.scatter([p.estimate_xy[0]], [p.estimate_xy[1]], marker="x", s=60, color=style.BAD_COLOUR,
                       linewidths=1.6, zorder=8)
            ax.set_xlim(xmin, xmax)
            ax.set_ylim(ymin, ymax)
            ax.set_aspect("equal")
            ax.grid(False)
            ax.set_title(p.title, fontsize=10)
        for ax in axes[-1]:
            ax.set_xlabel("x (m)")
        for ax in axes[:, 0]:
            ax.set_ylabel("y (m)")
        fig.suptitle(title, fontsize=12, fontweight="bold", x=0.01, ha="left")
        belief_row = [
            Rectangle((0, 0), 1, 1, color=_MASS_CMAP(2), label="50% of belief"),
            Rectangle((0, 0), 1, 1, color=_MASS_CMAP(1), label="90% of belief"),
            Rectangle((0, 0), 1, 1, color=_MASS_CMAP(0), label="99% of belief"),
            Line2D([], [], marker="o", linestyle="", color=style.TRUTH_COLOUR, markersize=6, label=f"truth ({agent_id})"),
            Line2D([], [], marker="x", linestyle="", color=style.BAD_COLOUR, markersize=7, markeredgewidth=1.6,
                   label="estimate"),
        ]
        site_row = [
            Line2D([], [], marker="^", linestyle="", color=style.ANCHOR_COLOUR, markersize=8, label="anchor"),
            Line2D([], [], color="#555555", linewidth=0.7, label="anchor range, line of sight"),
            Line2D([], [], color="#555555", linewidth=0.7, linestyle="--", label="anchor range, blocked"),
            Line2D([], [], marker="o", linestyle="", markerfacecolor="white", markeredgecolor="#555555",
                   markersize=5, label="peer tag in range"),
            Rectangle((0, 0), 1, 1, facecolor="#ececec", edgecolor="#777777", label="outside the site"),
        ]
        _legend_rows(fig, [belief_row, site_row], loc="outside lower center")
        return style.save(fig, path)


# --------------------------------------------------------------------------- c. error CDF


@dataclass
class Curve:
    label: str
    values_m: np.ndarray  # per agent; +inf allowed (never reached)
    colour: str
    dashed: bool = False


def _cdf_steps(values: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Empirical CDF over all agents (infinite values keep the curve below 1)."""
    v = np.asarray(values, float)
    finite = np.sort(v[np.isfinite(v)])
    return finite, np.arange(1, finite.size + 1) / max(v.size, 1)


def plot_error_cdf(path: Path, curves: list[Curve], title: str) -> Path:
    with style.styled():
        fig = style.new_figure(7.5, 5.0)
        ax = fig.subplots()
        lo = min((float(np.min(c.values_m[np.isfinite(c.values_m) & (c.values_m > 0)]))
                  for c in curves if np.any(np.isfinite(c.values_m) & (c.values_m > 0))), default=1e-2)
        hi = max((float(np.max(c.values_m[np.isfinite(c.values_m)]))
                  for c in curves if np.any(np.isfinite(c.values_m))), default=10.0)
        lo = 10 ** math.floor(math.log10(max(lo, 1e-4)))
        hi = 10 ** math.ceil(math.log10(max(hi, 2.0)))
        for c in curves:
            x, y = _cdf_steps(c.values_m)
            x = np.clip(x, lo, None)
            # Start the step at the left edge, so the curve reads from 0.
            ax.step(np.r_[lo, x, hi], np.r_[0.0, y, y[-1] if y.size else 0.0], where="post", color=c.colour,
                    linestyle="--" if c.dashed else "-", label=c.label)
        ax.axvline(WITHIN_M, color="#111111", linewidth=0.9, linestyle=":", zorder=0)
        ax.text(WITHIN_M * 1.08, 0.03, "1 m", color="#111111", fontsize=9)
        ax.set_xscale("log")
        ax.xaxis.set_major_formatter(lambda v, _: f"{v:g}")
        ax.set_xlim(lo, hi)
        ax.set_ylim(0, 1.02)
        ax.set_xlabel("horizontal error (m), log scale")
        ax.set_ylabel("share of tags with error <= x")
        ax.set_title(title)
        fig.legend(loc="outside lower center", ncol=2)
        return style.save(fig, path)


# --------------------------------------------------------------------------- d. share within 1 m


@dataclass
class Series:
    label: str
    values: list[float]  # per iteration (1-based)
    colour: str


def plot_within_per_iteration(path: Path, series: list[Series], bound_share: float | None, title: str) -> Path:
    with style.styled():
        fig = style.new_figure(7.5, 4.4)
        ax = fig.subplots()
        n_max = max(len(s.values) for s in series)
        for s in series:
            it = np.arange(1, len(s.values) + 1)
            ax.plot(it, s.values, marker="o", markersize=5, color=s.colour, label=s.label)
        if bound_share is not None and math.isfinite(bound_share):
            ax.axhline(bound_share, color=style.BOUND_COLOUR, linestyle="--", linewidth=1.2,
                       label=f"bound: share with PEB <= 1 m ({bound_share:.0%})")
        ax.set_xticks(np.arange(1, n_max + 1))
        ax.set_xlim(0.7, n_max + 0.3)
        ax.set_ylim(0, 1.05)
        ax.yaxis.set_major_formatter(lambda v, _: f"{v:.0%}")
        ax.set_xlabel("iteration")
        ax.set_ylabel("tags within 1 m")
        ax.set_title(title)
        fig.legend(loc="outside lower center", ncol=2)
        return style.save(fig, path)
