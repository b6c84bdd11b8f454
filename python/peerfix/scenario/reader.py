"""Strict reader for the scenario folder format (see docs/scenario-format.md).

The reader checks the whole folder before it returns anything: the first bad
value raises InputError(path, line, field, message) naming the file, the
1-based line and the column or TOML key, and no partial Scenario escapes.
Nothing is dropped silently: unknown keys in [site]/[ranging], blank lines
inside a table and ranges to undeclared nodes are all errors.
"""

from __future__ import annotations

import csv
import difflib
import io
import math
import re
import sys
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Sequence

import numpy as np

from ..errors import InputError
from .model import RangeTable, RangingModel, Scenario, SetAsideRow, Site, Tracking, Truth

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover - exercised only on Python 3.10
    import tomli as tomllib

SITE_FILE = "site.toml"
ANCHORS_FILE = "anchors.csv"
AGENTS_FILE = "agents.csv"
RANGES_FILE = "ranges.csv"
TRUTH_FILE = "truth.csv"

ANCHOR_COLUMNS = ("node_id", "x_m", "y_m")
ANCHOR_Z_COLUMN = "z_m"  # optional: mounting height (see "Anchors mounted high")
AGENT_COLUMNS = ("node_id",)
RANGE_COLUMNS = ("t_s", "node_a", "node_b", "range_m")
TRUTH_COLUMNS = ("t_s", "node_id", "x_m", "y_m")

SITE_KEYS = ("name", "bounds_m", "tag_height_m")
TRACKING_KEYS = ("epoch_window_s", "walk_speed_mps", "silence_timeout_s")
CHECKED_TABLES = ("site", "ranging", "tracking")
RANGING_REQUIRED = ("sigma_m", "radio_range_m")
RANGING_OPTIONAL = ("sigma_per_m", "blocked_probability", "blocked_bias_mean_m", "max_range_m")

# A plain decimal number: no "nan"/"inf", no "1_000", no hex (float() takes all three).
_DECIMAL = re.compile(r"[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?")


def read_scenario(folder: str | Path, *, set_aside_bad_rows: bool = False) -> Scenario:
    """Read and validate a scenario folder; raise InputError at the first bad value.

    set_aside_bad_rows=True: a malformed ranges.csv row (bad number, bad node,
    negative or absurd range, wrong field count, blank line) is skipped instead
    and listed in Scenario.set_aside with its line, field and reason.  Every
    other file stays strict.
    """
    folder = Path(folder)
    if not folder.exists():
        raise InputError(folder, 0, None, "scenario folder not found")
    if not folder.is_dir():
        raise InputError(folder, 0, None, "not a folder; a scenario is a folder of files")

    site = _read_site(_required_file(folder / SITE_FILE))
    anchors_path = _required_file(folder / ANCHORS_FILE)
    anchor_ids, anchor_xy, anchor_z, anchor_extra = _read_anchors(anchors_path)
    anchor_set = set(anchor_ids)
    if anchor_z is not None and site.tag_height_m is None:
        raise InputError(
            anchors_path, 1, ANCHOR_Z_COLUMN,
            f"anchors carry z_m but {SITE_FILE} [site] states no tag_height_m; slant ranges cannot be reduced without it",
        )

    agent_ids: list[str] | None = None
    agent_extra: dict[str, list[str]] = {}
    agents_path = _optional_file(folder / AGENTS_FILE)
    if agents_path is not None:
        agent_ids, agent_extra = _read_agents(agents_path, anchor_set)

    truth = None
    truth_path = _optional_file(folder / TRUTH_FILE)
    if truth_path is not None:
        truth = _read_truth(truth_path, anchor_set, None if agent_ids is None else set(agent_ids))
        if agent_ids is None:
            # Agent-set rule, second choice: the non-anchor ids of truth.csv.
            agent_ids = _first_seen(truth.node_id, anchor_set)

    ranges_path = _required_file(folder / RANGES_FILE)
    declared = None if agent_ids is None else set(agent_ids)
    set_aside: list[SetAsideRow] | None = [] if set_aside_bad_rows else None
    ranges = _read_ranges(ranges_path, site.ranging, anchor_set, declared, set_aside)
    if agent_ids is None:
        # Agent-set rule, last choice: every non-anchor id seen in ranges.csv.
        agent_ids = _first_seen(_interleave(ranges.node_a, ranges.node_b), anchor_set)

    return Scenario(
        site=site,
        anchor_ids=anchor_ids,
        anchor_xy_m=anchor_xy,
        agent_ids=agent_ids,
        ranges=ranges,
        truth=truth,
        anchor_extra=anchor_extra,
        agent_extra=agent_extra,
        anchor_z_m=anchor_z,
        set_aside=set_aside or [],
    )


# --------------------------------------------------------------------------- files


def _required_file(path: Path) -> Path:
    if not path.exists():
        raise InputError(path, 0, None, "required file is missing")
    if not path.is_file():
        raise InputError(path, 0, None, "not a regular file")
    return path


def _optional_file(path: Path) -> Path | None:
    if not path.exists():
        return None
    return _required_file(path)


def _read_text(path: Path) -> str:
    """UTF-8 text (a leading byte-order mark, as spreadsheets write, is dropped)."""
    data = path.read_bytes()
    try:
        return data.decode("utf-8-sig")
    except UnicodeDecodeError as err:
        line = data[: err.start].count(b"\n") + 1
        raise InputError(path, line, None, f"not UTF-8 text (byte {err.start})") from None


# --------------------------------------------------------------------------- site.toml


class _TomlLines:
    """Best-effort map from a TOML key path to the line that sets it.

    tomllib reports no positions for valid documents, so this scans the text
    for table headers and `key =` lines; an unknown path maps to 0 (whole file).
    """

    _HEADER = re.compile(r"^\s*\[(?!\[)\s*([^\]]+?)\s*\]\s*(?:#.*)?$")
    _KEY = re.compile(r"^\s*([A-Za-z0-9_\-.\"' ]+?)\s*=")

    def __init__(self, text: str) -> None:
        self._lines: dict[tuple[str, ...], int] = {}
        table: tuple[str, ...] = ()
        for number, raw in enumerate(text.splitlines(), start=1):
            header = self._HEADER.match(raw)
            if header:
                table = self._split(header.group(1))
                self._lines.setdefault(table, number)
                continue
            key = self._KEY.match(raw)
            if key:
                path = table + self._split(key.group(1))
                for end in range(len(table) + 1, len(path) + 1):
                    self._lines.setdefault(path[:end], number)

    @staticmethod
    def _split(dotted: str) -> tuple[str, ...]:
        return tuple(part.strip().strip("\"'") for part in dotted.split("."))

    def line(self, *path: str) -> int:
        return self._lines.get(tuple(path), 0)


def _read_site(path: Path) -> Site:
    text = _read_text(path)
    try:
        doc = tomllib.loads(text)
    except tomllib.TOMLDecodeError as err:
        found = re.search(r"at line (\d+)", str(err))
        line = int(found.group(1)) if found else len(text.splitlines())
        raise InputError(path, line, None, f"not valid TOML: {err}") from None
    lines = _TomlLines(text)

    def fail(key_path: tuple[str, ...], message: str) -> InputError:
        # Point at the key's own line, else at its table's header.
        line = lines.line(*key_path) or lines.line(*key_path[:1])
        return InputError(path, line, ".".join(key_path), message)

    site_table = _toml_table(doc, "site", fail)
    ranging_table = _toml_table(doc, "ranging", fail)
    _reject_unknown_keys(site_table, "site", SITE_KEYS, fail)
    _reject_unknown_keys(ranging_table, "ranging", RANGING_REQUIRED + RANGING_OPTIONAL, fail)
    tracking_table = _toml_table(doc, "tracking", fail) if "tracking" in doc else {}
    _reject_unknown_keys(tracking_table, "tracking", TRACKING_KEYS, fail)

    if "name" not in site_table:
        raise fail(("site", "name"), "required key is missing")
    name = site_table["name"]
    if not isinstance(name, str) or not name.strip():
        raise fail(("site", "name"), "must be a non-empty string")
    bounds = _bounds(site_table, fail)
    tag_height = None
    if "tag_height_m" in site_table:
        tag_height = _toml_number(site_table["tag_height_m"], ("site", "tag_height_m"), fail)

    def number(key: str, check: str, default: float | None = None) -> float | None:
        if key not in ranging_table:
            if key in RANGING_REQUIRED:
                raise fail(("ranging", key), "required key is missing")
            return default
        value = _toml_number(ranging_table[key], ("ranging", key), fail)
        if check == "positive" and not value > 0:
            raise fail(("ranging", key), f"must be greater than 0, found {value!r}")
        if check == "non-negative" and not value >= 0:
            raise fail(("ranging", key), f"must be 0 or more, found {value!r}")
        if check == "probability" and not 0.0 <= value <= 1.0:
            raise fail(("ranging", key), f"must be a probability in [0, 1], found {value!r}")
        return value

    defaults = RangingModel(sigma_m=1.0, radio_range_m=1.0)
    ranging = RangingModel(
        sigma_m=number("sigma_m", "positive"),
        radio_range_m=number("radio_range_m", "positive"),
        sigma_per_m=number("sigma_per_m", "non-negative", defaults.sigma_per_m),
        blocked_probability=number("blocked_probability", "probability", defaults.blocked_probability),
        blocked_bias_mean_m=number("blocked_bias_mean_m", "positive", defaults.blocked_bias_mean_m),
        max_range_m=number("max_range_m", "positive", defaults.max_range_m),
    )
    def tracking_number(key: str, check: str) -> float | None:
        if key not in tracking_table:
            return None
        value = _toml_number(tracking_table[key], ("tracking", key), fail)
        if check == "positive" and not value > 0:
            raise fail(("tracking", key), f"must be greater than 0, found {value!r}")
        if check == "non-negative" and not value >= 0:
            raise fail(("tracking", key), f"must be 0 or more, found {value!r}")
        return value

    tracking = Tracking(
        epoch_window_s=tracking_number("epoch_window_s", "non-negative"),
        walk_speed_mps=tracking_number("walk_speed_mps", "non-negative"),
        silence_timeout_s=tracking_number("silence_timeout_s", "positive"),
    )
    extra = {key: value for key, value in doc.items() if key not in CHECKED_TABLES}
    return Site(name=name, bounds_m=bounds, ranging=ranging, extra=extra, tag_height_m=tag_height, tracking=tracking)


def _toml_table(doc: dict[str, Any], key: str, fail) -> dict[str, Any]:
    if key not in doc:
        raise fail((key,), f"required table [{key}] is missing")
    table = doc[key]
    if not isinstance(table, dict):
        raise fail((key,), f"must be a table [{key}]")
    return table


def _reject_unknown_keys(table: dict[str, Any], name: str, known: Sequence[str], fail) -> None:
    for key in table:
        if key not in known:
            close = difflib.get_close_matches(key, known, n=1)
            hint = f" (did you mean '{close[0]}'?)" if close else ""
            raise fail((name, key), f"unknown key in [{name}]{hint}; known keys: {', '.join(known)}")


def _toml_number(value: Any, key_path: tuple[str, ...], fail) -> float:
    # bool is an int subclass in Python; `true` is not a number here.
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise fail(key_path, f"must be a number, found {value!r}")
    value = float(value)
    if not math.isfinite(value):
        raise fail(key_path, f"must be a finite number, found {value!r}")
    return value


def _bounds(site_table: dict[str, Any], fail) -> tuple[float, float, float, float]:
    key_path = ("site", "bounds_m")
    if "bounds_m" not in site_table:
        raise fail(key_path, "required key is missing")
    raw = site_table["bounds_m"]
    if not isinstance(raw, list) or len(raw) != 4:
        raise fail(key_path, "must be a list of 4 numbers [xmin, ymin, xmax, ymax]")
    xmin, ymin, xmax, ymax = (_toml_number(v, key_path, fail) for v in raw)
    if not (xmin < xmax and ymin < ymax):
        raise fail(key_path, "needs xmin < xmax and ymin < ymax")
    return (xmin, ymin, xmax, ymax)


# --------------------------------------------------------------------------- CSV tables


@dataclass
class _Table:
    """A parsed CSV file: stripped header, rows with their first line number."""

    path: Path
    columns: list[str]
    rows: list[tuple[int, list[str]]]
    required: Sequence[str]

    def index(self, column: str) -> int:
        return self.columns.index(column)

    def error(self, line: int, field: str | None, message: str) -> InputError:
        return InputError(self.path, line, field, message)

    def extra(self) -> dict[str, list[str]]:
        """Columns beyond the required ones, by name in file order, values as read."""
        return {
            name: [row[i] for _, row in self.rows]
            for i, name in enumerate(self.columns)
            if name not in self.required
        }

    def node_id(self, line: int, row: list[str], column: str) -> str:
        value = row[self.index(column)].strip()
        if not value:
            raise self.error(line, column, "empty node id")
        return value

    def number(self, line: int, row: list[str], column: str) -> float:
        text = row[self.index(column)].strip()
        if not _DECIMAL.fullmatch(text):
            raise self.error(line, column, f"expected a finite decimal number, found {text!r}")
        value = float(text)
        if not math.isfinite(value):  # e.g. 1e999 overflows to inf
            raise self.error(line, column, f"number out of range, found {text!r}")
        return value


def _is_blank(row: list[str]) -> bool:
    return not row or (len(row) == 1 and not row[0].strip())


def _read_table(path: Path, required: Sequence[str], set_aside: list[SetAsideRow] | None = None) -> _Table:
    """set_aside: a list to put blank or wrongly sized rows in instead of raising (ranges.csv only)."""
    text = _read_text(path)
    reader = csv.reader(io.StringIO(text, newline=""), strict=True)
    records: list[tuple[int, list[str]]] = []
    previous_end = 0
    try:
        for row in reader:
            # A quoted field may span lines: report the line the record starts on.
            records.append((previous_end + 1, row))
            previous_end = reader.line_num
    except csv.Error as err:
        raise InputError(path, reader.line_num, None, f"bad CSV: {err}") from None

    if not records or _is_blank(records[0][1]):
        raise InputError(path, 1, None, f"line 1 must be the header: {','.join(required)}")
    columns = [name.strip() for name in records[0][1]]
    seen: set[str] = set()
    for name in columns:
        if not name:
            raise InputError(path, 1, None, "empty column name in header")
        if name in seen:
            raise InputError(path, 1, name, "column appears twice in header")
        seen.add(name)
    for name in required:
        if name not in seen:
            raise InputError(path, 1, name, f"required column is missing from header ({','.join(required)})")

    body = records[1:]
    last = max((i for i, (_, row) in enumerate(body) if not _is_blank(row)), default=-1)
    rows: list[tuple[int, list[str]]] = []
    for i, (line, row) in enumerate(body):
        if _is_blank(row):
            if i < last:
                message = "blank line inside the table (only trailing blank lines are allowed)"
                if set_aside is None:
                    raise InputError(path, line, None, message)
                set_aside.append(SetAsideRow(line, None, "blank_line", message))
            continue
        if len(row) != len(columns):
            message = f"expected {len(columns)} fields as in the header, found {len(row)}"
            if set_aside is None:
                raise InputError(path, line, None, message)
            set_aside.append(SetAsideRow(line, None, "wrong_field_count", message))
            continue
        rows.append((line, row))
    return _Table(path=path, columns=columns, rows=rows, required=required)


def _read_anchors(path: Path) -> tuple[list[str], np.ndarray, np.ndarray | None, dict[str, list[str]]]:
    table = _read_table(path, ANCHOR_COLUMNS)
    has_z = ANCHOR_Z_COLUMN in table.columns
    if has_z:
        # z_m is read as a number, not kept as a text extra.
        table.required = (*ANCHOR_COLUMNS, ANCHOR_Z_COLUMN)
    ids: list[str] = []
    first_line: dict[str, int] = {}
    xy = np.zeros((len(table.rows), 2))
    z = np.zeros(len(table.rows)) if has_z else None
    for k, (line, row) in enumerate(table.rows):
        node = table.node_id(line, row, "node_id")
        if node in first_line:
            raise table.error(line, "node_id", f"anchor '{node}' already defined on line {first_line[node]}")
        first_line[node] = line
        ids.append(node)
        xy[k] = (table.number(line, row, "x_m"), table.number(line, row, "y_m"))
        if z is not None:
            z[k] = table.number(line, row, ANCHOR_Z_COLUMN)
    return ids, xy, z, table.extra()


def _read_agents(path: Path, anchors: set[str]) -> tuple[list[str], dict[str, list[str]]]:
    table = _read_table(path, AGENT_COLUMNS)
    ids: list[str] = []
    first_line: dict[str, int] = {}
    for line, row in table.rows:
        node = table.node_id(line, row, "node_id")
        if node in anchors:
            raise table.error(line, "node_id", f"'{node}' is already an anchor; a node is an anchor or an agent, not both")
        if node in first_line:
            raise table.error(line, "node_id", f"agent '{node}' already declared on line {first_line[node]}")
        first_line[node] = line
        ids.append(node)
    return ids, table.extra()


def _read_truth(path: Path, anchors: set[str], agents: set[str] | None) -> Truth:
    table = _read_table(path, TRUTH_COLUMNS)
    t_s = np.zeros(len(table.rows))
    xy = np.zeros((len(table.rows), 2))
    ids: list[str] = []
    first_line: dict[tuple[float, str], int] = {}
    for k, (line, row) in enumerate(table.rows):
        t = table.number(line, row, "t_s")
        node = table.node_id(line, row, "node_id")
        if agents is not None and node not in anchors and node not in agents:
            raise table.error(line, "node_id", f"unknown node '{node}': not in {ANCHORS_FILE} or {AGENTS_FILE}")
        if (t, node) in first_line:
            raise table.error(line, "node_id", f"'{node}' at t_s={t!r} already given on line {first_line[t, node]}")
        first_line[t, node] = line
        t_s[k] = t
        ids.append(node)
        xy[k] = (table.number(line, row, "x_m"), table.number(line, row, "y_m"))
    return Truth(t_s=t_s, node_id=ids, xy_m=xy, extra=table.extra())


class _BadRow(InputError):
    """A row-level problem in ranges.csv, with its reason code for the set-aside report."""

    def __init__(self, err: InputError, reason: str):
        super().__init__(err.path, err.line, err.field, err.message)
        self.reason = reason


def _number_reason(text: str) -> str:
    """Why a field is not a finite decimal: 'nan', 'infinite' or 'not_a_number'."""
    word = text.strip().lower().lstrip("+-")
    if word == "nan":
        return "nan"
    if word in ("inf", "infinity") or _DECIMAL.fullmatch(text.strip()):
        return "infinite"  # a plain decimal only fails by overflowing, e.g. 1e999
    return "not_a_number"


def _read_ranges(
    path: Path,
    ranging: RangingModel,
    anchors: set[str],
    agents: set[str] | None,
    set_aside: list[SetAsideRow] | None = None,
) -> RangeTable:
    table = _read_table(path, RANGE_COLUMNS, set_aside)
    limit_m = ranging.absurd_range_limit_m()

    def number(line: int, row: list[str], column: str) -> float:
        try:
            return table.number(line, row, column)
        except InputError as err:
            raise _BadRow(err, _number_reason(row[table.index(column)])) from None

    def known(line: int, row: list[str], column: str) -> str:
        try:
            node = table.node_id(line, row, column)
        except InputError as err:
            raise _BadRow(err, "empty_node_id") from None
        if agents is not None and node not in anchors and node not in agents:
            raise _BadRow(table.error(line, column, f"unknown node '{node}': not an anchor and not a declared agent"), "unknown_node")
        return node

    def bad(line: int, column: str, reason: str, message: str) -> _BadRow:
        return _BadRow(table.error(line, column, message), reason)

    kept: list[int] = []
    t_s: list[float] = []
    range_m: list[float] = []
    lines: list[int] = []
    node_a: list[str] = []
    node_b: list[str] = []
    for k, (line, row) in enumerate(table.rows):
        try:
            t = number(line, row, "t_s")
            a = known(line, row, "node_a")
            b = known(line, row, "node_b")
            if a == b:
                raise bad(line, "node_b", "self_range", f"a node cannot range to itself ('{a}')")
            if a in anchors and b in anchors:
                raise bad(line, "node_b", "anchor_to_anchor", f"range between two anchors ('{a}', '{b}'); anchors are fixed and known")
            r = number(line, row, "range_m")
            if r < 0:
                raise bad(line, "range_m", "negative_range", f"negative range {r!r}")
            if r > limit_m:
                raise bad(line, "range_m", "absurd_range", f"absurd range {r!r} m, above the limit of {limit_m!r} m")
        except _BadRow as err:
            if set_aside is None:
                raise InputError(err.path, err.line, err.field, err.message) from None
            set_aside.append(SetAsideRow(err.line, err.field, err.reason, err.message))
            continue
        kept.append(k)
        t_s.append(t)
        range_m.append(r)
        lines.append(line)
        node_a.append(a)
        node_b.append(b)
    extra = {name: [values[k] for k in kept] for name, values in table.extra().items()}
    if set_aside is not None:
        set_aside.sort(key=lambda row: row.line)  # table-level and row-level problems, in file order
    return RangeTable(
        t_s=np.array(t_s, dtype=float),
        node_a=node_a,
        node_b=node_b,
        range_m=np.array(range_m, dtype=float),
        extra=extra,
        line=np.array(lines, dtype=np.int64),
    )


# --------------------------------------------------------------------------- agent set


def _first_seen(ids: Sequence[str] | Any, exclude: set[str]) -> list[str]:
    """Distinct ids not in `exclude`, in order of first appearance."""
    return [node for node in dict.fromkeys(ids) if node not in exclude]


def _interleave(a: list[str], b: list[str]):
    for x, y in zip(a, b):
        yield x
        yield y
