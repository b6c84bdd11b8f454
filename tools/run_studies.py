#!/usr/bin/env python3
"""Run the robustness studies (campaigns/*.toml) and write docs/studies.md.

    python tools/run_studies.py                  # every study but the 1,000-network one
    python tools/run_studies.py --scale          # the 1,000-network campaign too
    python tools/run_studies.py --docs-only      # only rewrite docs/studies.md from stored cells
    python tools/run_studies.py --only packet-loss components

Cells are stored under build/studies/<campaign>/ (the same folders as
`peerfix sweep campaigns/<campaign>.toml --out build/studies/<campaign>`), so a
rerun only runs what is missing.  The component study joins the target cycles
per K of `peerfix budget --json` (run once through the library and kept in
build/studies/budget.json; --budget-json FILE uses another).
"""

from __future__ import annotations

import argparse
import json
import math
import shutil
import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
try:
    import peerfix  # noqa: F401  (the installed package, e.g. the sanitizer's build)
except ImportError:  # a checkout without an install
    sys.path.insert(0, str(ROOT / "python"))

from peerfix.campaign import expand, load_spec, run_campaign, stored_results, summarise, summarise_iterations  # noqa: E402
from peerfix.campaign.execute import manifest_results, read_runs, write_outputs  # noqa: E402

SCALE = "open-field-1000"
ORDER = ["blocked-share", "robust-tuning", "robust-ring", "robust-spread", "robust-spread-heldout", "blocked-engines",
         "packet-loss", "density", "anchors",
         "convergence", "convergence-loss",
         "tempering", "components", "acquisition-cost", SCALE]
OUT = ROOT / "build" / "studies"
DOC = ROOT / "docs" / "studies.md"


# ---- formatting -------------------------------------------------------------------------


def f3(x) -> str:
    return "-" if x is None or (isinstance(x, float) and math.isnan(x)) else f"{x:.3f}"


def f2(x) -> str:
    return "-" if x is None or (isinstance(x, float) and math.isnan(x)) else f"{x:.2f}"


def f1(x) -> str:
    return "-" if x is None or (isinstance(x, float) and math.isnan(x)) else f"{x:.1f}"


def pct(x) -> str:
    return f"{100 * x:.0f} %"


def yes(b) -> str:
    return "yes" if b else "no"


def table(head: list[str], rows: list[list[str]]) -> list[str]:
    align = ["---:" if h[:1].isdigit() or h not in ("preset", "schedule", "engine") else "---" for h in head]
    out = ["| " + " | ".join(head) + " |", "|" + "|".join(align) + "|"]
    out += ["| " + " | ".join(r) + " |" for r in rows]
    return out


def command(name: str) -> str:
    return f"`peerfix sweep campaigns/{name}.toml --out build/studies/{name}`"


def header(spec, lines: list[str]) -> None:
    lines += [f"## {spec.name}", "", spec.description[:1].upper() + spec.description[1:] + ".", "",
              f"Command: {command(spec.name)} ({spec.cell_count()} cells: "
              f"{len(spec.seeds)} networks (seeds) x {len(spec.engines)} engine(s) x settings; "
              f"engine {', '.join(spec.engines)}). Figures (written by the same run, not kept in the repository): "
              + ", ".join(f"`build/studies/{spec.name}/plots/{p.y}_vs_{p.x}.png`" for p in spec.plots) + ".", ""]


# ---- one section per study --------------------------------------------------------------


def blocked_share(spec, results, lines, headline):
    rows = summarise(results, ["blocked_probability", "robust", "iterations"])
    base = {r["iterations"]: r for r in rows if r["blocked_probability"] == 0.0 and not r["robust"]}
    body = []
    for r in rows:
        b = base[r["iterations"]]
        ratio = r["error_p90_m_pooled"] / b["error_p90_m_pooled"]
        body.append([pct(r["blocked_probability"]), yes(r["robust"]), str(r["iterations"]), str(r["networks"]),
                     f3(r["fraction_within_1m"]), f3(r["fraction_within_1m_min"]), f3(r["error_p90_m_pooled"]),
                     f2(ratio), f3(r["rmse_within_1m_m_pooled"]), f3(r["coverage_95"])])
        if r["blocked_probability"] == 0.2 and r["robust"]:
            headline.append((f"blocked paths on 20 % of ranges (bias mean 1 m), robust likelihood, {r['iterations']} iterations: "
                             f"90th-percentile error {f3(r['error_p90_m_pooled'])} m against {f3(b['error_p90_m_pooled'])} m "
                             f"line of sight only: ratio {f2(ratio)} (target <= 2)", command(spec.name)))
    lines += table(["blocked share", "robust", "iterations", "networks", "within 1 m", "worst network", "p90 error (m)",
                    "p90 / line of sight", "RMSE within 1 m (m)", "95 % coverage"], body)
    lines += ["", "p90 error and RMSE within 1 m are pooled over all agents of all networks; the ratio is against "
              "blocked share 0 with the standard likelihood at the same iterations.", ""]


def packet_loss(spec, results, lines, headline):
    rows = summarise(results, ["channel_packet_loss", "hold_last_heard"])
    body = [[pct(r["channel_packet_loss"]), yes(r["hold_last_heard"]), str(r["networks"]), f3(r["fraction_within_1m"]),
             f3(r["fraction_within_1m_min"]), f3(r["error_p90_m_pooled"]), f3(r["rmse_within_1m_m_pooled"]),
             f3(r["coverage_95"]), f1(r["frames_lost"])] for r in rows]
    lines += table(["broadcasts lost", "hold last heard", "networks", "within 1 m (8 it.)", "worst network",
                    "p90 error (m)", "RMSE within 1 m (m)", "95 % coverage", "deliveries lost per network"], body)
    its = summarise_iterations(results, ["channel_packet_loss", "hold_last_heard"])
    n_it = max(r["iteration"] for r in its)
    lines += ["", "Share within 1 m after each iteration (mean over networks):", ""]
    body = []
    for (loss, hold) in sorted({(r["channel_packet_loss"], r["hold_last_heard"]) for r in its}):
        mine = {r["iteration"]: r for r in its if r["channel_packet_loss"] == loss and r["hold_last_heard"] == hold}
        body.append([pct(loss), yes(hold)] + [f3(mine[k]["fraction_within_1m"]) for k in range(1, n_it + 1)])
    lines += table(["lost", "hold"] + [str(k) for k in range(1, n_it + 1)], body)
    lines += ["", "Loss is on the channel between nodes (peerfix.channel): a receiver misses a belief broadcast; every "
              "range is still measured.", ""]
    for r in rows:
        if r["channel_packet_loss"] == 0.3:
            headline.append((f"30 % of broadcasts lost, 8 iterations{', holding the last heard broadcast' if r['hold_last_heard'] else ''}: "
                             f"share within 1 m {f3(r['fraction_within_1m'])} (worst network {f3(r['fraction_within_1m_min'])}; "
                             "target >= 0.95)", command(spec.name)))


def density(spec, results, lines, headline):
    rows = summarise(results, ["agents"])
    body = [[str(r["agents"]), str(r["networks"]), f3(r["fraction_within_1m"]), f3(r["fraction_within_1m_min"]),
             f3(r["rmse_within_1m_m_pooled"]), f3(r["error_p90_m_pooled"]), f3(r["coverage_95"]),
             f1(r["bytes_per_agent_per_iteration"]), f2(r["run_s"])] for r in rows]
    lines += table(["agents", "networks", "within 1 m", "worst network", "RMSE within 1 m (m)", "p90 error (m)",
                    "95 % coverage", "bytes/agent/iteration", "run s/network"], body)
    lines += [""]


def anchors(spec, results, lines, headline):
    rows = summarise(results, ["anchor_count", "cooperative"])
    body = [[str(r["anchor_count"]), yes(r["cooperative"]), str(r["networks"]), f3(r["fraction_within_1m"]),
             f3(r["fraction_within_1m_min"]), f3(r["rmse_within_1m_m_pooled"]), f3(r["error_p90_m_pooled"]),
             f3(r["coverage_95"])] for r in rows]
    lines += table(["anchors", "cooperative", "networks", "within 1 m", "worst network", "RMSE within 1 m (m)",
                    "p90 error (m)", "95 % coverage"], body)
    lines += ["", "Anchors on a square lattice of cell centres (anchor_rule \"lattice\"); 100 agents, 20 m radio range.", ""]


def _iteration_table(results, by, lines):
    its = summarise_iterations(results, by)
    n_it = max(r["iteration"] for r in its)
    finals = {tuple(r[c] for c in by): r for r in summarise(results, by)}
    body = []
    for combo in sorted({tuple(r[c] for c in by) for r in its}, key=str):
        mine = {r["iteration"]: r for r in its if tuple(r[c] for c in by) == combo}
        cells = [str(v) if not isinstance(v, bool) else yes(v) for v in combo]
        body.append(cells + [f3(mine[k]["fraction_within_1m"]) for k in range(1, n_it + 1)]
                    + [f3(finals[combo]["within_1m_drop"])])
    lines += table(by + [str(k) for k in range(1, n_it + 1)] + ["drop"], body)
    lines += ["", "Share within 1 m after each iteration, mean over networks; drop: mean over networks of the best "
              "share minus the final one (> 0: the estimate got worse again).", ""]


def convergence(spec, results, lines, headline):
    _iteration_table(results, ["preset", "schedule", "robust"], lines)


def convergence_loss(spec, results, lines, headline):
    _iteration_table(results, ["preset", "schedule", "hold_last_heard"], lines)


def tempering(spec, results, lines, headline):
    _iteration_table(results, ["preset", "channel_packet_loss", "broadcast_inflation"], lines)


def generic(spec, results, lines, headline):
    """A table of any campaign: one row per combination of its swept settings (and engine)."""
    by = list(spec.swept) + (["engine"] if len(spec.engines) > 1 else [])
    rows = summarise(results, by)
    body = [[yes(r[c]) if isinstance(r[c], bool) else str(r[c]) for c in by]
            + [str(r["networks"]), f3(r["fraction_within_1m"]), f3(r["fraction_within_1m_min"]),
               f3(r["error_p90_m_pooled"]), f3(r["rmse_within_1m_m_pooled"]), f3(r["coverage_95"]), f3(r["run_s"])]
            for r in rows]
    lines += table(by + ["networks", "within 1 m", "worst network", "p90 error (m)", "RMSE within 1 m (m)",
                         "95 % coverage", "run s/network"], body)
    lines += ["", "p90 error and RMSE within 1 m pooled over all agents of all networks.", ""]


def acquisition_cost(spec, results, lines, headline):
    generic(spec, results, lines, headline)
    rows = summarise(results, ["preset", "product_gate_sigma2", "merge_gate_sigma2", "iterations"])
    for preset in dict.fromkeys(r["preset"] for r in rows):
        for it in sorted({r["iterations"] for r in rows}):
            at = {(r["product_gate_sigma2"], r["merge_gate_sigma2"]): r for r in rows
                  if r["preset"] == preset and r["iterations"] == it}
            if (16.0, 9.0) in at and (9.0, 9.0) in at:
                a, b = at[(16.0, 9.0)], at[(9.0, 9.0)]
                headline.append((
                    f"{preset}, {it} iterations, product gate 4 sigma (the default) against 3 sigma (merge gate 9): "
                    f"within 1 m {f3(a['fraction_within_1m'])} / {f3(b['fraction_within_1m'])}, "
                    f"p90 {f3(a['error_p90_m_pooled'])} / {f3(b['error_p90_m_pooled'])} m, "
                    f"95 % coverage {f3(a['coverage_95'])} / {f3(b['coverage_95'])}", command(spec.name)))


def _blocked_over_los(rows, keys):
    """(row at 20 % blocked, its line-of-sight row with the same `keys`, p90 ratio) for every blocked row."""
    los = {tuple(r[k] for k in keys): r for r in rows if r["blocked_probability"] == 0.0}
    out = []
    for r in rows:
        base = los.get(tuple(r[k] for k in keys))
        if r["blocked_probability"] == 0.2 and base:
            out.append((r, base, r["error_p90_m_pooled"] / base["error_p90_m_pooled"]))
    return out


def robust_ring(spec, results, lines, headline):
    generic(spec, results, lines, headline)
    pairs = _blocked_over_los(summarise(results, list(spec.swept)), ["robust_ring_scale", "iterations"])
    body = [[f"{r['robust_ring_scale']:g}", str(r["iterations"]), f3(r["error_p90_m_pooled"]),
             f3(base["error_p90_m_pooled"]), f2(ratio), f3(r["coverage_95"])] for r, base, ratio in pairs]
    lines += ["20 % blocked against line of sight of the same settings:", ""]
    lines += table(["ring scale", "iterations", "p90 error (m)", "LOS p90 (m)", "ratio", "95 % coverage"], body) + [""]
    r, _, ratio = min(pairs, key=lambda t: t[2])
    lines += [f"Lowest ratio: {f2(ratio)} (ring scale {r['robust_ring_scale']:g}, {r['iterations']} iterations, "
              f"95 % coverage {f3(r['coverage_95'])}).", ""]


def robust_spread(spec, results, lines, headline):
    """Rings widened by the bound or along the line of sight: the ratio per setting, and the preset's rows."""
    generic(spec, results, lines, headline)
    keys = ["directional_spread", "iterations"]
    rows = summarise(results, list(spec.swept))
    pairs = _blocked_over_los(rows, keys)
    body = [["along the line of sight" if r["directional_spread"] else "bound (lambda_max)", str(r["iterations"]),
             f3(r["error_p90_m_pooled"]), f3(base["error_p90_m_pooled"]), f2(ratio), f3(r["coverage_95"]),
             f3(r["fraction_within_1m_min"])] for r, base, ratio in pairs]
    lines += ["20 % blocked against line of sight of the same settings:", ""]
    lines += table(["ring spread", "iterations", "p90 error (m)", "LOS p90 (m)", "ratio", "95 % coverage",
                    "worst network"], body) + [""]
    seeds = f"seeds {spec.seeds[0]}-{spec.seeds[-1]}"
    most = max(r["iterations"] for r, _, _ in pairs)  # the headline: the longest runs of the study
    for r, base, ratio in pairs:
        if r["iterations"] == most:
            rule = "along the line of sight" if r["directional_spread"] else "by the bound lambda_max"
            headline.append((f"blocked paths on 20 % of ranges (bias mean 1 m), robust likelihood, the preset's reduction "
                             f"settings, {r['iterations']} iterations, rings widened {rule} ({len(spec.seeds)} networks, "
                             f"{seeds}): p90 {f3(r['error_p90_m_pooled'])} m, {f2(ratio)} times the line-of-sight p90 "
                             f"({f3(base['error_p90_m_pooled'])} m), 95 % coverage {f3(r['coverage_95'])} "
                             f"(target <= 2)", command(spec.name)))
    _robust_preset_lines(rows, keys, lines, headline, spec.name, spec)


def blocked_engines(spec, results, lines, headline):
    generic(spec, results, lines, headline)
    pairs = _blocked_over_los(summarise(results, ["blocked_probability", "engine"]), ["engine"])
    parts = [f"{r['engine']} {f2(ratio)}" for r, _, ratio in pairs]
    lines += ["p90 at 20 % blocked over each engine's own line-of-sight p90: " + ", ".join(parts) + ".", ""]
    headline.append(("blocked paths on 20 % of ranges, robust likelihood, 8 iterations, p90 over line of sight per "
                     "engine (4 networks): " + ", ".join(parts), command(spec.name)))


def robust_tuning(spec, results, lines, headline):
    generic(spec, results, lines, headline)
    rows = summarise(results, [c for c in spec.swept])
    blocked = [r for r in rows if r["blocked_probability"] == 0.2]
    best = min(blocked, key=lambda r: r["error_p90_m_pooled"])
    worst = max(blocked, key=lambda r: r["error_p90_m_pooled"])
    keys = [c for c in spec.swept if c != "blocked_probability"]
    desc = lambda r: ", ".join(f"{k} {r[k]:g}" for k in keys)  # noqa: E731
    lines += [f"At 20 % blocked the lowest p90 error is {f3(best['error_p90_m_pooled'])} m ({desc(best)}), the highest "
              f"{f3(worst['error_p90_m_pooled'])} m ({desc(worst)}).", ""]
    _robust_preset_lines(rows, keys, lines, headline, spec.name, spec)
    same = [r for r in rows if r["blocked_probability"] == 0.0 and all(r[k] == best[k] for k in keys)]
    los = same[0]["error_p90_m_pooled"] if same else None
    if los:
        headline.append((f"the same with the best reduction settings of the robust-tuning study ({desc(best)}): "
                         f"p90 {f3(best['error_p90_m_pooled'])} m, {f2(best['error_p90_m_pooled'] / los)} times the "
                         f"line-of-sight p90 of those settings ({f3(los)} m, robust likelihood)", command(spec.name)))


def _robust_preset_lines(rows, keys, lines, headline, name, spec):
    """The rows of the robust preset (what `peerfix run --robust` picks): p90 at 20 % blocked
    against the line of sight of the same settings and against the standard likelihood's
    line of sight at the same iterations (blocked-share study, when stored).  A study that
    holds a preset setting at another value than the preset's has no preset rows."""
    from peerfix.reference.params import ROBUST_PRESET, EstimatorParams

    defaults = EstimatorParams().as_dict()
    held = defaults | spec.fixed.get("estimator", {})  # every setting not swept
    other = [f"{k} {held[k]:g} here, {v:g} in the preset" for k, v in ROBUST_PRESET.items()
             if k not in keys and held[k] != v]
    if other:
        lines += [f"This study does not run the robust preset as it now stands ({'; '.join(other)}).", ""]

    def is_preset(r):  # the preset's values, and the defaults for every other swept setting
        return (all(r[k] == ROBUST_PRESET.get(k, defaults[k]) for k in keys if k in defaults)
                and all(held[k] == v for k, v in ROBUST_PRESET.items() if k not in keys))

    standard = {}
    bs = ROOT / "campaigns" / "blocked-share.toml"
    if bs.is_file():
        bspec = load_spec(bs)
        res = stored_results(bspec, _OUT["out"] / bspec.name)
        if len(res) == bspec.cell_count():
            for r in summarise(res, ["blocked_probability", "robust", "iterations"]):
                if r["blocked_probability"] == 0.0 and not r["robust"]:
                    standard[r["iterations"]] = r["error_p90_m_pooled"]
    pairs = _blocked_over_los(rows, keys)
    body = []
    for r, base, _ in pairs:
        if not is_preset(r):
            continue
        p90, lr = r["error_p90_m_pooled"], base["error_p90_m_pooled"]
        ls = standard.get(r["iterations"])
        body.append([str(r["iterations"]), f3(p90), f3(lr), f2(p90 / lr), f3(ls), f2(p90 / ls) if ls else "-",
                     f3(r["coverage_95"]), f3(r["run_s"])])
        headline.append((f"blocked paths on 20 % of ranges (bias mean 1 m), robust preset (`peerfix run --robust`), "
                         f"{r['iterations']} iterations: p90 {f3(p90)} m, {f2(p90 / lr)} times the line-of-sight p90 of "
                         f"the same settings ({f3(lr)} m)"
                         + (f", {f2(p90 / ls)} times the standard likelihood's ({f3(ls)} m)" if ls else "")
                         + f" (target <= 2); {f3(r['run_s'])} s per network", command(name)))
    if body:
        lines += ["The robust preset (peerfix.reference.params.ROBUST_PRESET: "
                  + ", ".join(f"{k} {v:g}" for k, v in ROBUST_PRESET.items())
                  + "), 20 % blocked, against line of sight:", ""]
        lines += table(["iterations", "p90 error (m)", "LOS p90, same settings (m)", "ratio",
                        "LOS p90, standard likelihood (m)", "ratio", "95 % coverage", "run s/network"], body)
        r, _, low = min(pairs, key=lambda t: t[2])
        lines += ["", f"Lowest ratio of any setting of this study (against line of sight of the same settings): "
                  f"{f2(low)}, at 95 % coverage {f3(r['coverage_95'])} and worst network "
                  f"{f3(r['fraction_within_1m_min'])} within 1 m ({', '.join(f'{k} {r[k]:g}' for k in keys)}); "
                  + ("the target <= 2 is met." if low <= 2 else "no setting meets the target <= 2."), ""]


_OUT = {"out": OUT}  # the campaign folders render() reads (a study may join another's cells)


def _cycles_per_k(budget: dict | None) -> tuple[dict[int, tuple], str]:
    """Per K: (neighbours, median cycles, max cycles, calls) of pfx_node_update at the largest
    inbox captured for every K, from a `peerfix budget --json` document."""
    if not budget:
        return {}, "no budget document: cycles not joined"
    configs = budget.get("entries", {}).get("pfx_node_update", {}).get("configs", [])
    if not configs or "K" not in configs[0]:
        return {}, "the budget document has no per-K update figures"
    ks = sorted({c["K"] for c in configs})
    common = set.intersection(*({c["neighbours"] for c in configs if c["K"] == k} for k in ks))
    n = max(common)
    out = {c["K"]: (n, c["cycles_median"], c["cycles_max"], c["calls"]) for c in configs if c["neighbours"] == n}
    note = (f"cycles: `peerfix budget --json` ({budget['target']} {budget['opt']}, {budget['clock_mhz']:g} MHz clock; "
            f"build {budget['build_key'][:12]}), pfx_node_update with {n} heard broadcasts, median and max over the "
            f"captured calls of that configuration (calls column); an estimate from documented instruction timings, "
            f"zero wait states")
    return out, note


def components(spec, results, lines, headline, budget=None):
    rows = summarise(results, ["K"])
    cycles, note = _cycles_per_k(budget)
    body = []
    for r in rows:
        c = cycles.get(r["K"])
        body.append([str(r["K"]), str(13 + 8 * r["K"]), f1(r["bytes_per_agent_per_iteration"]), str(r["networks"]),
                     f3(r["fraction_within_1m"]), f3(r["rmse_within_1m_m_pooled"]), f3(r["error_p90_m_pooled"]),
                     f3(r["coverage_95"]), f"{c[1]:,.0f}" if c else "-", f"{c[2]:,.0f}" if c else "-",
                     str(c[3]) if c else "-"])
    lines += table(["K", "frame bytes", "bytes/agent/iteration", "networks", "within 1 m", "RMSE within 1 m (m)",
                    "p90 error (m)", "95 % coverage", "update cycles (median)", "update cycles (max)", "calls"], body)
    lines += ["", "Frame bytes: 13 + 8 K (docs/wire-format.md). Bytes per agent per iteration: what the agents put on "
              "the air, averaged over agents and iterations (censored agents send nothing); a frame carries the components a "
              "belief holds, at most K, so it stays near one or two components' size on the open field whatever the cap. "
              + note[:1].upper() + note[1:] + ". Like the bytes, the cycles follow the components the beliefs of the "
              "captured runs held, not the cap alone.", ""]


def scale(spec, results, lines, headline, runs=None):
    rows = summarise(results, ["engine"])
    body = [[r["engine"], str(r["networks"]), f3(r["fraction_within_1m"]), f3(r["fraction_within_1m_min"]),
             f3(r["rmse_within_1m_m_pooled"]), f3(r["error_p90_m_pooled"]), f3(r["coverage_95"]),
             f3(r["run_s"]), f3(r["cpu_s"])] for r in rows]
    lines += table(["engine", "networks", "within 1 m", "worst network", "RMSE within 1 m (m)", "p90 error (m)",
                    "95 % coverage", "run s/network (wall)", "CPU s/network (cell)"], body)
    by_seed: dict[int, dict[str, dict]] = {}
    for r in results:
        by_seed.setdefault(r["cell"]["seed"], {})[r["cell"]["engine"]] = r["metrics"]
    pairs = [v for v in by_seed.values() if {"float", "fixed"} <= set(v)]
    if pairs:
        diff = [abs(v["float"]["fraction_within_1m"] - v["fixed"]["fraction_within_1m"]) for v in pairs]
        lines += ["", f"Float twin against fixed core on the same {len(pairs):,} networks: share within 1 m differs by "
                  f"at most {f3(max(diff))} (mean {diff and f3(sum(diff) / len(diff))}); "
                  f"{sum(d > 0.01 for d in diff)} networks differ by more than 0.01."]
    full = [r for r in (runs or []) if r["skipped"] == 0 and r["pending"] == 0 and r["ran"] == r["cells"]]
    cpu = sum(r["metrics"]["cpu_s"] for r in results)
    cpu_by_engine = {r["engine"]: r["cpu_s"] for r in rows}
    if full:
        run = full[-1]
        per = run["wall_s"] / run["cells"]
        lines += ["", f"One run of all {run['cells']:,} cells ({run['cells'] // len(spec.engines):,} networks x "
                  f"{len(spec.engines)} engines) on {run['workers']} {run['backend']} workers, {run['cores']} cores: "
                  f"**{run['wall_s'] / 60:.1f} min wall** ({per:.3f} s per network-run, {2 * per:.3f} s per network "
                  f"for both engines), finished {run['finished_utc']}. Load average (1, 5, 15 min) before "
                  f"{', '.join(f'{x:.1f}' for x in run['load_before'])}, after "
                  f"{', '.join(f'{x:.1f}' for x in run['load_after'])}: the machine was shared with other work.",
                  "", f"CPU time of all cells together: {cpu / 60:.1f} min, so {cpu / 60 / run['workers']:.1f} min on "
                  f"{run['workers']} cores with nothing else running (per network: "
                  + ", ".join(f"{e} {f3(c)} s" for e, c in cpu_by_engine.items()) + " of CPU).", ""]
        headline.append((f"{run['cells'] // len(spec.engines):,} open-field networks, float and fixed engines "
                         f"({run['cells']:,} runs) on {run['workers']} workers: {run['wall_s'] / 60:.1f} min wall "
                         f"(target < 30 min), {per:.3f} s of wall per network-run; CPU per network "
                         + ", ".join(f"{e} {f3(c)} s" for e, c in cpu_by_engine.items())
                         + f" ({cpu / 60 / run['workers']:.1f} min of the 2 cores in all)", command(spec.name)))
    else:
        lines += ["", "No complete run of the campaign is logged in runs.jsonl: wall time not reported.", ""]


SECTIONS = {
    "blocked-share": blocked_share,
    "packet-loss": packet_loss,
    "density": density,
    "anchors": anchors,
    "convergence": convergence,
    "convergence-loss": convergence_loss,
    "components": components,
    "robust-tuning": robust_tuning,
    "robust-ring": robust_ring,
    "robust-spread": robust_spread,
    "robust-spread-heldout": robust_spread,
    "blocked-engines": blocked_engines,
    "tempering": tempering,
    "acquisition-cost": acquisition_cost,
    SCALE: scale,
}

INTRO = """\
# Robustness studies

Each study is a campaign spec under `campaigns/` (format: `peerfix.campaign.spec`),
run with `peerfix sweep`; this page is written by `python tools/run_studies.py`
from the stored cells (`--docs-only` rewrites it without running anything).
Every network is a fresh simulated network (one seed); figures are means over
networks unless they say "pooled" (over all agents of all networks) or "worst
network".  Defaults unless a study sweeps them: K = 4, 4 iterations, slot
schedule, standard likelihood, no loss.  Studies run the fixed-point core (the
firmware's estimator, frames on the air); the 1,000-network campaign runs the
float twin beside it.

A campaign of your own is a small TOML file (the full format is in the
docstring of `python/peerfix/campaign/spec.py`):

```toml
name = "my-hall"
seeds = 20                         # networks 0..19
engines = ["fixed"]                # any of peerfix.runner.ENGINES
[scenario]
preset = "cold-store"              # plus any simulator setting
[estimator]
iterations = 6                     # plus any EstimatorParams field (K = max_components)
[grid.estimator]                   # swept: the campaign runs the full product
robust = [false, true]
[grid.channel]
packet_loss = [0.0, 0.2]           # broadcasts lost between nodes
[[plot]]
x = "channel_packet_loss"
y = "fraction_within_1m"
series = ["robust"]
```

`peerfix sweep my-hall.toml --out DIR` runs it on every core (`--scheduler
tcp://HOST:8786` on a Dask cluster), stores each finished cell in
`DIR/cells/` (a rerun or an interrupted run only does what is missing) and
writes `DIR/results.csv` (one row per cell; `.parquet` too),
`DIR/iterations.csv` (one row per cell and iteration) and `DIR/plots/`.
A cell is keyed by its fully resolved settings, so a changed default of the
estimator or the simulator runs it again; a change of code alone does not
(start from an empty DIR, or `tools/run_studies.py --fresh`).
"""

def _curve(results, match: dict) -> list[float]:
    """Mean share within 1 m per iteration over the networks whose settings match."""
    from peerfix.campaign.grid import Cell

    sel = [r for r in results if all(Cell.from_doc(r["cell"]).settings_row()[k] == v for k, v in match.items())]
    if not sel:
        return []
    n = len(sel[0]["iterations"])
    return [sum(r["iterations"][k]["fraction_within_1m"] for r in sel) / len(sel) for k in range(n)]


def _jitter(curve: list[float], after: int = 3) -> float:
    """Sum of the falls of a mean curve after iteration `after`: 0 for a curve that only climbs."""
    return sum(max(0.0, a - b) for a, b in zip(curve[after - 1:], curve[after:]))


def findings(specs: dict, out: Path) -> list[str]:
    """The convergence findings, with the numbers of the stored cells."""
    lines = ["## Convergence, oscillation and their fixes", ""]
    conv = specs.get("convergence")
    res = (_results(conv, out / "convergence", []) or []) if conv else []
    if conv and len(res) == conv.cell_count():
        for preset in ("open-field", "cold-store", "mine-drift"):
            parts = []
            for sched in ("slot", "broadcast"):
                for robust in (False, True):
                    c = _curve(res, {"preset": preset, "schedule": sched, "robust": robust})
                    best = max(range(len(c)), key=lambda k: c[k])
                    parts.append(f"{sched}, {'robust' if robust else 'standard'}: {f3(c[-1])} after {len(c)} "
                                 f"(best {f3(c[best])} at {best + 1}, falls after 3: {f3(_jitter(c))})")
            lines.append(f"- {preset}: " + "; ".join(parts) + ".")
        lines += ["", "(Share within 1 m after the last iteration, mean over networks; \"falls after 3\" sums every "
                  "fall of the mean curve from iteration 3 on: 0 for a curve that only climbs.)", ""]
    loss = specs.get("convergence-loss")
    res = (_results(loss, out / "convergence-loss", []) or []) if loss else []
    if loss and len(res) == loss.cell_count():
        parts = []
        for preset in ("open-field", "mine-drift"):
            for sched in ("slot", "broadcast"):
                a = _curve(res, {"preset": preset, "schedule": sched, "hold_last_heard": False})
                b = _curve(res, {"preset": preset, "schedule": sched, "hold_last_heard": True})
                parts.append(f"- {preset}, {sched}, 50 % lost: {f3(a[-1])} after {len(a)} iterations, falls after 3 "
                             f"{f3(_jitter(a))}; holding the last heard broadcast: {f3(b[-1])}, falls {f3(_jitter(b))}.")
        lines += parts + [""]
    temp = specs.get("tempering")
    res = (_results(temp, out / "tempering", []) or []) if temp else []
    if temp and len(res) == temp.cell_count():
        from peerfix.campaign.grid import Cell

        infl = sorted({Cell.from_doc(r["cell"]).settings_row()["broadcast_inflation"] for r in res})
        for preset in ("cold-store", "mine-drift"):
            for loss in (0.0, 0.5):
                curves = {c: _curve(res, {"preset": preset, "channel_packet_loss": loss, "broadcast_inflation": c})
                          for c in infl}
                lines.append(f"- tempering, {preset}, {pct(loss)} lost: share after 10 iterations "
                             + ", ".join(f"{f3(v[-1])} (falls {f3(_jitter(v))})" for v in curves.values())
                             + f" for broadcast_inflation {', '.join(f'{c:g}' for c in infl)}.")
        lines += [""]
    lines += [FINDINGS, ""]
    return lines


FINDINGS = """\
How to read them.  A mean curve that falls back after its best iteration, or
goes up and down, is what an oscillating estimator shows.  In these studies
two causes show up, each with its fix:

- Lost broadcasts.  The driver hands a tag only what reached it in this
  iteration, so under loss a tag hears another random subset of its
  neighbours every iteration and its estimate jumps (largest on the mine
  drift, where a tag has few neighbours).  Holding each neighbour's last heard
  broadcast (`hold_last_heard = true`, driver.run_epoch) is the fix on
  either schedule: compare the two lines of each site above and the
  packet-loss table.  It is a receiver's rule, not damping of the estimator.
- Blocked paths taken at face value.  On the cold store the racks block many
  paths; with the standard (line-of-sight) likelihood the share stays low
  whatever the schedule or the number of iterations, and the robust likelihood
  (`robust = true`) is the fix.  Damping cannot repair a wrong likelihood.
- Tempering the broadcasts more (`broadcast_inflation`, the damping-like
  setting the estimator has) fixes neither: see the tempering lines above.

The broadcast schedule needs about twice the iterations of the slot schedule
on the open field (each tag hears only last iteration's beliefs) but does not
oscillate there.
"""


def source_note(out: Path, names: list[str]) -> str:
    """When the reported cells were computed, and which source the page was written from."""
    last = [[r for r in read_runs(out / n) if r.get("ran")] for n in names]
    times = [runs[-1]["finished_utc"] for runs in last if runs]  # each campaign's last run
    try:
        head = subprocess.run(["git", "-C", str(ROOT), "rev-parse", "--short", "HEAD"], capture_output=True, text=True,
                              check=True).stdout.strip()
        dirty = subprocess.run(["git", "-C", str(ROOT), "status", "--porcelain", "--untracked-files=no"],
                               capture_output=True, text=True, check=True).stdout.strip()
        src = f"commit {head}" + (" with uncommitted changes" if dirty else "")
    except (OSError, subprocess.CalledProcessError):
        src = "source outside a git checkout"
    when = f"cells computed in runs finished between {min(times)} and {max(times)}; " if times else ""
    return f"({when}page written from {src}.)"


def _results(spec, folder: Path, stale: list[str]) -> list[dict] | None:
    """Every result of the spec: its cells as the settings resolve now, else the cells of its
    last complete run (campaign.json) when a default changed since; None when incomplete."""
    results = stored_results(spec, folder)
    if len(results) == spec.cell_count():
        return results
    last, n = manifest_results(folder)
    if n == spec.cell_count() and len(last) == n:
        stale.append(spec.name)
        return last
    return None


def render(specs: dict, out: Path, budget: dict | None) -> str:
    _OUT["out"] = out
    stale: list[str] = []
    lines = [INTRO, source_note(out, list(specs)), ""]
    headline: list[tuple[str, str]] = []
    body: list[str] = []
    missing = []
    for name in ORDER:
        spec = specs.get(name)
        if spec is None:
            continue
        results = _results(spec, out / name, stale)
        if results is None:
            missing.append(f"{name} (not all cells stored)")
            continue
        header(spec, body)
        fn = SECTIONS[name]
        if name == "components":
            fn(spec, results, body, headline, budget)
        elif name == SCALE:
            fn(spec, results, body, headline, read_runs(out / name))
        else:
            fn(spec, results, body, headline)
    lines += ["## Measured figures", ""]
    lines += [f"- {text}. Command: {cmd}" for text, cmd in headline] or ["- (none: no study complete)"]
    if stale:
        lines += ["", "Reported from their last complete run, with the defaults then in force (a default of the "
                  "estimator or simulator has changed since; rerun to refresh): " + ", ".join(stale) + "."]
    lines += [""]
    if missing:
        lines += ["Not complete, so not reported: " + "; ".join(missing) + ".", ""]
    lines += body
    lines += findings(specs, out)
    return "\n".join(lines).rstrip() + "\n"


def load_budget(path: Path | None, out: Path, run: bool) -> dict | None:
    cache = path or out / "budget.json"
    if cache.is_file():
        return json.loads(cache.read_text())
    if not run:
        return None
    try:
        from peerfix.budget.build import TargetConfig, toolchain_available
        from peerfix.budget.report import budget_report
    except ImportError as err:
        print(f"run_studies: no budget ({err})", file=sys.stderr)
        return None
    if not toolchain_available():
        print("run_studies: no arm-none-eabi-gcc: cycles per K not joined", file=sys.stderr)
        return None
    doc = budget_report(TargetConfig("cortex-m4", "O2"))
    out.mkdir(parents=True, exist_ok=True)
    cache.write_text(json.dumps(doc, indent=1))
    return doc


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--out", type=Path, default=OUT, help="campaign folders (default build/studies)")
    ap.add_argument("--docs", type=Path, default=DOC, help="Markdown to write (default docs/studies.md)")
    ap.add_argument("--only", nargs="+", metavar="NAME", help="run only these campaigns")
    ap.add_argument("--scale", action="store_true", help=f"also run {SCALE} (about 15 to 30 min on 2 cores)")
    ap.add_argument("--docs-only", action="store_true", help="run nothing; write the Markdown from stored cells")
    ap.add_argument("--fresh", action="store_true",
                    help="forget the stored cells of the campaigns to run (after a change of the code, not of the settings)")
    ap.add_argument("--workers", type=int, default=None)
    ap.add_argument("--budget-json", type=Path, default=None, help="a `peerfix budget --json` document to join")
    ap.add_argument("--no-budget", action="store_true", help="do not run the target budget for the cycles per K")
    args = ap.parse_args(argv)

    specs = {p.stem: load_spec(p) for p in sorted((ROOT / "campaigns").glob("*.toml"))}
    if not args.docs_only:
        names = args.only or [n for n in ORDER if n in specs and (n != SCALE or args.scale)]
        for name in names:
            if name not in specs:
                ap.error(f"no campaign {name!r}; have {', '.join(specs)}")
            if args.fresh and (args.out / name / "cells").is_dir():
                shutil.rmtree(args.out / name / "cells")
            result = run_campaign(specs[name], args.out / name, workers=args.workers)
            s = result.summary()
            print(f"{name}: {s['ran']} run, {s['skipped']} stored, {s['failed']} failed in {s['wall_s']:.0f} s")
    for name, spec in specs.items():  # tables and plots of every complete campaign
        if (args.out / name / "cells").is_dir():
            write_outputs(spec, args.out / name, expand(spec))
    budget = load_budget(args.budget_json, args.out, run=not (args.no_budget or args.docs_only))
    args.docs.write_text(render(specs, args.out, budget))
    print(f"-> {args.docs}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
