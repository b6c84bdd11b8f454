"""report.md of a demo: site, final metrics per run, pictures, per-iteration table.

Every number comes from the runs' metrics documents (what metrics.json holds),
formatted in one place so the report and the files cannot drift apart.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

CAUTION = (
    "**Caution.** These estimates come from a simulation and an estimator under development; "
    "they are not a certified safety function. For collision warnings, geofences or any other "
    "use that protects people, defer to local codes and functional-safety practice."
)


@dataclass
class RunSection:
    name: str  # folder name under runs/
    label: str  # what the reader sees
    final: dict  # final-iteration metrics (metrics.json "final")
    iterations: list[dict]  # metrics per iteration of the last epoch


@dataclass
class Picture:
    file: str  # relative to the report
    heading: str
    caption: str  # one sentence: what to look at


def share(x) -> str:
    """A share as a percentage with one decimal; n/a for a missing figure (NaN is written as null)."""
    return "n/a" if x is None or (isinstance(x, float) and not math.isfinite(x)) else f"{100.0 * x:.1f}%"


def metres(x) -> str:
    return "n/a" if x is None or (isinstance(x, float) and not math.isfinite(x)) else f"{x:.3f}"


def site_paragraph(facts: dict) -> str:
    parts = [f"The site `{facts['site']}` is a {facts['width_m']:g} m x {facts['height_m']:g} m area"]
    obstacles = facts.get("obstacles") or {}
    if obstacles:
        listed = ", ".join(f"{n} {name.removesuffix('_m').replace('_', ' ')}" for name, n in obstacles.items())
        parts[0] += f" with {listed} (grey in the pictures); a radio path through one is blocked"
    parts[0] += "."
    parts.append(
        f"{facts['anchors']} anchors at known positions and {facts['agents']} tags measure "
        f"{facts['ranges']} ranges (radio range {facts['radio_range_m']:g} m, line-of-sight error "
        f"{100 * facts['sigma_m']:g} cm standard deviation); a tag ranges with {facts['mean_agent_degree']:g} "
        "nodes on average."
    )
    if facts.get("has_blocked_flags"):
        parts.append(
            f"{share(facts['blocked_share'])} of all ranges are on a blocked path, so they read long; "
            f"{facts['agents_lt3_los_anchor_neighbours']} of the {facts['agents']} tags have fewer than three "
            f"anchors in line of sight and {facts['agents_lt3_anchor_neighbours']} fewer than three anchors in "
            "radio range at all."
        )
    return " ".join(parts)


def metrics_table(runs: list[RunSection]) -> list[str]:
    lines = [
        "| run | within 1 m | RMSE (m) | p90 error (m) | 95% coverage | bound RMS (m) |",
        "|---|---:|---:|---:|---:|---:|",
    ]
    for r in runs:
        f = r.final
        lines.append(
            f"| {r.label} (`runs/{r.name}`) | {share(f.get('fraction_within_1m'))} | {metres(f.get('rmse_m'))} | "
            f"{metres(f.get('error_p90_m'))} | {share(f.get('coverage_95'))} | {metres(f.get('peb_rms_m'))} |"
        )
    return lines


def iteration_table(runs: list[RunSection]) -> list[str]:
    head = ["iteration"] + [f"within 1 m, {r.label}" for r in runs] + [f"RMSE (m), {r.label}" for r in runs]
    lines = ["| " + " | ".join(head) + " |", "|---" + "|---:" * (len(head) - 1) + "|"]
    n = max(len(r.iterations) for r in runs)
    for k in range(n):
        row = [str(k + 1)]
        row += [share(r.iterations[k].get("fraction_within_1m")) if k < len(r.iterations) else "" for r in runs]
        row += [metres(r.iterations[k].get("rmse_m")) if k < len(r.iterations) else "" for r in runs]
        lines.append("| " + " | ".join(row) + " |")
    return lines


def render_report(
    title: str,
    facts: dict,
    runs: list[RunSection],
    pictures: list[Picture],
    command: str,
    notes: list[str],
) -> str:
    """The whole report as Markdown text."""
    out = [f"# {title}", "", site_paragraph(facts), ""]
    out += ["## Final iteration", ""]
    out += metrics_table(runs)
    out += [
        "",
        "*within 1 m*: share of tags with a horizontal error of at most 1 m; *95% coverage*: share whose "
        "true position lies inside the 95% ellipse the tag reports; *bound RMS*: root mean square of the "
        "position error bound (Cramer-Rao, line-of-sight model) over the tags with a finite bound, for the "
        "ranges the run used (cooperative runs: all ranges; anchors-only: anchor ranges only).",
        "",
    ]
    for note in notes:
        out += [note, ""]
    out += ["## Pictures", ""]
    for p in pictures:
        out += [f"### {p.heading}", "", f"![{p.heading}]({p.file})", "", p.caption, ""]
    out += ["## Per iteration", ""]
    out += iteration_table(runs)
    out += ["", "## Reproduce", "", "```", command, "```", "", CAUTION, ""]
    return "\n".join(out)
