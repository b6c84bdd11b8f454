"""Tracking over many epochs: errors per epoch, and two pictures.

    t, est = estimates_per_epoch(result)            (E,), (E, N, 2); NaN where the tag took no part
    truth = truth_per_epoch(scenario, t)            (E, N, 2); NaN where the tag has no truth row
    err = track_errors(est, truth)                  (E, N) horizontal error, NaN where not scored
    plot_tracks(path, scenario, t, truth, [TrackRun(...), ...], agents, title)
    plot_error_over_time(path, t, [ErrorSeries(...), ...], title, events)

An agent is scored at an epoch when it took part (it had ranges) and has a
true position there; the figures pool every scored (agent, epoch).
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np
from matplotlib.lines import Line2D

from ..runner import RunResult
from ..scenario.model import RangeTable, Scenario, Truth
from . import style
from .plots import _draw_bounds, _draw_obstacles
from .site import obstacle_noun, obstacle_rects

TRUTH_COLOUR = "#222222"
ENGINE_COLOURS = {"fixed": "#1f5fa6", "float": "#e08a1e"}


# --------------------------------------------------------------------------- numbers


def estimates_per_epoch(result: RunResult) -> tuple[np.ndarray, np.ndarray]:
    """Epoch times and the final-iteration estimate of every agent per epoch.

    NaN where the agent did not take part in the epoch (EpochRecord.present).
    """
    t = np.array([e.t_s for e in result.epochs], float)
    n = len(result.scenario.agent_ids)
    est = np.full((len(t), n, 2), np.nan)
    for k, epoch in enumerate(result.epochs):
        mean = epoch.iterations[-1].mean
        present = getattr(epoch, "present", None)
        if present is None:
            est[k] = mean
        else:
            est[k, present] = mean[present]
    return t, est


def truth_per_epoch(scenario: Scenario, t_s: np.ndarray) -> np.ndarray:
    """(E, N, 2) true position of every agent at each epoch time (exact t_s match); NaN where none."""
    t_s = np.asarray(t_s, float)
    out = np.full((len(t_s), len(scenario.agent_ids), 2), np.nan)
    truth = scenario.truth
    if truth is None or len(t_s) == 0:
        return out
    index = {a: i for i, a in enumerate(scenario.agent_ids)}
    col = np.array([index.get(node, -1) for node in truth.node_id])
    k = np.clip(np.searchsorted(t_s, truth.t_s), 0, len(t_s) - 1)
    ok = (col >= 0) & (t_s[k] == truth.t_s)
    out[k[ok], col[ok]] = truth.xy_m[ok]
    return out


def track_errors(est: np.ndarray, truth: np.ndarray) -> np.ndarray:
    """(E, N) horizontal error; NaN where the estimate or the truth is missing."""
    return np.hypot(est[..., 0] - truth[..., 0], est[..., 1] - truth[..., 1])


def per_epoch_quantiles(err: np.ndarray, q: tuple[float, ...] = (50.0, 90.0)) -> np.ndarray:
    """(len(q), E) percentiles over the scored agents of each epoch (NaN for an epoch with none)."""
    out = np.full((len(q), err.shape[0]), np.nan)
    scored = np.isfinite(err).any(axis=1)
    if scored.any():
        out[:, scored] = np.nanpercentile(err[scored], q, axis=1)
    return out


LOST_M = 3.0  # an error above this counts as a lost track in the figures


def error_figures(err: np.ndarray) -> dict:
    """RMSE, median, p90 and the share above LOST_M over every scored (agent, epoch), and how many there are.

    The share above LOST_M tells a heavy tail (a few lost tracks) from a uniformly poor fit:
    the RMSE weighs the tail most.
    """
    e = err[np.isfinite(err)]
    if e.size == 0:
        return {"scored": 0, "rmse_m": None, "median_m": None, "p90_m": None, "share_above_3m": None}
    return {
        "scored": int(e.size),
        "rmse_m": float(np.sqrt(np.mean(e**2))),
        "median_m": float(np.median(e)),
        "p90_m": float(np.percentile(e, 90)),
        "share_above_3m": float(np.mean(e > LOST_M)),
    }


def lost_tracks(err: np.ndarray, t_s: np.ndarray, min_s: float = 5.0, lost_m: float = LOST_M) -> list[dict]:
    """Spans where one agent's error stays above lost_m for at least min_s (epochs it is absent
    from end a span): [{"agent": index, "start_s", "duration_s", "max_error_m"}], by start time."""
    t_s = np.asarray(t_s, float)
    step = float(np.median(np.diff(t_s))) if len(t_s) > 1 else 0.0
    out = []
    for i in range(err.shape[1]):
        above = np.concatenate([[False], err[:, i] > lost_m, [False]])  # NaN compares False
        edges = np.flatnonzero(np.diff(above.astype(np.int8)))
        for a, b in zip(edges[::2], edges[1::2]):  # epochs a .. b-1 are above
            duration = float(t_s[b - 1] - t_s[a]) + step
            if duration >= min_s:
                out.append({"agent": i, "start_s": float(t_s[a]), "duration_s": duration,
                            "max_error_m": float(np.max(err[a:b, i]))})
    return sorted(out, key=lambda d: (d["start_s"], d["agent"]))


def difference_figures(est_a: np.ndarray, est_b: np.ndarray) -> dict:
    """|a - b| between two engines' estimates where both exist: median, p90, max."""
    d = track_errors(est_a, est_b)
    d = d[np.isfinite(d)]
    if d.size == 0:
        return {"compared": 0, "median_m": None, "p90_m": None, "max_m": None}
    return {"compared": int(d.size), "median_m": float(np.median(d)), "p90_m": float(np.percentile(d, 90)),
            "max_m": float(np.max(d))}


def slice_scenario(scenario: Scenario, end_s: float) -> Scenario:
    """The scenario's ranges and truth with t_s < end_s (the first part of a recording)."""
    from dataclasses import replace

    r = scenario.ranges
    keep = np.flatnonzero(np.asarray(r.t_s) < end_s)
    ranges = RangeTable(
        t_s=np.asarray(r.t_s)[keep],
        node_a=[r.node_a[i] for i in keep],
        node_b=[r.node_b[i] for i in keep],
        range_m=np.asarray(r.range_m)[keep],
        extra={name: [v[i] for i in keep] for name, v in r.extra.items()},
        line=None if r.line is None else np.asarray(r.line)[keep],
    )
    truth = scenario.truth
    if truth is not None:
        tk = np.flatnonzero(np.asarray(truth.t_s) < end_s)
        truth = Truth(t_s=np.asarray(truth.t_s)[tk], node_id=[truth.node_id[i] for i in tk], xy_m=truth.xy_m[tk],
                      extra={name: [v[i] for i in tk] for name, v in truth.extra.items()})
    return replace(scenario, ranges=ranges, truth=truth)


def track_agents(scenario: Scenario, truth: np.ndarray, count: int = 4) -> list[int]:
    """Agents worth drawing: one per role first (the one that moves most), then the
    late joiner and the early leaver when the simulation names them, then the
    next most moving; at most `count`, in agent order."""
    moved = np.nansum(np.hypot(*np.diff(truth, axis=0).transpose(2, 0, 1)), axis=0)
    roles = scenario.agent_extra.get("role") or ["tag"] * len(scenario.agent_ids)
    sim = scenario.site.extra.get("simulation") or {}
    index = {a: i for i, a in enumerate(scenario.agent_ids)}
    picked: list[int] = []

    def add(i: int) -> None:
        if i not in picked and len(picked) < count and np.isfinite(truth[:, i, 0]).sum() > 1:
            picked.append(i)

    for role in dict.fromkeys(roles):
        members = [i for i, r in enumerate(roles) if r == role]
        add(max(members, key=lambda i: moved[i]))
    for key in ("late_joiners", "early_leavers"):
        for a in sim.get(key, [])[:1]:
            if a in index:
                add(index[a])
    for i in np.argsort(-moved):
        add(int(i))
    return sorted(picked)


# --------------------------------------------------------------------------- pictures


@dataclass
class TrackRun:
    """One engine's estimates for the track picture."""

    label: str
    colour: str
    est_xy: np.ndarray  # (E, N, 2), NaN where absent
    dashed: bool = False


def plot_tracks(
    path: Path,
    scenario: Scenario,
    t_s: np.ndarray,
    truth: np.ndarray,
    runs: list[TrackRun],
    agents: list[int],
    title: str,
    min_half_m: float = 6.0,
) -> Path:
    """One panel per agent: its true path and each engine's estimates over t_s, on the site map,
    zoomed to the path (at least a 2 * min_half_m square) at true scale."""
    roles = scenario.agent_extra.get("role") or ["tag"] * len(scenario.agent_ids)
    n = len(agents)
    ncols = 2 if n > 1 else 1
    nrows = int(np.ceil(n / ncols))
    with style.styled():
        fig = style.new_figure(5.2 * ncols + 0.3, 4.6 * nrows + 0.9)
        axes = fig.subplots(nrows, ncols, squeeze=False)
        for k, ax in enumerate(axes.ravel()):
            if k >= n:
                ax.set_axis_off()
                continue
            i = agents[k]
            path_xy = truth[:, i]
            seen = np.isfinite(path_xy[:, 0])
            _draw_bounds(ax, scenario)
            _draw_obstacles(ax, scenario, label=False)
            ax.scatter(scenario.anchor_xy_m[:, 0], scenario.anchor_xy_m[:, 1], marker="^", s=50,
                       color=style.ANCHOR_COLOUR, edgecolor="white", zorder=6, clip_on=True)
            ax.plot(path_xy[:, 0], path_xy[:, 1], color=TRUTH_COLOUR, linewidth=2.4, alpha=0.35, zorder=3,
                    solid_capstyle="round")
            for run in runs:
                xy = run.est_xy[:, i]
                ax.plot(xy[:, 0], xy[:, 1], color=run.colour, linewidth=1.0, zorder=4,
                        linestyle=(0, (3, 2)) if run.dashed else "-")
            first, last = np.flatnonzero(seen)[[0, -1]]
            ax.scatter(*path_xy[first], marker="o", s=36, color="white", edgecolor=TRUTH_COLOUR, zorder=7,
                       linewidths=1.2)
            ax.scatter(*path_xy[last], marker="s", s=30, color=TRUTH_COLOUR, zorder=7)
            lo, hi = np.nanmin(path_xy, axis=0), np.nanmax(path_xy, axis=0)
            centre, half = (lo + hi) / 2, max(float(np.max(hi - lo)) / 2 + 1.5, min_half_m)
            ax.set_xlim(centre[0] - half, centre[0] + half)
            ax.set_ylim(centre[1] - half, centre[1] + half)
            ax.set_aspect("equal")
            ax.grid(False)
            ax.set_title(f"{scenario.agent_ids[i]} ({roles[i]}), "
                         f"{t_s[first]:.0f}-{t_s[last]:.0f} s", fontsize=10)
            ax.set_xlabel("x (m)")
            ax.set_ylabel("y (m)")
        fig.suptitle(title, fontsize=12, fontweight="bold", x=0.01, ha="left")
        handles = [Line2D([], [], color=TRUTH_COLOUR, linewidth=2.4, alpha=0.35, label="true path")]
        handles += [Line2D([], [], color=r.colour, linewidth=1.0, linestyle=(0, (3, 2)) if r.dashed else "-",
                           label=r.label) for r in runs]
        handles += [
            Line2D([], [], marker="o", linestyle="", markerfacecolor="white", markeredgecolor=TRUTH_COLOUR,
                   markersize=6, label="first epoch"),
            Line2D([], [], marker="s", linestyle="", color=TRUTH_COLOUR, markersize=5, label="last epoch"),
            Line2D([], [], marker="^", linestyle="", color=style.ANCHOR_COLOUR, markersize=7, label="anchor"),
        ]
        for name in obstacle_rects(scenario):
            from matplotlib.patches import Rectangle

            handles.append(Rectangle((0, 0), 1, 1, facecolor=style.RACK_FACE, edgecolor=style.RACK_EDGE,
                                     label=obstacle_noun(name)))
        fig.legend(handles=handles, loc="outside lower center", ncol=min(len(handles), 4))
        return style.save(fig, path)


def _step_s(t_s: np.ndarray) -> float:
    d = np.diff(np.asarray(t_s, float))
    return float(np.median(d)) if d.size else 1.0


def _running_mean(x: np.ndarray, w: int) -> np.ndarray:
    """Centred running mean over w samples, ignoring NaN (NaN where the window holds none)."""
    if w <= 1:
        return x
    ok = np.isfinite(x)
    kernel = np.ones(w)
    num = np.convolve(np.where(ok, x, 0.0), kernel, mode="same")
    den = np.convolve(ok.astype(float), kernel, mode="same")
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(den > 0, num / den, np.nan)


@dataclass
class ErrorSeries:
    """One engine's errors for the error-over-time picture."""

    label: str
    colour: str
    t_s: np.ndarray  # (E,)
    err_m: np.ndarray  # (E, N)


def plot_error_over_time(
    path: Path,
    series: list[ErrorSeries],
    title: str,
    events: list[tuple[float, str]] = (),
    window_s: float | None = None,
    smooth_s: float = 0.0,
) -> Path:
    """Median and 90th percentile of the error over the scored agents, per epoch; a second
    panel with the number of tags scored.  events: (t_s, label) drawn as dotted lines.
    window_s: a time up to which every series exists (shaded), when one series is shorter.
    smooth_s: the bold lines are running means of the per-epoch values over this long (0: none)."""
    with style.styled():
        fig = style.new_figure(9.0, 5.6)
        ax, count_ax = fig.subplots(2, 1, sharex=True, gridspec_kw={"height_ratios": [3.2, 1.0]})
        top = 0.0
        for s in series:
            med, p90 = per_epoch_quantiles(s.err_m)
            # Per-epoch values drawn faintly; the bold lines are their running mean over smooth_s.
            w = max(1, int(round(smooth_s / _step_s(s.t_s)))) if smooth_s else 1
            ax.plot(s.t_s, med, color=s.colour, linewidth=0.5, alpha=0.3)
            ax.plot(s.t_s, _running_mean(p90, w), color=s.colour, linewidth=1.0, linestyle=(0, (3, 2)),
                    label=f"{s.label}: p90 over tags")
            ax.plot(s.t_s, _running_mean(med, w), color=s.colour, linewidth=1.4, label=f"{s.label}: median over tags")
            if np.isfinite(p90).any():
                top = max(top, float(np.nanpercentile(p90, 99)))
            count_ax.plot(s.t_s, np.isfinite(s.err_m).sum(axis=1), color=s.colour, linewidth=1.0,
                          drawstyle="steps-post")
        for t, label in events:
            for a in (ax, count_ax):
                a.axvline(t, color="#555555", linewidth=0.8, linestyle=":", zorder=0)
            ax.text(t, 1.0, f" {label}", transform=ax.get_xaxis_transform(), fontsize=8, color="#555555",
                    va="top", ha="left", rotation=0)
        if window_s is not None:
            ax.axvspan(series[0].t_s[0] if len(series[0].t_s) else 0.0, window_s, color="#f1ead9", zorder=0,
                       linewidth=0)
        ax.set_ylim(0, max(top * 1.1, 0.1))
        ax.set_ylabel("horizontal error (m)")
        ax.set_title(title)
        count_ax.set_ylabel("tags scored")
        count_ax.set_xlabel("time (s)")
        count_ax.set_ylim(bottom=0)
        fig.legend(loc="outside lower center", ncol=2)
        return style.save(fig, path)


# --------------------------------------------------------------------------- one run


RUN_PICTURES = {"tracks": "tracks.png", "error_over_time": "error_over_time.png"}


def write_run_pictures(result: RunResult, out: Path) -> dict[str, Path]:
    """`peerfix run --plots`: tracks against truth and error over time for one run.

    Needs truth for the epochs run and at least two epochs; otherwise nothing is
    written and the reason is raised as ValueError (the caller reports it).
    """
    scenario = result.scenario
    t, est = estimates_per_epoch(result)
    if len(t) < 2:
        raise ValueError("tracks need at least two epochs; this run has " + str(len(t)))
    truth = truth_per_epoch(scenario, t)
    if not np.isfinite(truth).any():
        raise ValueError("the scenario has no truth at the epochs run (truth.csv)")
    out = Path(out)
    out.mkdir(parents=True, exist_ok=True)
    label = f"{result.engine} engine"
    colour = ENGINE_COLOURS.get(result.engine, "#1f5fa6")
    agents = track_agents(scenario, truth)
    written = {
        "tracks": plot_tracks(out / RUN_PICTURES["tracks"], scenario, t, truth, [TrackRun(label, colour, est)],
                              agents, f"{scenario.site.name}: tracks of {len(agents)} tags"),
        "error_over_time": plot_error_over_time(
            out / RUN_PICTURES["error_over_time"], [ErrorSeries(label, colour, t, track_errors(est, truth))],
            f"{scenario.site.name}: error over time ({len(result.epochs[0].iterations)} iteration(s) per epoch)",
            smooth_s=max(float(t[-1] - t[0]) / 120.0, 0.0)),
    }
    return written
