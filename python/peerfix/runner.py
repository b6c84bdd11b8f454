"""Run an engine over a scenario, epoch by epoch, and measure it.

This is the library behind `peerfix run`: it builds the engine, feeds it the
scenario's links through the driver, and, where truth exists, scores every
iteration against the truth and the position error bound.
"""

from __future__ import annotations

import csv
import dataclasses
import json
import math
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from .driver import EpochRecord, run_epoch
from .network import epoch_links
from .reference import BlockedModel, EstimatorParams, FloatEngine
from .scenario.epochs import LogReport, group_epochs
from .scenario.model import RangeTable, Scenario

ENGINES = ("float", "fixed", "particle", "central")


def make_engine(name: str, params: EstimatorParams, blocked: BlockedModel, air: bool = True):
    """air: the fixed engine's broadcasts cross as frame bytes (ignored by the float twin)."""
    if name == "float":
        return FloatEngine(params, blocked)
    if name == "fixed":
        from .core.engine_fixed import FixedEngine  # needs the compiled core

        return FixedEngine(params, blocked, air=air)
    if name == "particle":  # high-fidelity reference: nonparametric belief propagation
        from .highfid import ParticleEngine

        return ParticleEngine(params, blocked)
    if name == "central":  # joint maximum likelihood over all agents, started from the float twin
        from .highfid.engine_central import CentralEngine

        return CentralEngine(params, blocked)
    raise ValueError(f"unknown engine {name!r}; choose one of {', '.join(ENGINES)}")


def blocked_model(scenario: Scenario, params: EstimatorParams) -> BlockedModel:
    """The robust likelihood's blocked share and bias: the site's model when it
    states one, else the estimator's defaults; off unless params.robust."""
    if not params.robust:
        return BlockedModel()
    model = scenario.site.ranging
    weight = model.blocked_probability if model.blocked_probability > 0 else params.robust_weight
    return BlockedModel(
        weight=weight, bias_m=model.blocked_bias_mean_m or params.robust_bias_m, ring_scale=params.robust_ring_scale
    )


# Defaults of the time rules (docs/scenario-format.md, "Time and epochs").
DEFAULT_EPOCH_WINDOW_S = 0.0  # exact t_s grouping
DEFAULT_SILENCE_TIMEOUT_S = 10.0
# First fix: the dominant mode holds at least this share and its sd is at most FIX_SD_M.
FIX_SD_M = 0.5
FIX_MIN_WEIGHT = 0.9
FIX_TRUTH_M = 1.0  # "first error within 1 m"


def walk_process_var(walk_speed_mps: float, dt_s: float) -> float:
    """The engines' random-walk q (m^2/s) for one step of dt_s at walk speed v.

    The prediction widens each axis by q * dt = (v * dt)^2 / 2: the spread
    of a step of length v * dt in an unknown direction (per axis, the mean
    of cos^2 is 1/2), so the RMS step the prior allows is v * dt.
    """
    return walk_speed_mps * walk_speed_mps * max(dt_s, 0.0) / 2.0


@dataclass
class RunResult:
    scenario: Scenario  # as run: ranges sorted and stamped with their epoch (peerfix.scenario.epochs)
    engine: str
    params: EstimatorParams
    schedule: str
    cooperative: bool
    epochs: list[EpochRecord] = field(default_factory=list)
    metrics: list[dict] = field(default_factory=list)  # per epoch: {"iterations": [...], "peb": ...}
    log: LogReport | None = None  # how the log became epochs, and the rules that fired
    timing: dict = field(default_factory=dict)  # the time rules in force, and the resets they made
    latency: dict = field(default_factory=dict)  # per agent: time to first fix (see first_fix_latency)


def run_scenario(
    scenario: Scenario,
    engine="float",  # a name from ENGINES, or an engine object
    params: EstimatorParams | None = None,
    iterations: int = 4,
    schedule: str = "slot",
    cooperative: bool = True,
    keep_beliefs: bool = False,
    process_var_m2_per_s: float = 1.0,
    progress=None,
    score: bool = True,
    air: bool = True,
    channel=None,
    *,
    epoch_window_s: float | None = None,
    walk_speed_mps: float | None = None,
    silence_timeout_s: float | None = None,
    fix_sd_m: float = FIX_SD_M,
    hold_last_heard: bool = False,
) -> RunResult:
    """Run every epoch of the scenario.

    progress(done, total) is called after every iteration of every epoch.
    score=False skips the metrics (benchmarks time the estimator alone).
    air: the fixed engine sends frame bytes (False: in-memory structs).
    channel: a peerfix.channel.Channel for packet loss and bit errors.
    hold_last_heard: receivers reuse a neighbour's last heard broadcast of the
    epoch when this iteration's is lost (driver.run_epoch).
    epoch_window_s, walk_speed_mps, silence_timeout_s: the time rules; None
    takes the site's [tracking] value, else the default (exact grouping; the
    fixed process_var_m2_per_s; 10 s).  walk_speed_mps, when set, replaces
    process_var_m2_per_s (walk_process_var).
    fix_sd_m: the first-fix criterion's largest standard deviation.
    """
    if iterations < 1:
        raise ValueError("iterations must be at least 1")
    params = params or EstimatorParams()
    tracking = scenario.site.tracking
    window = _first_set(epoch_window_s, tracking.epoch_window_s, DEFAULT_EPOCH_WINDOW_S)
    speed = _first_set(walk_speed_mps, tracking.walk_speed_mps, None)
    timeout = _first_set(silence_timeout_s, tracking.silence_timeout_s, DEFAULT_SILENCE_TIMEOUT_S)
    if speed is not None and not (np.isfinite(speed) and speed >= 0):
        raise ValueError(f"walk_speed_mps must be finite and >= 0, got {speed!r}")
    if not timeout > 0:
        raise ValueError(f"silence_timeout_s must be > 0, got {timeout!r}")
    plan = group_epochs(scenario, window)
    scenario = plan.scenario
    # An engine name, or an engine object the caller built (e.g. one that records its calls).
    eng = make_engine(engine, params, blocked_model(scenario, params), air) if isinstance(engine, str) else engine
    bounds = scenario.site.bounds_m
    eng.start(bounds, scenario.anchor_positions(), scenario.agent_ids)
    result = RunResult(scenario, eng.name, params, schedule, cooperative, log=plan.report)
    total = len(plan.epoch_t_s) * iterations
    done = 0
    # A prediction wider than the uniform prior over the site says nothing more: reset instead.
    widest_prior_var = max(bounds[2] - bounds[0], bounds[3] - bounds[1]) ** 2 / 12.0
    last_seen: dict[str, float | None] = {a: None for a in scenario.agent_ids}
    resets: dict[str, dict[str, int]] = {}

    def tick(_record):
        nonlocal done
        done += 1
        if progress is not None:
            progress(done, total)

    def reset(agent: str, why: str) -> None:
        eng.reset(agent)
        last_seen[agent] = None
        counts = resets.setdefault(agent, {"silence": 0, "spread": 0})
        counts[why] += 1

    for e, t in enumerate(plan.epoch_t_s):
        t_s = float(t)
        rows = plan.rows(e)
        links = epoch_links(scenario, t_s, cooperative=cooperative, rows=rows)
        # Present: named in a range row of the epoch (with --no-coop too: the tag is on the air).
        named = set(scenario.ranges.node_a[rows]) | set(scenario.ranges.node_b[rows])
        present = [a for a in scenario.agent_ids if a in named]
        for a in scenario.agent_ids:
            seen = last_seen[a]
            if seen is not None and t_s - seen > timeout:
                reset(a, "silence")
        for a in present:
            seen = last_seen[a]
            if seen is not None and t_s > seen:
                dt = t_s - seen
                q = process_var_m2_per_s if speed is None else walk_process_var(speed, dt)
                if q * dt > widest_prior_var:
                    reset(a, "spread")
                else:
                    eng.predict(a, dt, q)
            last_seen[a] = t_s
        record = run_epoch(
            eng, scenario.agent_ids, scenario.anchor_ids, links, iterations, schedule, t_s, keep_beliefs, tick, channel,
            present=present, hold_last_heard=hold_last_heard,
        )
        result.epochs.append(record)
        result.metrics.append(score_epoch(scenario, record, cooperative, rows=rows) if score else {})
    result.timing = {
        "epochs": len(plan.epoch_t_s),
        "epoch_window_s": window,
        "motion": (
            {"model": "random walk", "process_var_m2_per_s": process_var_m2_per_s}
            if speed is None
            else {"model": "random walk", "walk_speed_mps": speed, "process_var": "walk_speed_mps^2 * dt_s / 2"}
        ),
        "silence_timeout_s": timeout,
        "resets_total": sum(sum(c.values()) for c in resets.values()),
        "resets": resets,
    }
    result.latency = first_fix_latency(result, fix_sd_m)
    return result


def _first_set(*values):
    for v in values:
        if v is not None:
            return float(v)
    return None


def _fixed(mean: np.ndarray, cov: np.ndarray, mode_count: int, mode_weight: float, fix_sd_m: float) -> bool:
    """The first-fix criterion: a dominant mode (share >= FIX_MIN_WEIGHT) with sd <= fix_sd_m."""
    if mode_count < 1 or mode_weight < FIX_MIN_WEIGHT or not np.all(np.isfinite(cov)):
        return False
    return float(np.sqrt(max(np.linalg.eigvalsh(cov)[-1], 0.0))) <= fix_sd_m


def first_fix_latency(result: RunResult, fix_sd_m: float = FIX_SD_M) -> dict:
    """Per agent: time from its first range to its first fix, from the final iteration of each epoch.

    first_range_t_s: the first epoch the agent is present in.
    fix_t_s / latency_s: the first epoch (from then on) whose estimate meets
      the criterion (dominant mode share >= FIX_MIN_WEIGHT, its sd <= fix_sd_m).
    within_1m_t_s / latency_within_1m_s: the first epoch whose error is at
      most 1 m (only where truth exists).  None: never within the run.
    Times are epoch times (t_s of the grouped log), so the resolution is one epoch.
    """
    agents = result.scenario.agent_ids
    truth = result.scenario.truth
    out: dict[str, dict] = {}
    for i, a in enumerate(agents):
        first = fix = near = None
        for record in result.epochs:
            if record.present is not None and not record.present[i]:
                continue
            last = record.iterations[-1]
            if first is None:
                first = record.t_s
            if fix is None and _fixed(last.mean[i], last.cov[i], int(last.mode_count[i]), float(last.mode_weight[i]), fix_sd_m):
                fix = record.t_s
            if near is None and truth is not None:
                xy = truth.at(record.t_s).get(a)
                if xy is not None and float(np.hypot(*(last.mean[i] - xy))) <= FIX_TRUTH_M:
                    near = record.t_s
            if fix is not None and (near is not None or truth is None):
                break
        out[a] = {
            "first_range_t_s": first,
            "fix_t_s": fix,
            "latency_s": None if fix is None or first is None else fix - first,
            "within_1m_t_s": near,
            "latency_within_1m_s": None if near is None or first is None else near - first,
        }
    lat = [v["latency_s"] for v in out.values() if v["latency_s"] is not None]
    lat1 = [v["latency_within_1m_s"] for v in out.values() if v["latency_within_1m_s"] is not None]
    heard = sum(1 for v in out.values() if v["first_range_t_s"] is not None)
    return {
        "criterion": {"mode_weight_min": FIX_MIN_WEIGHT, "sd_max_m": fix_sd_m, "error_max_m": FIX_TRUTH_M},
        "agents_heard": heard,
        "agents_fixed": len(lat),
        "latency_median_s": float(np.median(lat)) if lat else None,
        "latency_max_s": float(max(lat)) if lat else None,
        "agents_within_1m": len(lat1) if truth is not None else None,
        "latency_within_1m_median_s": float(np.median(lat1)) if lat1 else None,
        "latency_within_1m_max_s": float(max(lat1)) if lat1 else None,
        "agents": out,
    }


def score_epoch(scenario: Scenario, record: EpochRecord, cooperative: bool = True, rows: slice | None = None) -> dict:
    """Metrics per iteration against truth and the bound (empty without truth).

    Scored: the agents present in the epoch that have a true position at its
    t_s (every agent, for a single-epoch scenario with full truth).  The
    bound is the one of the links the run used (cooperative, or
    anchors-only), over the scored agents' ranges.
    rows: the epoch's rows in scenario.ranges when known (faster than a scan).
    """
    from .harness import accuracy_metrics, network_bounds

    if scenario.truth is None:
        return {}
    truth = scenario.truth.at(record.t_s)
    ids = scenario.agent_ids
    present = record.took_part(len(ids))
    scored = [i for i, a in enumerate(ids) if present[i] and a in truth]
    if not scored:
        return {}
    truth_xy = np.array([truth[ids[i]] for i in scored])
    bounds = network_bounds(_scoring_view(scenario, [ids[i] for i in scored], record.t_s, rows), record.t_s)
    peb = np.asarray(bounds["peb_m"] if cooperative else bounds["peb_anchors_only_m"])
    per_iter = []
    for it in record.iterations:
        m = accuracy_metrics(it.mean[scored], it.cov[scored], truth_xy, peb)
        m["iteration"] = it.iteration
        m["messages_sent"] = it.messages_sent
        m["bytes_sent"] = it.bytes_sent
        m["bytes_per_agent"] = it.bytes_sent / max(1, len(scenario.agent_ids))
        m["frames_lost"] = it.frames_lost
        m["frames_corrupted"] = it.frames_corrupted
        m["frames_rejected"] = it.frames_rejected
        per_iter.append(m)
    return {
        "t_s": record.t_s,
        "iterations": per_iter,
        "peb_m": peb,
        "peb_anchors_only_m": np.asarray(bounds["peb_anchors_only_m"]),
        "truth_xy_m": truth_xy,
        "scored": scored,  # indices into agent_ids
    }


def _scoring_view(scenario: Scenario, agents: list[str], t_s: float, rows: slice | None) -> Scenario:
    """The scenario cut to one epoch's rows among the scored agents and the anchors (for the bound)."""
    table = scenario.ranges
    idx = np.flatnonzero(table.t_s == t_s) if rows is None else np.arange(len(table))[rows]
    if len(agents) == len(scenario.agent_ids) and rows is None:
        return scenario
    keep_nodes = set(agents) | set(scenario.anchor_ids)
    idx = [k for k in idx if table.node_a[k] in keep_nodes and table.node_b[k] in keep_nodes]
    cut = RangeTable(
        t_s=np.asarray(table.t_s)[idx],
        node_a=[table.node_a[k] for k in idx],
        node_b=[table.node_b[k] for k in idx],
        range_m=np.asarray(table.range_m)[idx],
    )
    return dataclasses.replace(scenario, agent_ids=list(agents), ranges=cut)


ESTIMATE_COLUMNS = [
    "t_s",
    "node_id",
    "iteration",
    "x_m",
    "y_m",
    "cov_xx_m2",
    "cov_xy_m2",
    "cov_yy_m2",
    "mode_count",
    "components",
    "present",
]


def write_estimates(result: RunResult, path: Path) -> None:
    """estimates.csv: one row per agent per iteration per epoch (present: 1 when the
    agent had ranges in the epoch; 0: it held its last state and did not take part)."""
    with open(path, "w", newline="") as f:
        w = csv.writer(f)
        w.writerow(ESTIMATE_COLUMNS)
        for epoch in result.epochs:
            present = epoch.present
            for it in epoch.iterations:
                for i, a in enumerate(result.scenario.agent_ids):
                    c = it.cov[i]
                    w.writerow(
                        [
                            repr(float(epoch.t_s)),
                            a,
                            it.iteration,
                            f"{it.mean[i, 0]:.6f}",
                            f"{it.mean[i, 1]:.6f}",
                            f"{c[0, 0]:.9g}",
                            f"{c[0, 1]:.9g}",
                            f"{c[1, 1]:.9g}",
                            int(it.mode_count[i]),
                            int(it.components[i]),
                            1 if present is None or present[i] else 0,
                        ]
                    )


def _json_safe(x):
    """NaN and inf are not JSON: write them as null."""
    if isinstance(x, float) and not math.isfinite(x):
        return None
    if isinstance(x, dict):
        return {k: _json_safe(v) for k, v in x.items()}
    if isinstance(x, (list, tuple)):
        return [_json_safe(v) for v in x]
    return x


def metrics_document(result: RunResult) -> dict:
    """What metrics.json holds: settings, per epoch the per-iteration metrics, the
    time rules and log rules that applied, and the latency to first fix."""
    epochs = []
    for m in result.metrics:
        if not m:
            continue
        epochs.append({"t_s": m["t_s"], "iterations": m["iterations"]})
    final = epochs[-1]["iterations"][-1] if epochs else {}
    return _json_safe(
        {
            "engine": result.engine,
            "schedule": result.schedule,
            "cooperative": result.cooperative,
            "iterations": len(result.epochs[0].iterations) if result.epochs else 0,
            "params": result.params.as_dict(),
            "site": result.scenario.site.name,
            "final": final,
            "epochs": epochs,
            "time": result.timing,
            "log": result.log.as_dict() if result.log is not None else {},
            "latency": result.latency,
        }
    )


def write_outputs(result: RunResult, out: Path) -> dict:
    """Write estimates.csv and metrics.json (accuracy figures only where truth exists); returns the metrics document."""
    out.mkdir(parents=True, exist_ok=True)
    write_estimates(result, out / "estimates.csv")
    doc = metrics_document(result)
    with open(out / "metrics.json", "w") as f:
        json.dump(doc, f, indent=2)
    return doc
