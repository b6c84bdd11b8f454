"""Running campaigns (peerfix.campaign.execute, `peerfix sweep`): a tiny campaign end
to end, resumability after an interrupt, the tidy tables, and a Dask local cluster."""

from __future__ import annotations

import csv
import json
import textwrap

import numpy as np
import pytest

from peerfix.campaign import METRIC_COLUMNS, CellStore, expand, parse_spec, run_campaign, stored_results, summarise
from peerfix.cli import main

# Small networks: a 30 m square, 4 corner anchors, 6 tags, all in radio range.
TINY = textwrap.dedent(
    """\
    name = "tiny"
    seeds = 2
    engines = ["fixed"]

    [scenario]
    preset = "open-field"
    bounds_m = [0, 0, 30, 30]
    anchor_rule = "perimeter"
    anchor_count = 4
    agents = 6
    radio_range_m = 50

    [estimator]
    iterations = 3

    [grid.estimator]
    K = [2, 4]

    [grid.channel]
    packet_loss = [0.0, 0.3]

    [[plot]]
    x = "channel_packet_loss"
    y = "fraction_within_1m"

    [[plot]]
    x = "iteration"
    y = "rmse_m"
    """
)
N_CELLS = 2 * 2 * 2


def _metrics_only(results):
    """What must not depend on where a cell ran: everything but the timings and the host."""
    skip = {"simulate_s", "run_s", "score_s", "cpu_s"}
    return {r["key"]: ({k: v for k, v in r["metrics"].items() if k not in skip}, r["errors_m"], r["iterations"]) for r in results}


@pytest.fixture(scope="module")
def spec():
    return parse_spec(TINY, "tiny.toml")


@pytest.fixture(scope="module")
def finished(spec, tmp_path_factory):
    out = tmp_path_factory.mktemp("tiny")
    result = run_campaign(spec, out, workers=1, progress=False)
    return out, result


def test_tiny_campaign_writes_cells_tables_and_plots(spec, finished):
    out, result = finished
    assert (result.cells, result.ran, result.skipped, len(result.failed)) == (N_CELLS, N_CELLS, 0, 0)
    assert len(list((out / "cells").glob("*.json"))) == N_CELLS
    for name in ("results.csv", "iterations.csv", "plots/fraction_within_1m_vs_channel_packet_loss.png",
                 "plots/rmse_m_vs_iteration.png"):
        assert (out / name).is_file(), name
        assert (out / name).stat().st_size > 0


def test_results_table_is_tidy(spec, finished):
    out, _ = finished
    with open(out / "results.csv", newline="") as f:
        rows = list(csv.DictReader(f))
    assert len(rows) == N_CELLS
    for col in ("campaign", "key", "preset", "seed", "engine", "K", "robust", "iterations", "schedule",
                "channel_packet_loss", "agents", *METRIC_COLUMNS):
        assert col in rows[0], col
    assert len({r["key"] for r in rows}) == N_CELLS
    assert {(r["K"], r["channel_packet_loss"], r["seed"]) for r in rows} == {
        (k, p, s) for k in ("2", "4") for p in ("0.0", "0.3") for s in ("0", "1")}
    for r in rows:
        assert 0.0 <= float(r["fraction_within_1m"]) <= 1.0
        assert float(r["bytes_per_agent_per_iteration"]) > 0
        assert int(r["n_agents"]) == 6 and int(r["n_anchors"]) == 4
        lossy = float(r["channel_packet_loss"]) > 0
        assert (int(r["frames_lost"]) > 0) == lossy  # the channel setting reached the run
    # Frames of K = 4 are larger than frames of K = 2 (13 + 8 K bytes, docs/wire-format.md).
    by_k = {k: max(float(r["bytes_per_agent_per_iteration"]) / max(1e-9, float(r["messages_per_iteration"]) / 6)
                   for r in rows if r["K"] == k) for k in ("2", "4")}
    assert by_k["4"] > by_k["2"]
    with open(out / "iterations.csv", newline="") as f:
        its = list(csv.DictReader(f))
    assert len(its) == N_CELLS * 3 and {r["iteration"] for r in its} == {"1", "2", "3"}


def test_parquet_table_matches_csv(finished):
    pq = pytest.importorskip("pyarrow.parquet")
    out, _ = finished
    table = pq.read_table(out / "results.parquet").to_pylist()
    with open(out / "results.csv", newline="") as f:
        rows = list(csv.DictReader(f))
    assert [r["key"] for r in table] == [r["key"] for r in rows]
    assert [r["fraction_within_1m"] for r in table] == [float(r["fraction_within_1m"]) for r in rows]


def test_summary_groups_over_seeds(spec, finished):
    out, _ = finished
    results = stored_results(spec, out)
    rows = summarise(results, ["K", "channel_packet_loss"])
    assert len(rows) == 4 and all(r["networks"] == 2 for r in rows)
    for r in rows:
        mine = [x["metrics"]["fraction_within_1m"] for x in results
                if dict(x["cell"]["estimator"])["max_components"] == r["K"] and x["cell"]["packet_loss"] == r["channel_packet_loss"]]
        assert r["fraction_within_1m"] == pytest.approx(sum(mine) / len(mine))


def test_rerun_skips_finished_cells(spec, finished):
    out, _ = finished
    again = run_campaign(spec, out, workers=1, progress=False, write=False)
    assert (again.ran, again.skipped) == (0, N_CELLS)


def test_interrupted_campaign_resumes_with_only_the_rest(spec, tmp_path):
    # An interrupt (Ctrl-C) after two finished cells, with two worker processes.
    seen = []

    def stop_after_two(r):
        seen.append(r["key"])
        if len(seen) == 2:
            raise KeyboardInterrupt

    with pytest.raises(KeyboardInterrupt):
        run_campaign(spec, tmp_path, workers=2, progress=False, on_result=stop_after_two)
    store = CellStore(tmp_path)
    stored = {c.key for c in expand(spec) if store.has(c.key)}
    assert set(seen) <= stored and 2 <= len(stored) < N_CELLS
    # A half-written temporary file of an interrupted write is not a finished cell.
    (tmp_path / "cells" / ".deadbeef.tmp").write_text("{")

    rest = []
    result = run_campaign(spec, tmp_path, workers=2, progress=False, on_result=lambda r: rest.append(r["key"]))
    assert result.skipped == len(stored)
    assert sorted(rest) == sorted({c.key for c in expand(spec)} - stored)
    assert result.ran == N_CELLS - len(stored)


def test_max_cells_leaves_the_rest_pending(spec, tmp_path):
    first = run_campaign(spec, tmp_path, workers=1, max_cells=3, progress=False, write=False)
    assert (first.ran, first.pending) == (3, N_CELLS - 3)
    second = run_campaign(spec, tmp_path, workers=1, progress=False, write=False)
    assert (second.ran, second.skipped, second.pending) == (N_CELLS - 3, 3, 0)


def test_failing_cell_is_reported_and_not_stored(spec, tmp_path, monkeypatch):
    import peerfix.runner as runner

    def broken(*args, **kwargs):
        raise RuntimeError("engine broke")

    monkeypatch.setattr(runner, "run_scenario", broken)
    result = run_campaign(spec, tmp_path, workers=1, max_cells=2, progress=False, write=False)
    assert result.ran == 0 and len(result.failed) == 2
    assert "engine broke" in result.failed[0]["error"]
    assert not list((tmp_path / "cells").glob("*.json"))


def test_dask_local_cluster_gives_the_local_results(spec, finished, tmp_path):
    distributed = pytest.importorskip("dask.distributed")
    out, _ = finished
    local = _metrics_only(stored_results(spec, out))
    with distributed.LocalCluster(n_workers=1, threads_per_worker=2, processes=False, dashboard_address=":0") as cluster:
        # By address, as `peerfix sweep --scheduler ADDRESS` does.
        result = run_campaign(spec, tmp_path, scheduler=cluster.scheduler_address, progress=False)
    assert result.backend == "dask" and result.workers == 2
    assert result.ran == N_CELLS and not result.failed
    assert _metrics_only(stored_results(spec, tmp_path)) == local


def test_cli_sweep_end_to_end_and_bad_spec(tmp_path, capsys):
    path = tmp_path / "tiny.toml"
    path.write_text(TINY.replace("seeds = 2", "seeds = 1").replace("K = [2, 4]", "K = [4]"))
    out = tmp_path / "out"
    assert main(["sweep", str(path), "--out", str(out), "--dry-run", "--json"]) == 0
    assert json.loads(capsys.readouterr().out) == {"campaign": "tiny", "cells": 2, "stored": 0, "missing": 2}
    assert main(["sweep", str(path), "--out", str(out), "--workers", "1", "--no-progress", "--json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert (doc["cells"], doc["ran"], doc["failed"]) == (2, 2, 0)
    assert (out / "results.csv").is_file()

    bad = tmp_path / "bad.toml"
    bad.write_text('name = "x"\n[estimator]\nK = 0\n')
    assert main(["sweep", str(bad), "--out", str(tmp_path / "bad-out")]) == 2
    assert "bad.toml:3: field 'estimator.K'" in capsys.readouterr().err
    assert not (tmp_path / "bad-out").exists()


def test_hold_last_heard_reuses_lost_broadcasts_until_the_next_epoch():
    """driver.run_epoch(hold_last_heard=True): a lost broadcast is replaced by the
    sender's last one that reached this receiver in the epoch, never one of another
    receiver or of an earlier epoch."""
    from peerfix.driver import run_epoch
    from peerfix.engine import NodeReport
    from peerfix.network import Link

    class Recorder:
        """Anchor 'a' speaks; agent 'b' speaks 'b<iteration>'; records every inbox."""

        name = "recorder"

        def __init__(self):
            self.calls, self.spoken = [], {"b": 0}

        def broadcast(self, node):
            if node == "a":
                return "a1"
            if node == "b":
                self.spoken["b"] += 1
                return f"b{self.spoken['b']}"
            return None

        def message_bytes(self, msg):
            return 1

        def update(self, agent_id, inbox):
            self.calls.append((agent_id, sorted((m.sender, m.message) for m in inbox)))

        def report(self, agent_id):
            return NodeReport(np.zeros(2), np.eye(2), 1, 1, 1.0)

        def belief(self, agent_id):
            return None

    class LoseSecondFromA:
        """A channel that loses anchor a's frame to receiver t in the second iteration only."""

        ideal = False

        class counts:
            lost = corrupted = 0

        def __init__(self):
            self.n = 0

        def deliver(self, msg):
            self.n += 1
            return None if (msg == "a1" and self.n == 3) else msg

    links = {"t": [Link("a", 5.0, 0.1, 1, True), Link("b", 7.0, 0.1, 1, False)], "b": []}
    for epoch in range(2):
        eng = Recorder()
        run_epoch(eng, ["b", "t"], ["a"], links, 2, "slot", float(epoch), channel=LoseSecondFromA(),
                  hold_last_heard=True)
        t_calls = [c for c in eng.calls if c[0] == "t"]
        # iteration 1: both heard; iteration 2: a's frame lost, its held one is used
        assert t_calls == [("t", [("a", "a1"), ("b", "b1")]), ("t", [("a", "a1"), ("b", "b2")])]
    # Without holding, the lost frame is simply missing.
    eng = Recorder()
    run_epoch(eng, ["b", "t"], ["a"], links, 2, "slot", 0.0, channel=LoseSecondFromA())
    assert [c for c in eng.calls if c[0] == "t"][1] == ("t", [("b", "b2")])


def test_hold_last_heard_setting_reaches_the_run(tmp_path):
    text = TINY.replace("[grid.estimator]\nK = [2, 4]", "[grid.estimator]\nhold_last_heard = [false, true]")
    text = text.replace("packet_loss = [0.0, 0.3]", "packet_loss = [0.5]").replace("seeds = 2", "seeds = 1")
    spec = parse_spec(text, "hold.toml")
    run_campaign(spec, tmp_path, workers=1, progress=False, write=False)
    res = {r["cell"]["hold_last_heard"]: r for r in stored_results(spec, tmp_path)}
    assert set(res) == {False, True}
    # Same network, same channel draws: only the receivers' policy differs, and it changes the run.
    assert res[False]["iterations"][0] == res[True]["iterations"][0]  # nothing held yet in iteration 1
    assert res[False]["errors_m"] != res[True]["errors_m"]


def test_manifest_finds_the_last_run_after_a_default_changes(spec, finished, monkeypatch):
    from peerfix.campaign import execute
    from peerfix.reference import params as params_module

    out, _ = finished
    results, n = execute.manifest_results(out)
    assert n == N_CELLS and len(results) == N_CELLS
    # A changed estimator default gives every cell a new key: the spec no longer finds them,
    # the manifest of the last run still does.
    monkeypatch.setattr(params_module.EstimatorParams, "__init__", _with_default(params_module.EstimatorParams))
    assert stored_results(spec, out) == []
    assert len(execute.manifest_results(out)[0]) == N_CELLS


def _with_default(cls):
    original = cls.__init__

    def init(self, *args, **kwargs):
        kwargs.setdefault("censor_spread_m", 2.5)
        original(self, *args, **kwargs)

    return init
