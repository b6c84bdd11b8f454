"""One budget report against an earlier one: what a firmware release changed on the tag.

`peerfix budget --against OLD/budget.json` holds the report it has just made
against a report of an earlier release (the budget.json that `peerfix budget
--out` wrote then) and lists, figure by figure, the value before, the value
now and the change: flash (whole core and tag image), RAM, stack, message
bytes, the update's cycles (headline, by prior, any configuration) and each
entry point's median and maximum cycles and stack bound.  The functions and
tables that grew or shrank most are listed beside them, so that a change in
flash points at its cause.  With ``max_growth_pct`` every compared figure that grew
by more than that share is marked, and the command fails.

Only like is compared with like: both reports must be for the same build
(cpu and optimisation level) and the same estimator settings; anything else
is an input error naming the file and the field.  The cycles of both reports
are ESTIMATES from the same cycle model only when the model source agrees;
the comparison says so when it does not.  Cycle changes mix two causes: the
code, and the captured inputs (the calls come from scenario runs of each
release's own core).  A quick report against a full one compares different
samples: the comparison says so, and refuses a growth limit for them.
"""

from __future__ import annotations

import json
from dataclasses import dataclass
from pathlib import Path

from peerfix.errors import InputError

# The summary figures compared, in the order shown: (key, unit).
FIGURES = (
    ("flash_bytes", "B"),
    ("flash_bytes_tag_image", "B"),
    ("ram_static_bytes", "B"),
    ("node_state_bytes", "B"),
    ("inbox_bytes", "B"),
    ("workspace_bytes", "B"),
    ("stack_bytes", "B"),
    ("stack_measured_bytes", "B"),
    ("message_bytes_k4", "B"),
    ("update_cycles_median", "cycles"),
    ("update_cycles_max", "cycles"),
    ("update_cycles_median_acquisition", "cycles"),
    ("update_cycles_max_acquisition", "cycles"),
    ("update_cycles_median_tracking", "cycles"),
    ("update_cycles_max_tracking", "cycles"),
    ("update_cycles_max_any", "cycles"),
)
# Per entry point: (field of doc["entries"][name], unit).
ENTRY_FIGURES = (("cycles_median", "cycles"), ("cycles_max", "cycles"), ("stack_static_bytes", "B"))
# Fields a report must have to be compared (the rest may be missing in an older release's report).
REQUIRED = ("config", "target", "opt", "entries", "flash_bytes")
FUNCTION_ROWS = 12  # functions and tables listed by the size of their change
# The report's per-symbol flash tables and what each holds.
SYMBOL_TABLES = {"flash_functions": "code", "flash_data": "table"}


@dataclass(frozen=True)
class Change:
    figure: str  # a key of the report, or "<entry point> <field>"
    unit: str
    before: float | None  # None: not in the earlier report
    now: float | None
    grew_beyond: bool = False  # grew by more than the allowed share

    @property
    def delta(self) -> float | None:
        return None if self.before is None or self.now is None else self.now - self.before

    @property
    def percent(self) -> float | None:
        if self.delta is None or self.before == 0:
            return None
        return 100.0 * self.delta / self.before

    def as_dict(self) -> dict:
        return {"figure": self.figure, "unit": self.unit, "before": self.before, "now": self.now,
                "change": self.delta, "percent": None if self.percent is None else round(self.percent, 2),
                "grew_beyond": self.grew_beyond}


def _line_of(text: str, key: str) -> int:
    """1-based line of the first `"key":` in a JSON text (0 when absent): where to look."""
    needle = f'"{key}":'
    for number, line in enumerate(text.splitlines(), start=1):
        if needle in line:
            return number
    return 0


def load_report(path: Path) -> dict:
    """A budget.json written by `peerfix budget --out` (or --json), checked enough to compare."""
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise InputError(path, 0, None, "no such file (an earlier `peerfix budget --out DIR` writes DIR/budget.json)")
    except (OSError, UnicodeDecodeError) as err:
        raise InputError(path, 0, None, f"cannot read: {err}")
    try:
        doc = json.loads(text)
    except json.JSONDecodeError as err:
        raise InputError(path, err.lineno, None, f"not JSON: {err.msg} (column {err.colno})")
    if not isinstance(doc, dict):
        raise InputError(path, 1, None, "not a budget report (expected a JSON object)")
    for key in REQUIRED:
        if key not in doc:
            raise InputError(path, 0, key, "missing: not a budget report of `peerfix budget`")
    if not isinstance(doc["entries"], dict):
        raise InputError(path, _line_of(text, "entries"), "entries", "expected an object of entry points")
    for key, _unit in FIGURES:
        value = doc.get(key)
        if value is not None and (isinstance(value, bool) or not isinstance(value, (int, float))):
            raise InputError(path, _line_of(text, key), key, f"expected a number, found {value!r}")
    for name, entry in doc["entries"].items():
        for field, _unit in ENTRY_FIGURES:
            value = entry.get(field) if isinstance(entry, dict) else None
            if value is not None and (isinstance(value, bool) or not isinstance(value, (int, float))):
                raise InputError(path, _line_of(text, name), f"entries.{name}.{field}",
                                 f"expected a number, found {value!r}")
    for key in SYMBOL_TABLES:
        table = doc.get(key, {})
        if not isinstance(table, dict) or not all(isinstance(v, int) for v in table.values()):
            raise InputError(path, _line_of(text, key), key, "expected an object of symbol name: bytes")
    return doc


def _grew_beyond(before, now, max_growth_pct: float | None) -> bool:
    if max_growth_pct is None or before is None or now is None or now <= before:
        return False
    if before == 0:
        return True  # from nothing: any growth is beyond a share
    return 100.0 * (now - before) / before > max_growth_pct


def check_comparable(before: dict, before_path: Path, config: str, settings: str) -> None:
    """InputError unless the earlier report is of build ``config`` with estimator ``settings``."""
    for key, want in (("config", config), ("settings", settings)):
        old = before.get(key, "defaults" if key == "settings" else None)
        if old != want:
            raise InputError(before_path, 0, key, f"the earlier report is for {old!r}, this one for {want!r}: "
                                                  f"compare reports of the same build and settings")


def compare_reports(before: dict, now: dict, before_path: Path, max_growth_pct: float | None = None) -> dict:
    """The comparison document (JSON-ready) of report ``now`` against ``before`` (read from ``before_path``)."""
    check_comparable(before, before_path, now["config"], now.get("settings", "defaults"))
    if max_growth_pct is not None and max_growth_pct < 0:
        raise ValueError(f"max growth {max_growth_pct} %: must be >= 0")
    if max_growth_pct is not None and bool(before.get("quick")) != bool(now.get("quick")):
        raise InputError(before_path, 0, "quick", "a growth limit needs reports of the same sample: both "
                                                  "--quick or both full")
    changes = [Change(key, unit, before.get(key), now.get(key),
                      _grew_beyond(before.get(key), now.get(key), max_growth_pct)) for key, unit in FIGURES]
    for name in now["entries"]:
        old_entry = before["entries"].get(name) or {}
        for field, unit in ENTRY_FIGURES:
            b, n = old_entry.get(field), now["entries"][name].get(field)
            changes.append(Change(f"{name} {field}", unit, b, n, _grew_beyond(b, n, max_growth_pct)))
    symbols = []
    notes = []
    for key, kind in SYMBOL_TABLES.items():
        if key not in before or key not in now:
            notes.append(f"{key} is missing from {'the earlier' if key not in before else 'this'} report: "
                         f"its symbols are not compared")
            continue
        old_t, new_t = before[key], now[key]
        symbols += [{"symbol": name, "kind": kind, "before": old_t.get(name), "now": new_t.get(name),
                     "change": new_t.get(name, 0) - old_t.get(name, 0)}
                    for name in sorted(set(old_t) | set(new_t)) if new_t.get(name, 0) != old_t.get(name, 0)]
    symbols.sort(key=lambda f: (-abs(f["change"]), f["symbol"]))
    if bool(before.get("quick")) != bool(now.get("quick")):
        notes.append("one report is --quick and the other full: their cycle figures come from different samples")
    old_model = (before.get("cycle_model") or {}).get("source")
    if old_model != (now.get("cycle_model") or {}).get("source"):
        notes.append(f"the cycle model differs (earlier: {old_model!r}): cycle changes are not the code's alone")
    if before.get("captured_from") != now.get("captured_from"):
        notes.append("the calls were captured from different scenario runs")
    notes.append("cycles are estimates; a change mixes the code's speed and the captured inputs of each "
                 "release's own runs")
    return {
        "file": str(before_path),
        "build_key_before": before.get("build_key"),
        "build_key_now": now.get("build_key"),
        "max_growth_percent": max_growth_pct,
        "changes": [c.as_dict() for c in changes],
        "grew_beyond": [c.figure for c in changes if c.grew_beyond],
        "symbols": symbols,
        "notes": notes,
    }
