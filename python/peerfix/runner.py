"""Run an engine over a scenario, epoch by epoch, and measure it.

This is the library behind `peerfix run`: it builds the engine, feeds it the
scenario's links through the driver, and, where truth exists, scores every
iteration against the truth and the position error bound.
"""

from __future__ import annotations

import csv
import json
import math
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from .driver import EpochRecord, run_epoch
from .network import epoch_links
from .reference import BlockedModel, EstimatorParams, FloatEngine
from .scenario.model import Scenario

ENGINES = ("float", "fixed")


def make_engine(name: str, params: EstimatorParams, blocked: BlockedModel, air: bool = True):
    """air: the fixed engine's broadcasts cross as frame bytes (ignored by the float twin)."""
    if name == "float":
        return FloatEngine(params, blocked)
    if name == "fixed":
        from .core.engine_fixed import FixedEngine  # needs the compiled core

        return FixedEngine(params, blocked, air=air)
    raise ValueError(f"unknown engine {name!r}; choose one of {', '.join(ENGINES)}")


def blocked_model(scenario: Scenario, params: EstimatorParams) -> BlockedModel:
    """The robust likelihood's blocked share and bias: the site's model when it
    states one, else the estimator's defaults; off unless params.robust."""
    if not params.robust:
        return BlockedModel()
    model = scenario.site.ranging
    weight = model.blocked_probability if model.blocked_probability > 0 else params.robust_weight
    return BlockedModel(weight=weight, bias_m=model.blocked_bias_mean_m or params.robust_bias_m)


@dataclass
class RunResult:
    scenario: Scenario
    engine: str
    params: EstimatorParams
    schedule: str
    cooperative: bool
    epochs: list[EpochRecord] = field(default_factory=list)
    metrics: list[dict] = field(default_factory=list)  # per epoch: {"iterations": [...], "peb": ...}


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
) -> RunResult:
    """Run every epoch of the scenario.

    progress(done, total) is called after every iteration of every epoch.
    score=False skips the metrics (benchmarks time the estimator alone).
    air: the fixed engine sends frame bytes (False: in-memory structs).
    channel: a peerfix.channel.Channel for packet loss and bit errors.
    """
    if iterations < 1:
        raise ValueError("iterations must be at least 1")
    params = params or EstimatorParams()
    # An engine name, or an engine object the caller built (e.g. one that records its calls).
    eng = make_engine(engine, params, blocked_model(scenario, params), air) if isinstance(engine, str) else engine
    eng.start(scenario.site.bounds_m, scenario.anchor_positions(), scenario.agent_ids)
    result = RunResult(scenario, eng.name, params, schedule, cooperative)
    epochs = scenario.ranges.epochs()
    total = len(epochs) * iterations
    done = 0

    def tick(_record):
        nonlocal done
        done += 1
        if progress is not None:
            progress(done, total)

    last_t = None
    for t_s in epochs:
        if last_t is not None:
            for a in scenario.agent_ids:
                eng.predict(a, float(t_s - last_t), process_var_m2_per_s)
        links = epoch_links(scenario, float(t_s), cooperative=cooperative)
        record = run_epoch(
            eng, scenario.agent_ids, scenario.anchor_ids, links, iterations, schedule, float(t_s), keep_beliefs, tick, channel
        )
        result.epochs.append(record)
        result.metrics.append(score_epoch(scenario, record, cooperative) if score else {})
        last_t = t_s
    return result


def score_epoch(scenario: Scenario, record: EpochRecord, cooperative: bool = True) -> dict:
    """Metrics per iteration against truth and the bound (empty without truth).

    The bound is the one of the links the run used: cooperative, or anchors-only.
    """
    from .harness import accuracy_metrics, network_bounds

    if scenario.truth is None:
        return {}
    truth = scenario.truth.at(record.t_s)
    if not all(a in truth for a in scenario.agent_ids):
        return {}
    truth_xy = np.array([truth[a] for a in scenario.agent_ids])
    bounds = network_bounds(scenario, record.t_s)
    peb = np.asarray(bounds["peb_m"] if cooperative else bounds["peb_anchors_only_m"])
    per_iter = []
    for it in record.iterations:
        m = accuracy_metrics(it.mean, it.cov, truth_xy, peb)
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
    }


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
]


def write_estimates(result: RunResult, path: Path) -> None:
    """estimates.csv: one row per agent per iteration per epoch."""
    with open(path, "w", newline="") as f:
        w = csv.writer(f)
        w.writerow(ESTIMATE_COLUMNS)
        for epoch in result.epochs:
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
    """What metrics.json holds: settings, and per epoch the per-iteration metrics."""
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
        }
    )


def write_outputs(result: RunResult, out: Path) -> dict:
    """Write estimates.csv and, where truth exists, metrics.json; returns the metrics document."""
    out.mkdir(parents=True, exist_ok=True)
    write_estimates(result, out / "estimates.csv")
    doc = metrics_document(result)
    if doc["epochs"]:
        with open(out / "metrics.json", "w") as f:
            json.dump(doc, f, indent=2)
    return doc
