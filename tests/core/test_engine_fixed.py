"""The fixed-point engine through the driver and the CLI: same files, same outputs."""

import json

import numpy as np
import pytest

from peerfix.cli import main
from peerfix.core import CoreError, Status
from peerfix.core._pfx import ffi, lib
from peerfix.core.engine_fixed import FixedEngine, mixture_to_belief
from peerfix.engine import Inbound
from peerfix.reference import EstimatorParams, Mixture
from peerfix.reference.node import Received, order_for_update
from scenario_helpers import make_folder


def test_run_with_the_fixed_engine_writes_the_same_outputs(tmp_path, capsys):
    folder = make_folder(tmp_path)
    outs = {}
    for engine in ("float", "fixed"):
        out = tmp_path / engine
        assert main(["run", str(folder), "--engine", engine, "--out", str(out), "--json"]) == 0
        outs[engine] = json.loads(capsys.readouterr().out)
        assert (out / "estimates.csv").read_text().splitlines()[0] == (tmp_path / "float" / "estimates.csv").read_text().splitlines()[0]
    assert outs["fixed"]["engine"] == "fixed"
    assert set(outs["fixed"]) == set(outs["float"])


def test_compare_reports_both_engines(tmp_path, capsys):
    folder = make_folder(tmp_path)
    assert main(["compare", str(folder), "--json", "--out", str(tmp_path / "cmp")]) == 0
    doc = json.loads(capsys.readouterr().out)
    final = doc["final"]
    for key in ("position_diff_median_m", "position_diff_p99_m", "cov_log_det_ratio_median", "fraction_within_1m_fixed"):
        assert key in final
    assert "POSITION_MEDIAN_M" in doc["tolerances"]
    assert (tmp_path / "cmp" / "compare.csv").read_text().startswith("t_s,node_id,iteration,position_diff_m")


def test_compare_on_moving_tags_counts_the_present_agents_only():
    """A moving scenario (a late joiner, an early leaver): compare lines truth up with the scored
    agents and leaves out, per epoch, the tags that are not present (their reports are stale)."""
    from peerfix.harness.compare import compare_scenario
    from peerfix.simulate import simulate

    scenario = simulate("cold-store-shift", seed=3, duration_s=4)
    cmp = compare_scenario(scenario, iterations=2)
    present = [e.present for e in cmp.float_run.epochs]
    assert any(p is not None and not p.all() for p in present)  # the late joiner is away at first
    expected = sum(2 * int(p.sum()) for p in present)
    assert len(cmp.rows) == expected
    away = {(e.t_s, a) for e in cmp.float_run.epochs for a, here in zip(scenario.agent_ids, e.present) if not here}
    assert not any((r["t_s"], r["node_id"]) in away for r in cmp.rows)
    assert all(np.isfinite(r["error_float_m"]) and np.isfinite(r["error_fixed_m"]) for r in cmp.rows)
    assert cmp.summary["n"] == expected // 2  # the final iteration of every epoch


def test_a_bad_range_is_a_clear_error():
    eng = FixedEngine(EstimatorParams())
    eng.start((0, 0, 10, 10), {"a": np.array([0.0, 0.0])}, ["t"])
    with pytest.raises(CoreError, match=r"pfx_inbox_add\(t <- a\): ERR_RANGE"):
        eng.update("t", [Inbound("a", eng.broadcast("a"), -1.0, 0.1, True)])


def test_inbox_bound_must_match_the_core():
    with pytest.raises(ValueError, match="PFX_MAX_NEIGHBOURS"):
        FixedEngine(EstimatorParams(max_neighbours=20))


def test_full_inbox_keeps_the_same_broadcasts_as_the_float_twin():
    # 20 agent broadcasts of different spreads plus 3 anchors, in a shuffled order:
    # the core keeps the 16 the twin's stable order puts first.
    rng = np.random.default_rng(3)
    spreads = rng.permutation(np.r_[np.linspace(0.05, 1.5, 20)])
    msgs = [(f"tag-{k}", Mixture.single([k, 0.0], np.eye(2) * s**2), False) for k, s in enumerate(spreads)]
    msgs += [(f"anc-{k}", Mixture.single([0.0, k], np.zeros((2, 2))), True) for k in range(3)]
    order = rng.permutation(len(msgs))
    msgs = [msgs[i] for i in order]
    inbox = ffi.new("pfx_inbox_t *")
    lib.pfx_inbox_clear(inbox)
    statuses = [lib.pfx_inbox_add(inbox, mixture_to_belief(m), 5 * 1024, 102, int(a)) for _, m, a in msgs]
    assert inbox.count == lib.PFX_MAX_NEIGHBOURS
    assert set(statuses) <= {Status.OK, Status.ERR_FULL}
    kept = {(inbox.heard[i].belief.comp[0].x, inbox.heard[i].belief.comp[0].y) for i in range(inbox.count)}
    twin = order_for_update([Received(n, m, 5.0, 0.1, a) for n, m, a in msgs])[:16]
    expected = {(int(round(r.belief.mean[0, 0] * 1024)), int(round(r.belief.mean[0, 1] * 1024))) for r in twin}
    assert kept == expected
