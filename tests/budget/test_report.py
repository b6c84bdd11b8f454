"""`peerfix budget`: the report's figures, its JSON keys, and that a wrong result is caught.

One quick report (100 captured calls per entry point, Cortex-M4 -O2) is made
per session through the command; the replay is cached, so the other checks
reuse it.
"""

from __future__ import annotations

import json

import pytest

from .support import needs_cross, run_cli

pytestmark = needs_cross

STABLE_KEYS = (
    "update_cycles_max", "update_cycles_median", "flash_bytes", "ram_static_bytes", "node_state_bytes",
    "stack_bytes", "message_bytes_k4", "bit_exact_calls", "mismatched_calls", "target", "opt", "clock_mhz",
    "entries", "message_bytes",
)
POSITIVE = ("update_cycles_max", "update_cycles_median", "flash_bytes", "node_state_bytes", "stack_bytes",
            "message_bytes_k4", "bit_exact_calls", "inbox_bytes", "workspace_bytes", "stack_measured_bytes")


# A budget whose goal is not met and whose release limit holds: the command still succeeds.
TEST_BUDGET = """config = "cortex-m4-O2"
[targets]
flash_bytes = { at_most = 1 }  # never met
[release]
mismatched_calls = { at_most = 0 }  # the hard rule
"""


@pytest.fixture(scope="module")
def quick(tmp_path_factory):
    out_dir = tmp_path_factory.mktemp("budget")
    budget = out_dir / "test-budget.toml"
    budget.write_text(TEST_BUDGET)
    status, stdout = run_cli(["budget", "--quick", "--json", "--out", str(out_dir), "--budget", str(budget)])
    return status, json.loads(stdout), out_dir


def test_command_json_has_the_stable_keys(quick):
    status, doc, out_dir = quick
    assert status == 0
    for key in STABLE_KEYS:
        assert key in doc, key
    assert (doc["target"], doc["opt"], doc["clock_mhz"]) == ("cortex-m4", "O2", 64.0)
    for key in POSITIVE:
        assert doc[key] > 0, key
    assert doc["ram_static_bytes"] >= 0
    # the written file is the printed document
    assert json.loads((out_dir / "budget.json").read_text()) == doc


def test_targets_report_but_release_limits_fail(quick, tmp_path):
    status, doc, _ = quick
    assert status == 0  # a goal not met does not fail the command
    b = doc["budget"]
    assert b["applies"] and b["targets_met"] is False and b["release_ok"] is True
    assert b["targets"] == [{"key": "flash_bytes", "bound": "at_most", "limit": 1, "value": doc["flash_bytes"],
                             "ok": False}]
    tight = tmp_path / "tight.toml"
    tight.write_text(TEST_BUDGET.replace("mismatched_calls = { at_most = 0 }", "flash_bytes = { at_most = 1 }"))
    status, stdout = run_cli(["budget", "--quick", "--budget", str(tight)])  # replay cached
    assert status == 1
    assert "| release | flash_bytes |" in stdout and "EXCEEDED" in stdout and "NOT MET" in stdout
    other = tmp_path / "other.toml"
    other.write_text(TEST_BUDGET.replace('config = "cortex-m4-O2"', 'config = "cortex-m0plus-Os"')
                     .replace("mismatched_calls = { at_most = 0 }", "flash_bytes = { at_most = 1 }"))
    status, stdout = run_cli(["budget", "--quick", "--budget", str(other)])
    assert status == 0 and "not applied to cortex-m4-O2" in stdout  # a budget is for its own build only


def test_every_captured_call_is_replayed_bit_exact(quick):
    from peerfix.budget.capture import ENTRY_POINTS, capture
    from peerfix.budget.report import QUICK_CALLS, QUICK_HEADLINE

    _, doc, _ = quick
    captured = capture(QUICK_CALLS, QUICK_HEADLINE)
    assert doc["captured_calls"] == len(captured) >= QUICK_CALLS * len(ENTRY_POINTS)
    assert doc["bit_exact_calls"] >= len(captured)
    assert doc["mismatched_calls"] == 0 and doc["mismatches"] == []
    assert set(doc["entries"]) == set(ENTRY_POINTS)
    for name, entry in doc["entries"].items():
        assert entry["calls"] >= QUICK_CALLS and entry["bit_exact"] == entry["calls"], name
        assert sum(c["calls"] for c in entry["configs"]) == entry["calls"], name


def test_figures_hang_together(quick):
    _, doc, _ = quick
    clock = doc["clock_mhz"]
    assert doc["update_calls"] >= 40  # the two headline buckets get their share first
    assert doc["update_cycles_max"] >= doc["update_cycles_median"] > 0
    assert doc["update_cycles_max_any"] >= doc["update_cycles_max"]
    for name, e in doc["entries"].items():
        # every Cortex-M4 instruction takes at least one cycle in the model
        assert e["cycles_max"] >= e["instructions_max"] > 0, name
        assert e["time_max_us"] == round(e["cycles_max"] / clock, 1), name  # the report's 0.1 us rounding
        # the measured high-water mark never exceeds the static worst case
        assert 0 < e["stack_measured_bytes"] <= e["stack_static_bytes"], name
    assert doc["stack_bytes"] == max(e["stack_static_bytes"] for e in doc["entries"].values())
    update = doc["entries"]["pfx_node_update"]
    headline = {c["tracking"]: c for c in update["configs"] if (c["neighbours"], c["K"]) == (12, 4)}
    assert set(headline) == {0, 1}  # both priors, each its own configuration row
    for tracking, kind in ((0, "acquisition"), (1, "tracking")):
        row = headline[tracking]
        assert row["calls"] == doc[f"update_calls_{kind}"] >= 20, kind  # each headline bucket its share first
        assert (row["cycles_median"], row["cycles_max"]) == (doc[f"update_cycles_median_{kind}"],
                                                           doc[f"update_cycles_max_{kind}"]), kind
        assert row["cycles_p90"] == doc[f"update_cycles_p90_{kind}"]
        assert row["cycles_median"] <= row["cycles_p90"] <= row["cycles_max"], kind
    assert doc["update_calls"] == headline[0]["calls"] + headline[1]["calls"]
    assert doc["update_cycles_max"] == max(headline[0]["cycles_max"], headline[1]["cycles_max"])
    # the caller-owned structs as the host's cffi lays them out (the layout test checks every field)
    from peerfix.core._pfx import ffi

    assert doc["node_state_bytes"] == ffi.sizeof("pfx_node_t")
    assert doc["workspace_bytes"] == ffi.sizeof("pfx_workspace_t")


def test_tag_image_links_only_the_tag_api(quick):
    """The tag image is the link of TAG_API alone: smaller than the whole core, every root in it,
    and the single-step functions only tests call (products, moments) absent."""
    from peerfix.budget.build import ROOT, TAG_API, TAG_IMAGE_DIR, TargetConfig, build, sizes

    _, doc, _ = quick
    tag = build(TargetConfig("cortex-m4", "O2"), out_root=ROOT / "build" / TAG_IMAGE_DIR, roots=list(TAG_API))
    size = sizes(tag.elf)
    assert doc["flash_bytes_tag_image"] == size.flash
    assert 0 < doc["flash_bytes_tag_image"] < doc["flash_bytes"]
    assert doc["tag_image"]["roots"] == list(TAG_API)
    assert set(TAG_API) <= size.linked_functions
    absent = set(doc["tag_image"]["absent_functions"])
    assert {"pfx_range_compact", "pfx_mixture_moments", "pfx_mixture_product"} <= absent
    assert not absent & set(TAG_API)


def test_flash_per_function_and_table_adds_up(quick):
    """Every function symbol's code bytes (from the ELF's symbol table) fit in .text, largest first,
    and the markdown lists the largest; the tables' bytes are their declarations' and fit in rodata."""
    _, doc, out_dir = quick
    funcs = doc["flash_functions"]
    assert "compact_core" in funcs and "pfx_node_update" in funcs
    assert 0.9 * doc["flash_sections"]["text"] <= sum(funcs.values()) <= doc["flash_sections"]["text"]
    assert list(funcs.values()) == sorted(funcs.values(), reverse=True)
    largest = next(iter(funcs))
    assert f"| {largest} | {funcs[largest]:,} |" in (out_dir / "budget.md").read_text()
    # tables: each data symbol's bytes are its C declaration's (elements x element size), within rodata
    tables = doc["flash_data"]
    assert tables["k_log2_table_q24"] == 257 * 4 and tables["k_cos_q30"] == 256 * 4
    assert tables["k_var_words"] == 8 * 4
    assert sum(tables.values()) <= doc["flash_sections"]["rodata"] + doc["flash_sections"]["data"]


def test_tag_api_is_what_the_fixed_engine_calls():
    """TAG_API is the host's firmware loop: exactly the core functions the fixed engine calls, and
    every entry point the budget replays is among them."""
    import re
    from pathlib import Path

    import peerfix.core.engine_fixed as engine
    from peerfix.budget.build import TAG_API
    from peerfix.budget.capture import ENTRY_POINTS

    called = set(re.findall(r"\blib\.(pfx_\w+)\s*\(", Path(engine.__file__).read_text()))
    assert called == set(TAG_API)
    assert set(ENTRY_POINTS) <= set(TAG_API)


def test_message_bytes_per_k(quick):
    """13 + 8 K bytes: the frame layout of docs/wire-format.md (11 header + 8 per component + 2 check)."""
    _, doc, _ = quick
    assert doc["message_bytes"] == {str(k): 13 + 8 * k for k in range(1, 9)}
    assert doc["message_bytes_k4"] == 45


def test_markdown_states_the_estimate(quick):
    from peerfix.budget.timing import CORTEX_M4

    _, doc, out_dir = quick
    md = (out_dir / "budget.md").read_text()
    assert "ESTIMATE" in md and CORTEX_M4.source in md
    for left_out in ("wait states", "caches", "bus contention", "interrupts"):
        assert left_out in md
    assert "### pfx_node_update by neighbours and K" in md
    assert f"{doc['flash_bytes']:,} B" in md


def test_clock_scales_times_not_cycles(quick):
    from peerfix.budget.build import TargetConfig
    from peerfix.budget.report import budget_report

    _, doc, _ = quick
    fast = budget_report(TargetConfig("cortex-m4", "O2"), clock_mhz=128.0, quick=True)  # replay cached
    assert fast["update_cycles_max"] == doc["update_cycles_max"]
    assert fast["update_time_max_us"] == pytest.approx(doc["update_time_max_us"] / 2, abs=0.1)


def test_a_corrupted_host_result_is_a_mismatch():
    """Flip one byte of a captured expected output: the replay must report it."""
    from peerfix.budget.build import TargetConfig
    from peerfix.budget.capture import capture
    from peerfix.budget.report import budget_report

    captured = capture(10, 1)
    good = [c for calls in captured.calls.values() for c in calls[:2]]
    frame = next(c for c in captured.calls["pfx_wire_encode"] if c.status == 0)
    node = min(captured.calls["pfx_node_update"], key=lambda c: c.config["neighbours"])
    bad = [frame.corrupted(output=0, offset=5), node.corrupted(output=0, offset=300)]
    doc = budget_report(TargetConfig("cortex-m4", "O2"), calls=good + bad)
    assert doc["mismatched_calls"] == 2
    assert doc["bit_exact_calls"] == len(good)
    listed = {m["entry"]: m for m in doc["mismatches"]}
    assert set(listed) == {"pfx_wire_encode", "pfx_node_update"}
    assert "offset 5" in listed["pfx_wire_encode"]["problems"][0]
    assert "offset 300" in listed["pfx_node_update"]["problems"][0]


def test_command_fails_on_a_mismatch(monkeypatch, tmp_path):
    import peerfix.budget.report as report
    from peerfix.budget.capture import capture

    captured = capture(10, 1)
    call = captured.calls["pfx_wire_decode"][0]
    monkeypatch.setattr(report, "capture", lambda *a, **kw: [call, call.corrupted(output=0, offset=0)])
    status, stdout = run_cli(["budget", "--quick", "--out", str(tmp_path)])
    assert status == 1
    assert "MISMATCHES: 1 calls differ" in stdout
    assert json.loads((tmp_path / "budget.json").read_text())["mismatched_calls"] == 1


def test_full_capture_covers_every_update_configuration():
    """The scenario runs give updates with 1..16 heard broadcasts at every K = 1..8,
    1000 calls per entry point, and every distinct headline call (12, K = 4) of
    both priors, at least 50 of each."""
    from peerfix.budget.capture import ENTRY_POINTS, HEADLINE_BUCKETS, capture
    from peerfix.budget.report import FULL_CALLS, FULL_HEADLINE

    full = capture(FULL_CALLS, FULL_HEADLINE)
    buckets = {c.bucket[:2] for c in full.calls["pfx_node_update"]}
    assert buckets >= {(("neighbours", n), ("K", k)) for n in range(1, 17) for k in range(1, 9)}
    for b in HEADLINE_BUCKETS:
        taken = sum(c.bucket == b for c in full.calls["pfx_node_update"])
        assert taken == full.available["pfx_node_update"][b] >= 50, b  # all of them: maxima over every one
    for entry in ENTRY_POINTS:
        assert len(full.calls[entry]) >= 1000, entry
    # a smaller selection is part of the larger one (quick figures never exceed the full ones' calls)
    quick_calls = set(capture(100, 20).all_calls())
    assert quick_calls <= set(full.all_calls())


def test_headline_split_by_prior_reads_the_node_it_starts_from():
    """The acquisition / tracking split is where the captured update starts: the
    node's tracking prior (pfx_node_t.prior, count 0 = uniform over the bounds),
    read here from the bytes the target is given.  Tracking calls come from the
    second epoch of a run (a predicted belief), acquisition calls from the first."""
    from peerfix.budget.capture import capture, from_tracking_prior, is_headline
    from peerfix.budget.report import QUICK_CALLS, QUICK_HEADLINE
    from peerfix.core._pfx import ffi

    calls = [c for c in capture(QUICK_CALLS, QUICK_HEADLINE).calls["pfx_node_update"] if is_headline(c)]
    kinds = {True: 0, False: 0}
    for c in calls:
        node = ffi.from_buffer("pfx_node_t *", bytearray(c.args[0].data))
        tracking = from_tracking_prior(c)
        assert tracking == (node.prior.count > 0), c.source
        if tracking:  # a tracking prior is last epoch's belief grown by the random walk
            assert 1 <= node.prior.count <= node.params.max_components and " 2 epochs" in c.source
        kinds[tracking] += 1
    assert kinds[True] >= QUICK_HEADLINE and kinds[False] >= QUICK_HEADLINE


def _robust_calls():
    """A few calls captured from a short run with the robust preset on blocked paths."""
    from peerfix.budget.capture import Run, capture

    run = Run("open-field", 0, 4, iterations=2, robust=True, blocked_probability=0.2)
    captured = capture(4, 2, runs=(run,))
    return captured, [c for calls in captured.calls.values() for c in calls]


def test_robust_preset_runs_replay_bit_exact_with_its_settings():
    """The robust preset's code paths (two rings per range, rings along the line of
    sight, working cap 16) are replayed on the target like the defaults."""
    from peerfix.budget.build import TargetConfig
    from peerfix.budget.capture import ROBUST_RUNS
    from peerfix.budget.report import budget_report
    from peerfix.core._pfx import ffi
    from peerfix.reference.params import ROBUST_ITERATIONS, ROBUST_PRESET

    assert all(r.robust and r.iterations == ROBUST_ITERATIONS for r in ROBUST_RUNS)
    captured, calls = _robust_calls()
    updates = captured.calls["pfx_node_update"]
    assert updates
    for call in updates:  # the node state going in carries the preset's settings
        buf = bytearray(call.args[0].data)  # kept alive while node points into it
        node = ffi.cast("pfx_node_t *", ffi.from_buffer(buf))
        assert node.params.directional_spread == 1 and node.params.working_cap == ROBUST_PRESET["working_cap"]
        assert node.params.blocked_weight > 0
    doc = budget_report(TargetConfig("cortex-m4", "O2"), calls=calls)
    assert doc["mismatched_calls"] == 0 and doc["bit_exact_calls"] == len(calls)


def _budget_on_robust_calls(monkeypatch, argv):
    """`peerfix budget ARGV` replaying the few robust calls in place of a capture: (status,
    report, the keywords the command passed to capture)."""
    import peerfix.budget.report as report

    _, calls = _robust_calls()
    seen = {}

    def fake_capture(*args, **kw):
        seen.update(kw)
        return calls

    monkeypatch.setattr(report, "capture", fake_capture)
    status, stdout = run_cli(["budget", *argv])  # the repository's budget.toml exists
    return status, json.loads(stdout), seen


def test_command_robust_reports_the_settings_and_checks_no_budget(monkeypatch):
    import peerfix.budget.report as report

    status, doc, seen = _budget_on_robust_calls(monkeypatch, ["--robust", "--quick", "--json"])
    assert status == 0
    assert seen["runs"] == report.ROBUST_RUNS
    assert doc["settings"] == "robust preset"
    assert "budget" not in doc  # the release limits are for the defaults: not applied


def test_param_overrides_reach_the_captured_node_state():
    """--param's settings are the estimator settings of the captured runs: the node
    state each replayed update starts from carries them."""
    from peerfix.budget.capture import Run, capture
    from peerfix.core._pfx import ffi

    run = Run("open-field", 0, 4, iterations=1, overrides=(("working_cap", 2),))
    assert run.name.endswith(" working_cap=2")
    updates = capture(4, 2, runs=(run,)).calls["pfx_node_update"]
    assert updates
    for call in updates:
        buf = bytearray(call.args[0].data)
        node = ffi.cast("pfx_node_t *", ffi.from_buffer(buf))
        assert node.params.working_cap == 2


def test_command_param_labels_the_settings_and_checks_no_budget(monkeypatch):
    import peerfix.budget.report as report

    status, doc, seen = _budget_on_robust_calls(
        monkeypatch, ["--quick", "--json", "--param", "candidate_cap=32", "--param", "ring_arc_spacing_m=1.5"])
    assert status == 0
    assert all(r.overrides == (("candidate_cap", 32), ("ring_arc_spacing_m", 1.5)) for r in seen["runs"])
    assert [r.preset for r in seen["runs"]] == [r.preset for r in report.RUNS]
    assert doc["settings"] == "defaults, candidate_cap=32, ring_arc_spacing_m=1.5"
    assert "budget" not in doc  # the release limits are for the defaults: not applied


def test_command_param_refuses_an_unknown_setting():
    with pytest.raises(SystemExit, match="--param 'nonsense=1': expected NAME=VALUE"):
        run_cli(["budget", "--quick", "--param", "nonsense=1"])


def test_p90_is_numpys_percentile():
    """The cycle p90 of the report is the 90th percentile as numpy computes it
    (linear interpolation between order statistics, numpy.percentile's default), to whole cycles."""
    from types import SimpleNamespace

    import numpy as np
    from peerfix.budget.report import _stats

    rng = np.random.default_rng(3)
    for n in (1, 2, 7, 104):
        cycles = rng.integers(1_000, 400_000, size=n)
        rows = [SimpleNamespace(instructions=int(c) // 2, cycles=int(c), stack_bytes=64) for c in cycles]
        st = _stats(rows, 64.0)
        assert st["cycles_p90"] == pytest.approx(np.percentile(cycles, 90), abs=0.5), n
        assert st["cycles_median"] <= st["cycles_p90"] <= st["cycles_max"]
