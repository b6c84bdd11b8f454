"""The target budget report: cost, size and bit-exactness of the core on one target.

:func:`budget_report` builds the core for a target (peerfix.budget.build),
replays captured calls of every entry point in the emulator
(peerfix.budget.capture), and gathers one JSON-ready document: per entry
point and configuration the median and maximum instructions and estimated
cycles (and the time at a stated clock), flash and static RAM, the sizes of
the caller-owned structs on the target, worst-case stack per entry point
(static call-graph bound and measured high-water mark), message bytes per K,
and the bit-exact / mismatched call counts.  :func:`render_markdown` turns it
into the table a person reads; :func:`check_budget` holds it against the
limits of budget.toml; peerfix.budget.compare holds it against an earlier
release's report.

Cycle figures are an ESTIMATE: the documented instruction timings of
peerfix.budget.timing summed over the emulated instructions, zero wait states.
"""

from __future__ import annotations

import json
import statistics
import sys
from dataclasses import dataclass
from functools import lru_cache
from pathlib import Path

from peerfix.budget.build import ROOT, TAG_API, TAG_IMAGE_DIR, BuildResult, TargetConfig, build, read_layout, sizes
from peerfix.budget.capture import (
    ENTRY_POINTS,
    HEADLINE,
    HEADLINE_BUCKETS,
    ROBUST_RUNS,
    RUNS,
    CapturedCall,
    CaptureSet,
    Replayed,
    capture,
    is_headline,
    replay,
    with_overrides,
)
from peerfix.budget.compare import FUNCTION_ROWS
from peerfix.budget.stack import analyse
from peerfix.budget.timing import ESTIMATE_NOTE, MODELS

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover
    import tomli as tomllib

DEFAULT_CLOCK_MHZ = 64.0
DEFAULT_BUDGET = ROOT / "budget.toml"
# Calls per entry point; calls of each headline bucket (uniform and tracking prior).  The full
# capture takes every distinct headline call the runs make (104 and 113 with capture.RUNS), so its
# headline maxima are over all of them, not over a sample.
FULL_CALLS, FULL_HEADLINE = 1000, 250
QUICK_CALLS, QUICK_HEADLINE = 100, 20
LEFT_OUT = ("flash wait states and flash accelerators", "caches", "bus contention (DMA, other masters)",
            "interrupts and their latency")
MAX_LISTED_MISMATCHES = 50
LARGEST_FUNCTIONS = 15  # rows of the report's flash table (the JSON has every function)


# ---- measurement -------------------------------------------------------------------


def settings_label(robust: bool, overrides: tuple[tuple[str, object], ...] = ()) -> str:
    """The report's "settings": which estimator settings the captured runs used."""
    label = "robust preset" if robust else "defaults"
    return label + "".join(f", {k}={v}" for k, v in overrides)


@lru_cache(maxsize=8)
def replay_all(elf: str, key: str, cpu: str, calls: tuple[CapturedCall, ...]) -> tuple[Replayed, ...]:
    """Every call replayed on one emulator (cached: the same image and calls give the same figures)."""
    from peerfix.budget.emulator import Emulator

    em = Emulator.from_elf(elf, cpu)
    return tuple(replay(em, c) for c in calls)


def _message_bytes(result: BuildResult) -> dict[str, int]:
    """pfx_wire_size(K) run on the target, K = 1..PFX_MAX_COMPONENTS."""
    from peerfix.budget.emulator import Emulator
    from peerfix.core._pfx import lib

    em = Emulator.from_elf(result.elf, result.config.cpu)
    return {str(k): em.call("pfx_wire_size", k, argtypes=("u32",), restype="u32").value
            for k in range(1, lib.PFX_MAX_COMPONENTS + 1)}


def _num(x: float) -> int | float:
    return int(x) if float(x).is_integer() else round(float(x), 1)


def _stats(rows: list[Replayed], clock_mhz: float) -> dict:
    instr = [r.instructions for r in rows]
    cyc = [r.cycles for r in rows]
    med, mx = statistics.median(cyc), max(cyc)
    # p90 by linear interpolation between order statistics (numpy's default method):
    # how slow the slowest tenth of the calls is, beside the single worst one.
    p90 = statistics.quantiles(cyc, n=10, method="inclusive")[-1] if len(cyc) > 1 else cyc[0]
    return {
        "calls": len(rows),
        "instructions_median": _num(statistics.median(instr)),
        "instructions_max": max(instr),
        "cycles_median": _num(med),
        "cycles_p90": round(p90),  # whole cycles: the estimate is no finer
        "cycles_max": mx,
        "time_median_us": round(med / clock_mhz, 1),
        "time_max_us": round(mx / clock_mhz, 1),
        "stack_measured_bytes": max(r.stack_bytes for r in rows),
    }


def budget_report(
    config: TargetConfig,
    clock_mhz: float = DEFAULT_CLOCK_MHZ,
    quick: bool = False,
    calls: CaptureSet | list[CapturedCall] | None = None,
    seed: int = 0,
    robust: bool = False,
    overrides: tuple[tuple[str, object], ...] = (),
) -> dict:
    """The budget document of one target configuration (JSON-ready).

    ``calls``: the captured calls to replay (default: :func:`capture` with
    1000 calls per entry point, 100 when ``quick``, from the scenario runs of
    capture.RUNS, or of capture.ROBUST_RUNS when ``robust``: the robust
    preset's settings, whose cost the release budget does not cover).
    ``overrides``: estimator settings (name, value) every captured run uses
    instead of its own (a cost study; the release budget does not cover it)."""
    if clock_mhz <= 0:
        raise ValueError(f"clock {clock_mhz} MHz: must be > 0")
    result = build(config)
    if calls is None:
        calls = capture(*((QUICK_CALLS, QUICK_HEADLINE) if quick else (FULL_CALLS, FULL_HEADLINE)), seed=seed,
                        runs=with_overrides(ROBUST_RUNS if robust else RUNS, overrides))
    captured = calls if isinstance(calls, CaptureSet) else None
    call_list = calls.all_calls() if isinstance(calls, CaptureSet) else list(calls)
    replayed = replay_all(str(result.elf), result.key, config.cpu, tuple(call_list))

    size = sizes(result.elf)
    tag = build(config, out_root=ROOT / "build" / TAG_IMAGE_DIR, roots=list(TAG_API))
    tag_size = sizes(tag.elf)
    layout = read_layout(result.elf)
    stack = analyse(result.elf, result.su_files, result.ci_files, result.public_functions)
    messages = _message_bytes(result)
    model = MODELS[config.cpu]

    entries: dict[str, dict] = {}
    for entry in ENTRY_POINTS:
        rows = [r for r in replayed if r.call.entry == entry]
        if not rows:
            continue
        by_bucket: dict[tuple, list[Replayed]] = {}
        for r in rows:
            by_bucket.setdefault(r.call.bucket, []).append(r)
        entries[entry] = {
            **_stats(rows, clock_mhz),
            "bit_exact": sum(r.bit_exact for r in rows),
            "mismatched": sum(not r.bit_exact for r in rows),
            "stack_static_bytes": stack.entries[entry].total,
            "stack_path": [fn for fn, _, _ in stack.entries[entry].path],
            "configs": [{**dict(b), **_stats(by_bucket[b], clock_mhz)} for b in sorted(by_bucket)],
        }

    updates = [r for r in replayed if r.call.entry == "pfx_node_update"]
    headline = [r for r in updates if is_headline(r.call)]
    head = _stats(headline, clock_mhz) if headline else None
    # The headline split by where the update starts: the rows of its two buckets (capture.HEADLINE_BUCKETS,
    # acquisition from the uniform prior, tracking from last epoch's predicted belief) in the update's table.
    update_rows = entries.get("pfx_node_update", {}).get("configs", [])
    prior_stats = {kind: next((c for c in update_rows if all(c.get(k) == v for k, v in bucket)), None)
                   for kind, bucket in zip(("acquisition", "tracking"), HEADLINE_BUCKETS)}
    mismatched = [r for r in replayed if not r.bit_exact]
    worst_entry = max(entries, key=lambda e: entries[e]["stack_static_bytes"]) if entries else None
    per_entry_counts = {e: v["calls"] for e, v in entries.items()}
    doc = {
        "target": config.cpu,
        "opt": config.opt,
        "config": config.name,
        "build_key": result.key,  # hash of compiler, flags and every core source: which core was measured
        "clock_mhz": clock_mhz,
        "quick": quick,
        "settings": settings_label(robust, overrides),
        "update_config": dict(HEADLINE),
        "update_calls": len(headline),
        "update_cycles_median": head["cycles_median"] if head else None,
        "update_cycles_max": head["cycles_max"] if head else None,
        "update_cycles_p90": head["cycles_p90"] if head else None,
        "update_instructions_median": head["instructions_median"] if head else None,
        "update_instructions_max": head["instructions_max"] if head else None,
        "update_time_max_us": head["time_max_us"] if head else None,
        "update_cycles_max_any": max((r.cycles for r in updates), default=None),
        **{f"update_{fig}_{kind}": (st[fig] if st else None)
           for kind, st in prior_stats.items() for fig in ("calls", "cycles_median", "cycles_p90", "cycles_max")},
        "flash_bytes": size.flash,
        "flash_sections": size.flash_sections,
        "flash_functions": dict(sorted(size.functions.items(), key=lambda kv: (-kv[1], kv[0]))),
        "flash_data": dict(sorted(size.objects.items(), key=lambda kv: (-kv[1], kv[0]))),  # tables
        "flash_bytes_tag_image": tag_size.flash,
        "tag_image": {
            "roots": list(TAG_API),
            "sections": tag_size.flash_sections,
            # public functions without code of their own in the tag image: unused by a tag, or inlined
            "absent_functions": sorted(set(result.public_functions) - tag_size.linked_functions),
        },
        "ram_static_bytes": size.ram_static,
        "node_state_bytes": layout["sizeof pfx_node_t"],
        "inbox_bytes": layout["sizeof pfx_inbox_t"],
        "workspace_bytes": layout["sizeof pfx_workspace_t"],
        "stack_bytes": entries[worst_entry]["stack_static_bytes"] if worst_entry else None,
        "stack_entry": worst_entry,
        "stack_measured_bytes": max((r.stack_bytes for r in replayed), default=None),
        "message_bytes": messages,
        "message_bytes_k4": messages["4"],
        "captured_calls": len(replayed),
        "calls_per_entry": per_entry_counts,
        "calls_per_entry_min": min(per_entry_counts.values(), default=0),
        "bit_exact_calls": len(replayed) - len(mismatched),
        "mismatched_calls": len(mismatched),
        "bit_exact_fraction": (len(replayed) - len(mismatched)) / len(replayed) if replayed else 0.0,
        "mismatches": [
            {"entry": r.call.entry, "config": r.call.config, "source": r.call.source, "problems": r.mismatch}
            for r in mismatched[:MAX_LISTED_MISMATCHES]
        ],
        "cycle_model": {
            "estimate": True,
            "note": ESTIMATE_NOTE,
            "source": model.source,
            "module": "peerfix.budget.timing",
            "choices": list(model.notes),
            "left_out": list(LEFT_OUT),
        },
        "captured_from": [r.name for r in captured.runs] + ["host predict on captured nodes"] if captured else [],
        "entries": entries,
    }
    return doc


# ---- the release budget --------------------------------------------------------------


@dataclass(frozen=True)
class LimitCheck:
    table: str  # "targets" or "release"
    key: str  # a key of the report document
    bound: str  # "at_most" or "at_least"
    limit: float
    value: float | None
    ok: bool

    def as_dict(self) -> dict:
        return {"key": self.key, "bound": self.bound, "limit": self.limit, "value": self.value, "ok": self.ok}


def load_budget(path: Path = DEFAULT_BUDGET) -> dict:
    with open(path, "rb") as fh:
        budget = tomllib.load(fh)
    if not isinstance(budget.get("config"), str):
        raise ValueError(f"{path}: needs config = \"<cpu>-<opt>\" (the build its limits are for)")
    for table in ("targets", "release"):
        if not isinstance(budget.get(table), dict):
            raise ValueError(f"{path}: needs a [{table}] table")
        for key, spec in budget[table].items():
            if not isinstance(spec, dict) or len(spec) != 1 or next(iter(spec)) not in ("at_most", "at_least"):
                raise ValueError(f"{path}: [{table}] {key}: expected {{ at_most = N }} or {{ at_least = N }}")
    return budget


def check_budget(doc: dict, budget: dict) -> list[LimitCheck]:
    """Every limit of [targets] and [release] against the document (a missing figure fails)."""
    out = []
    for table in ("targets", "release"):
        for key, spec in budget.get(table, {}).items():
            bound, limit = next(iter(spec.items()))
            value = doc.get(key)
            ok = value is not None and (value <= limit if bound == "at_most" else value >= limit)
            out.append(LimitCheck(table, key, bound, limit, value, ok))
    return out


def attach_budget(doc: dict, budget: dict, path: Path | None = None) -> list[LimitCheck]:
    """Put the budget's verdict into doc["budget"]; only for the configuration it is written for."""
    applies = budget.get("config") == doc["config"]
    checks = check_budget(doc, budget) if applies else []
    doc["budget"] = {
        "file": str(path) if path else None,
        "config": budget.get("config"),
        "applies": applies,
        "targets": [c.as_dict() for c in checks if c.table == "targets"],
        "release": [c.as_dict() for c in checks if c.table == "release"],
        "targets_met": all(c.ok for c in checks if c.table == "targets") if applies else None,
        "release_ok": all(c.ok for c in checks if c.table == "release") if applies else None,
    }
    return checks


# ---- output ---------------------------------------------------------------------------


def _n(x) -> str:
    if x is None:
        return "-"
    if isinstance(x, float) and not x.is_integer():
        return f"{x:,.1f}"
    return f"{int(x):,}"


def _ms(us) -> str:
    return "-" if us is None else f"{us / 1000:,.2f}"


def _table(head: list[str], rows: list[list[str]]) -> list[str]:
    out = ["| " + " | ".join(head) + " |", "|" + "|".join("---" for _ in head) + "|"]
    out += ["| " + " | ".join(r) + " |" for r in rows]
    return out


def _signed(x) -> str:
    return "-" if x is None else ("+" if x > 0 else "") + _n(x)


def render_comparison(cmp: dict) -> list[str]:
    """Markdown lines of a report held against an earlier one (peerfix.budget.compare)."""
    limit = cmp["max_growth_percent"]
    lines = ["", f"## Against {cmp['file']}", "",
             f"Earlier core {cmp['build_key_before'] or '?'}, this core {cmp['build_key_now'] or '?'}"
             + (f"; growth allowed: {limit:g} %." if limit is not None else "."), ""]
    rows = []
    for c in cmp["changes"]:
        if c["before"] is None and c["now"] is None:
            continue
        mark = "GREW BEYOND" if c["grew_beyond"] else ("not in the earlier report" if c["before"] is None else "")
        rows.append([f"{c['figure']} ({c['unit']})", _n(c["before"]), _n(c["now"]), _signed(c["change"]),
                     "-" if c["percent"] is None else f"{c['percent']:+.1f}", mark])
    lines += _table(["figure", "before", "now", "change", "change %", ""], rows)
    syms = cmp["symbols"]
    if syms:
        shown = syms[:FUNCTION_ROWS]
        lines += ["", f"Functions and tables whose size changed most ({len(shown)} of {len(syms)}; bytes):", ""]
        lines += _table(["symbol", "kind", "before", "now", "change"],
                        [[f["symbol"], f["kind"], _n(f["before"]), _n(f["now"]), _signed(f["change"])]
                         for f in shown])
    else:
        lines += ["", "No function or table changed size."]
    lines += [""] + [f"- {n}" for n in cmp["notes"]]
    if cmp["grew_beyond"]:
        lines += ["", f"GREW BEYOND {limit:g} %: {', '.join(cmp['grew_beyond'])}"]
    return lines


# Configuration keys of the per-entry tables and their column names.
CONFIG_COLUMNS = {"neighbours": "neighbours", "K": "K", "tracking": "prior", "components": "components"}


def _config_cell(key: str, value) -> str:
    if key == "tracking":
        return "tracking" if value else "uniform"
    return _n(value)


def render_markdown(doc: dict) -> str:
    clock = doc["clock_mhz"]
    model = doc["cycle_model"]
    lines = [
        f"# peerfix target budget: {doc['target']} -{doc['opt']} at {_n(clock)} MHz",
        "",
        f"**{model['note'][0].upper()}{model['note'][1:]}.** Timing table: {model['source']} "
        f"({model['module']}); model choices: {'; '.join(model['choices'])}. "
        f"Left out: {', '.join(model['left_out'])}. Times are cycles / clock.",
        "",
        f"Estimator settings of the captured runs: {doc.get('settings', 'defaults')}.",
        "",
        f"Calls: {doc['captured_calls']:,} captured from scenario runs ({doc['calls_per_entry_min']:,} or more "
        f"per entry point{', quick sample' if doc['quick'] else ''}), each replayed on the emulated target "
        f"and compared byte for byte with the host. Maxima are over these calls: measured worst cases, "
        f"not an execution-time bound for every input (a call's work is bounded by the core's "
        f"compile-time caps on candidates, rings, neighbours and iterations).",
        "",
        "## Summary",
        "",
    ]
    hl = doc["update_config"]
    lines += _table(["figure", "value"], [
        [f"update, {hl['neighbours']} heard broadcasts, K = {hl['K']}: cycles median / p90 / max",
         f"{_n(doc['update_cycles_median'])} / {_n(doc['update_cycles_p90'])} / {_n(doc['update_cycles_max'])} "
         f"(median {_ms(doc['update_cycles_median'] / clock if doc['update_cycles_median'] else None)} ms, "
         f"max {_ms(doc['update_time_max_us'])} ms) over {doc['update_calls']} calls"],
        *[[f"update, {hl['neighbours']} heard, K = {hl['K']}, from {what}: cycles median / p90 / max",
           f"{_n(doc[f'update_cycles_median_{kind}'])} / {_n(doc[f'update_cycles_p90_{kind}'])} / "
           f"{_n(doc[f'update_cycles_max_{kind}'])} over {_n(doc[f'update_calls_{kind}'])} calls"]
          for kind, what in (("acquisition", "the uniform prior (acquisition)"),
                             ("tracking", "a tracking prior (steady state)"))
          if doc.get(f"update_calls_{kind}") is not None],
        ["update, any configuration: cycles max", _n(doc["update_cycles_max_any"])],
        ["flash (text + rodata + exidx + data)",
         f"{_n(doc['flash_bytes'])} B (text {_n(doc['flash_sections']['text'])}, "
         f"rodata {_n(doc['flash_sections']['rodata'])})"],
        [f"flash of a tag image (links only the {len(doc['tag_image']['roots'])} functions a tag calls)",
         f"{_n(doc['flash_bytes_tag_image'])} B (text {_n(doc['tag_image']['sections']['text'])}, "
         f"rodata {_n(doc['tag_image']['sections']['rodata'])}); "
         f"{len(doc['tag_image']['absent_functions'])} public functions without code of their own"],
        ["static RAM (data + bss)", f"{_n(doc['ram_static_bytes'])} B"],
        ["node state (sizeof pfx_node_t, per tag)", f"{_n(doc['node_state_bytes'])} B"],
        ["inbox / workspace (caller-owned RAM)", f"{_n(doc['inbox_bytes'])} / {_n(doc['workspace_bytes'])} B"],
        [f"worst-case stack (static bound, {doc['stack_entry']})",
         f"{_n(doc['stack_bytes'])} B (measured high-water {_n(doc['stack_measured_bytes'])} B)"],
        ["message bytes, K = 4", f"{_n(doc['message_bytes_k4'])} B"],
        ["bit-exact calls / mismatched", f"{_n(doc['bit_exact_calls'])} / {_n(doc['mismatched_calls'])}"],
    ])
    b = doc.get("budget")
    if b and b["applies"]:
        lines += ["", f"## Budget ({b['file'] or 'budget.toml'})", ""]
        rows = []
        for table, verdicts in (("targets", ("met", "NOT MET")), ("release", ("ok", "EXCEEDED"))):
            for c in b[table]:
                sign = "<=" if c["bound"] == "at_most" else ">="
                rows.append([table, c["key"], _n(c["value"]), f"{sign} {_n(c['limit'])}",
                             verdicts[0] if c["ok"] else verdicts[1]])
        lines += _table(["table", "figure", "value", "limit", "status"], rows)
        lines += ["", "[targets] are the goals (reported, never failing); [release] limits are regression "
                      "guards a release must hold."]
    elif b:
        lines += ["", f"Budget: {b['file']} is written for {b['config']}; not applied to {doc['config']}."]
    if doc.get("against"):
        lines += render_comparison(doc["against"])

    lines += ["", "## Entry points", ""]
    rows = []
    for name, e in doc["entries"].items():
        rows.append([name, _n(e["calls"]), _n(e["instructions_median"]), _n(e["instructions_max"]),
                     _n(e["cycles_median"]), _n(e["cycles_max"]), _n(e["time_max_us"]),
                     _n(e["stack_static_bytes"]), _n(e["stack_measured_bytes"]), _n(e["mismatched"])])
    lines += _table(["entry point", "calls", "instr median", "instr max", "cycles median", "cycles max",
                     "time max (us)", "stack bound (B)", "stack measured (B)", "mismatched"], rows)

    for name, e in doc["entries"].items():
        keys = [k for k in e["configs"][0] if k in CONFIG_COLUMNS]
        heads = [CONFIG_COLUMNS[k] for k in keys]
        lines += ["", f"### {name} by {' and '.join(heads)}", ""]
        rows = [[_config_cell(k, c[k]) for k in keys] +
                [_n(c["calls"]), _n(c["instructions_median"]), _n(c["instructions_max"]), _n(c["cycles_median"]),
                 _n(c["cycles_max"]), _n(c["time_median_us"]), _n(c["time_max_us"])]
                for c in e["configs"]]
        lines += _table(heads + ["calls", "instr median", "instr max", "cycles median", "cycles max",
                                 "time median (us)", "time max (us)"], rows)

    funcs = list(doc["flash_functions"].items())
    shown = funcs[:LARGEST_FUNCTIONS]
    lines += ["", f"## Largest functions (code bytes; {len(shown)} of {len(funcs)}, "
                  f"{_n(sum(b for _, b in shown))} of {_n(sum(b for _, b in funcs))} B)", ""]
    lines += _table(["function", "bytes"], [[name, _n(nbytes)] for name, nbytes in shown])

    msg = doc["message_bytes"]
    lines += ["", "## Message bytes per K (pfx_wire_size on the target)", ""]
    lines += _table(["K"] + list(msg), [["bytes"] + [str(v) for v in msg.values()]])
    if doc["mismatched_calls"]:
        lines += ["", f"## MISMATCHES: {doc['mismatched_calls']} calls differ from the host", ""]
        for m in doc["mismatches"]:
            lines.append(f"- {m['entry']} {m['config']} from {m['source']}: {'; '.join(m['problems'])}")
    return "\n".join(lines) + "\n"


def write_report(doc: dict, out_dir: Path) -> tuple[Path, Path]:
    out_dir.mkdir(parents=True, exist_ok=True)
    md, js = out_dir / "budget.md", out_dir / "budget.json"
    md.write_text(render_markdown(doc))
    js.write_text(json.dumps(doc, indent=2) + "\n")
    return md, js
