"""report.md of a baseline check: what moved, by how much, where; with pictures.

Plain arrays in, Markdown and PNG files out; nothing here runs an engine.
"""

from __future__ import annotations

import math
from pathlib import Path

import matplotlib as mpl
import numpy as np
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure

from ..harness import tolerances as tol
from .check import CHECKS, CheckResult, ScenarioCheck
from .diff import NOT_JUDGED, TOLERANCE_FIGURES, Moved, figure_of

# Pictures are drawn on a bare Figure with the Agg canvas (pyplot's global
# state untouched).  peerfix.report.style is not imported: importing it runs
# peerfix/report/__init__.py, which loads the whole demo.
DPI = 130
BAD_COLOUR = "#c8372d"
REFERENCE_COLOUR = "#1f5fa6"
LIMIT_COLOUR = "#444444"
ANCHOR_COLOUR = "#222222"
_RC = {"axes.grid": True, "axes.axisbelow": True, "grid.color": "#e6e6e6", "axes.spines.top": False, "axes.spines.right": False, "font.size": 9}


def _new_figure(width_in: float, height_in: float) -> Figure:
    fig = Figure(figsize=(width_in, height_in), dpi=DPI, layout="constrained")
    FigureCanvasAgg(fig)
    return fig


def _save(fig: Figure, path: Path) -> Path:
    with mpl.rc_context(_RC):
        fig.savefig(path, dpi=DPI, facecolor="white")
    return path


MAP_LABELS = 20  # moved agents named on the map, largest first
MOVED_ROWS = 25  # largest changes listed per scenario (all of them are in the JUnit failure text)


def _fmt(x) -> str:
    if x is None:
        return "–"
    if isinstance(x, bool):
        return "yes" if x else "no"
    if isinstance(x, float):
        if not math.isfinite(x):
            return "–"
        return f"{x:.6g}"
    return str(x)


# --------------------------------------------------------------------------- pictures


def plot_moved_histogram(moved: list[Moved], path: Path, key: str, position_bits: int) -> Path | None:
    """Position changes in LSBs of the core's position format (a bit change is a whole number of them)."""
    lsb = np.array([m.position_lsb for m in moved if m.position_m > 0])
    if not lsb.size:
        return None
    with mpl.rc_context(_RC):
        fig = _new_figure(6.0, 3.4)
        ax = fig.add_subplot()
        top = int(lsb.max())
        if top <= 64:  # one bar per whole LSB
            ax.hist(lsb, bins=np.arange(0.5, top + 1.5), rwidth=0.8, color=BAD_COLOUR)
            ax.set_xlim(0, max(top, 4) + 1)
            ax.xaxis.get_major_locator().set_params(integer=True)
        else:
            ax.hist(lsb, bins=np.geomspace(1, top * 1.001, 30), color=BAD_COLOUR)
            ax.set_xscale("log")
        ax.yaxis.get_major_locator().set_params(integer=True)
        ax.set_xlabel(f"larger of |dx|, |dy|, fixed core now vs baseline (LSB = 2^-{position_bits} m = {1000 / 2**position_bits:.3g} mm)")
        ax.set_ylabel("estimates")
        ax.set_title(f"{key}: {lsb.size} positions moved")
        return _save(fig, path)


def plot_moved_map(sc: ScenarioCheck, path: Path) -> Path | None:
    moved = [m for m in sc.exact.moved if m.position_m > 0] if sc.exact else []
    if not moved:
        return None
    worst: dict[str, Moved] = {}
    for m in moved:
        if m.node_id not in worst or m.position_m > worst[m.node_id].position_m:
            worst[m.node_id] = m
    ref = sc.recorded_fixed
    final = ref.mean_m[-1, -1]
    with mpl.rc_context(_RC):
        fig = _new_figure(6.2, 5.2)
        ax = fig.add_subplot()
        x0, y0, x1, y1 = sc.scenario.site.bounds_m
        ax.set_xlim(x0, x1)
        ax.set_ylim(y0, y1)
        ax.set_aspect("equal")
        still = [i for i, a in enumerate(ref.agent_ids) if a not in worst]
        if still:
            ax.scatter(final[still, 0], final[still, 1], s=10, color="#bbbbbb", label="unchanged agent")
        anchors = np.asarray(sc.scenario.anchor_xy_m)
        ax.scatter(anchors[:, 0], anchors[:, 1], marker="^", s=40, color=ANCHOR_COLOUR, label="anchor")
        w = sorted(worst.values(), key=Moved.largest_first)
        change_mm = [1000.0 * m.position_m for m in w]
        pts = ax.scatter(
            [m.x_m for m in w], [m.y_m for m in w], c=change_mm, cmap="plasma", vmin=0.0, vmax=max(change_mm), s=40,
            edgecolors="black", linewidths=0.5, label="moved agent (at its largest change)", zorder=3,
        )
        for m in w[:MAP_LABELS]:
            ax.annotate(m.node_id, (m.x_m, m.y_m), xytext=(4, 4), textcoords="offset points", fontsize=7)
        fig.colorbar(pts, ax=ax, label="largest position change (mm)")
        ax.set_xlabel("x (m)")
        ax.set_ylabel("y (m)")
        ax.set_title(f"{sc.key}: {len(w)} of {len(ref.agent_ids)} agents moved")
        ax.legend(loc="upper center", bbox_to_anchor=(0.5, -0.12), ncol=3, fontsize=7, frameon=False)
        return _save(fig, path)


def plot_tolerance_histogram(sc: ScenarioCheck, path: Path) -> Path | None:
    rows = sc.tolerance.rows if sc.tolerance else []
    if not rows:
        return None
    last = max(r["iteration"] for r in rows)
    d = np.array([r["position_diff_m"] for r in rows if r["iteration"] == last])
    d = np.maximum(d, 1e-5)  # exact agreement drawn at 10 µm on the log axis
    with mpl.rc_context(_RC):
        fig = _new_figure(6.0, 3.4)
        ax = fig.add_subplot()
        ax.hist(d, bins=np.geomspace(1e-5, max(1.0, float(d.max())) * 1.01, 40), color=REFERENCE_COLOUR)
        ax.set_xscale("log")
        for limit, label in ((tol.POSITION_MEDIAN_M, "median limit"), (tol.POSITION_P99_M, "p99 limit")):
            ax.axvline(limit, color=LIMIT_COLOUR, linestyle="--", linewidth=1.0)
            ax.annotate(label, (limit, 1), xycoords=("data", "axes fraction"), rotation=90, va="top", ha="right", fontsize=8)
        ax.set_xlabel("|fixed core now − float twin recorded|, final iteration (m)")
        ax.set_ylabel("estimates")
        ax.set_title(f"{sc.key}: fixed core against the float reference")
        return _save(fig, path)


# --------------------------------------------------------------------------- markdown


def _summary_table(result: CheckResult) -> list[str]:
    out = ["| scenario | check | result | detail |", "|---|---|---|---|"]
    for sc in result.scenarios:
        for check in CHECKS:
            held = sc.held(check)
            if check == "fixed_bit_exact":
                s = sc.exact.summary()
                detail = sc.exact.shape_error or (
                    "every estimate identical"
                    if held
                    else f"{s['moved']} estimates of {s['agents_moved']} agents differ; largest move {s['position_diff_max_m']:.6f} m"
                )
            else:
                t = sc.tolerance
                parts = ([f"outside: {', '.join(t.regressed)}"] if t.regressed else []) + (
                    [f"outside since record, no worse: {', '.join(t.outside_since_record)}"] if t.outside_since_record else [])
                detail = t.shape_error or ("; ".join(parts) if parts else "all tolerances hold")
            out.append(f"| {sc.key} | {check} | {'pass' if held else '**FAIL**'} | {detail} |")
    for key in result.not_checked:
        out.append(f"| {key} | – | not checked | in the baseline, not given to this check |")
    return out


def _build_section(result: CheckResult) -> list[str]:
    was, now = result.manifest["core"], result.core_now
    out = ["## Core build", "", "| field | recorded | now |", "|---|---|---|"]
    for k in ("library_sha256", "build_stamp", "compiler", "bounds", "c_core_source_sha256", "loaded_via", "library"):
        mark = "" if was.get(k) == now.get(k) else " **(changed)**"
        out.append(f"| {k}{mark} | `{_fmt(was.get(k))}` | `{_fmt(now.get(k))}` |")
    if was.get("build_stamp") is None or now.get("build_stamp") is None:
        out += ["", "A build stamp of – is unknown: an installed module does not carry its build flags (docs/baseline.md)."]
    return out


def _n(count: int, noun: str) -> str:
    return f"{count} {noun}" + ("" if count == 1 else "s")


def _exact_section(sc: ScenarioCheck, pictures: list[tuple[str, str]], position_bits: int) -> list[str]:
    ex = sc.exact
    out = ["### Bit-exact: fixed core now against the fixed core recorded", ""]
    if ex.shape_error:
        return out + [f"**The runs do not line up**: {ex.shape_error}.", ""]
    s = ex.summary()
    if ex.held:
        return out + [f"All {s['compared']} estimates (epochs × stored iterations × agents) are identical.", ""]
    first = s["first_moved"]
    out += [
        f"- estimates that differ: **{s['moved']}** of {s['compared']}, of {_n(s['agents_moved'], 'agent')} in {_n(s['epochs_moved'], 'epoch')}",
        f"- first difference: epoch t_s = {first['t_s']}, iteration {first['iteration']}",
        (
            f"- positions moved: {s['position_moved']}; largest {s['position_diff_max_m']:.6f} m "
            f"({s['position_diff_max_lsb']} LSB of 2^-{position_bits} m), median of the moved {s['position_diff_median_m']:.6f} m"
        ),
        (
            f"- covariances changed: {s['cov_changed']}; mode weights changed: {s['mode_weight_changed']}; "
            f"mode counts changed: {s['mode_count_changed']}; component counts changed: {s['components_changed']}"
        ),
        "",
        f"Largest changes (up to {MOVED_ROWS}; the JUnit file lists up to 50):",
        "",
        "| t_s | agent | iteration | dx (m) | dy (m) | moved (m) | moved (LSB) | cov (LSB) | mode weight (LSB) | modes | components |",
        "|---|---|---|---|---|---|---|---|---|---|---|",
    ]
    for m in sorted(ex.moved, key=Moved.largest_first)[:MOVED_ROWS]:
        out.append(
            f"| {m.t_s} | {m.node_id} | {m.iteration} | {m.dx_m:+.6f} | {m.dy_m:+.6f} | {m.position_m:.6f} | {m.position_lsb} | "
            f"{m.cov_lsb} | {m.mode_weight_lsb} | {m.mode_count[0]}→{m.mode_count[1]} | {m.components[0]}→{m.components[1]} |"
        )
    out.append("")
    for file, caption in pictures:
        out += [f"![{caption}]({file})", ""]
    return out


def _tolerance_section(sc: ScenarioCheck, pictures: list[tuple[str, str]]) -> list[str]:
    t = sc.tolerance
    out = ["### Within tolerance: fixed core now against the float twin recorded", ""]
    if t.shape_error:
        return out + [f"**The runs do not line up**: {t.shape_error}.", ""]
    at_record = sc.entry.get("tolerance_at_record", {})
    out += [
        "Over the final iteration of every epoch; limits from `peerfix/harness/tolerances.py`.",
        "",
        "| tolerance | limit | at record | now | held |",
        "|---|---|---|---|---|",
    ]
    for name in t.summary["verdict"]:
        _, limit, limit_name, sense = TOLERANCE_FIGURES.get(name, (None, None, name, ""))
        rec, now = figure_of(at_record, name), figure_of(t.summary, name)
        bound = f"{'≤' if sense == 'max' else '≥'} {limit:g} (`{limit_name}`)" if limit is not None else "–"
        if name in NOT_JUDGED:
            held = "not judged (needs beliefs, not stored)"
        elif t.verdict[name]:
            held = "yes"
        else:
            held = "no, as at record (no worse)" if name in t.outside_since_record else "**NO**"
        out.append(f"| {name} | {bound} | {_fmt(rec)} | {_fmt(now)} | {held} |")
    out.append("")
    for file, caption in pictures:
        out += [f"![{caption}]({file})", ""]
    return out


def write_report(result: CheckResult, out: Path) -> Path:
    """report.md and plots/ in `out`; returns the report's path."""
    out.mkdir(parents=True, exist_ok=True)
    plots = out / "plots"
    plots.mkdir(exist_ok=True)
    for pattern in ("*-moved-histogram.png", "*-moved-map.png", "*-against-float.png"):
        for stale in plots.glob(pattern):  # pictures of an earlier check must not pass for this one's
            stale.unlink()
    m = result.manifest
    verdict = "all checks hold" if result.passed else "REGRESSION"
    lines = [
        f"# Baseline check: {verdict}",
        "",
        f"- baseline: `{result.baseline}`, recorded {m.get('created_utc')} with peerfix {m.get('peerfix_version')}",
        f"- settings (recorded, used): {', '.join(f'{k}={v}' for k, v in result.settings.as_dict().items() if k != 'params')}",
        f"- estimator parameters: {', '.join(f'{k}={v}' for k, v in result.settings.params.as_dict().items())}",
        "",
        "## Summary",
        "",
        *_summary_table(result),
        "",
        *_build_section(result),
        "",
    ]
    for sc in result.scenarios:
        lines += [f"## Scenario {sc.key}", "", f"`{sc.folder}`: {_n(len(sc.scenario.agent_ids), 'agent')}, {_n(len(sc.reference.t_s), 'epoch')}.", ""]
        pics = []
        if sc.exact and sc.exact.moved:
            h = plot_moved_histogram(sc.exact.moved, plots / f"{sc.key}-moved-histogram.png", sc.key, int(m["q_formats"]["position"]))
            if h:
                pics.append((f"plots/{h.name}", "histogram of position changes"))
            mp = plot_moved_map(sc, plots / f"{sc.key}-moved-map.png")
            if mp:
                pics.append((f"plots/{mp.name}", "map of the agents that moved"))
        lines += _exact_section(sc, pics, int(m["q_formats"]["position"]))
        tp = plot_tolerance_histogram(sc, plots / f"{sc.key}-against-float.png")
        lines += _tolerance_section(sc, [(f"plots/{tp.name}", "fixed core against the float reference")] if tp else [])
    path = out / "report.md"
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return path
