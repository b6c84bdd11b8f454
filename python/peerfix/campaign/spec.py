"""Campaign specs: a TOML file that names a grid of runs.

    name = "blocked-share"                 # required; a word for file names and tables
    description = "..."
    seeds = 20                             # 0..19; or [3, 5, 8]; or { first = 100, count = 20 }
    engines = ["float", "fixed"]           # any name of peerfix.runner.ENGINES

    [scenario]                             # fixed simulator settings
    preset = "open-field"                  # a preset of peerfix.simulate
    blocked_bias_mean_m = 1.0              # any SimulationSettings field

    [estimator]                            # fixed estimator settings
    K = 4                                  # = max_components; any EstimatorParams field,
    iterations = 4                         # and the run settings iterations, schedule,
    schedule = "slot"                      # cooperative, hold_last_heard (driver.run_epoch)

    [channel]                              # the radio between nodes (peerfix.channel)
    packet_loss = 0.0                      # a receiver misses a broadcast
    bit_error_rate = 0.0                   # frames of the fixed engine only
    air = true                             # fixed engine: beliefs cross as frame bytes

    [grid.scenario]                        # swept settings: every value a list;
    blocked_probability = [0.0, 0.1, 0.2]  # the campaign runs the full product
    [grid.estimator]                       # of all lists, engines and seeds
    robust = [false, true]

    [[plot]]                               # one figure per [[plot]] (or a single [plot])
    x = "blocked_probability"              # a swept setting, or "iteration"
    y = "error_p90_m"                      # a metric column of the results table
    series = ["robust"]                    # one line per value (default: the other swept settings)

Every problem is an InputError naming the file, the line (when it can be
found) and the key.
"""

from __future__ import annotations

import math
import re
import sys
from dataclasses import dataclass, field, fields
from pathlib import Path
from typing import Any

from ..errors import InputError
from ..reference import EstimatorParams
from ..simulate import PRESETS, resolve_settings
from ..simulate.presets import setting_names

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover
    import tomli as tomllib

SECTIONS = ("scenario", "estimator", "channel")
TOP_KEYS = ("name", "description", "seeds", "engines", "scenario", "estimator", "channel", "grid", "plot")
# Settings of a run that are not EstimatorParams fields, with their defaults (runner.run_scenario's).
RUN_SETTINGS: dict[str, Any] = {"iterations": 4, "schedule": "slot", "cooperative": True, "hold_last_heard": False}
CHANNEL_SETTINGS: dict[str, Any] = {"packet_loss": 0.0, "bit_error_rate": 0.0, "air": True}
ALIASES = {"K": "max_components"}  # short names people use for estimator fields
NAME_RE = re.compile(r"^[A-Za-z0-9][A-Za-z0-9_.-]*$")


@dataclass(frozen=True)
class Axis:
    """One swept setting: section ("scenario", "estimator", "channel"), name, values."""

    section: str
    name: str
    values: tuple


@dataclass(frozen=True)
class PlotSpec:
    x: str
    y: str
    series: tuple[str, ...] | None = None  # None: every other swept setting


@dataclass(frozen=True)
class CampaignSpec:
    path: Path
    name: str
    description: str
    seeds: tuple[int, ...]
    engines: tuple[str, ...]
    fixed: dict[str, dict[str, Any]]  # section -> setting -> value
    axes: tuple[Axis, ...]
    plots: tuple[PlotSpec, ...] = field(default=())

    @property
    def swept(self) -> list[str]:
        """Results-table columns of the swept settings, in spec order."""
        return [column_name(a.section, a.name) for a in self.axes]

    def cell_count(self) -> int:
        n = len(self.seeds) * len(self.engines)
        for a in self.axes:
            n *= len(a.values)
        return n


def column_name(section: str, name: str) -> str:
    """The results-table column of a setting.  Channel settings are prefixed (the
    simulator has a packet_loss of its own: lost ranging exchanges, no range row)."""
    if section == "channel" and name != "air":
        return f"channel_{name}"
    if section == "estimator" and name == "max_components":
        return "K"
    return name


# ---- locating keys in the text, for error messages -------------------------------------


_HEADER = re.compile(r"^\s*\[\[?\s*([^\]]+?)\s*\]\]?\s*(#.*)?$")
_KEY = re.compile(r"^\s*([A-Za-z0-9_\-\"'. ]+?)\s*=")


def _split_key(text: str) -> tuple[str, ...]:
    return tuple(part.strip().strip("\"'") for part in text.split("."))


def key_lines(text: str) -> dict[tuple[str, ...], int]:
    """1-based line of each table header and key (first occurrence); good enough for
    the specs people write (no multi-line keys)."""
    where: dict[tuple[str, ...], int] = {}
    table: tuple[str, ...] = ()
    for n, line in enumerate(text.splitlines(), start=1):
        h = _HEADER.match(line)
        if h:
            table = _split_key(h.group(1))
            where.setdefault(table, n)
            continue
        k = _KEY.match(line)
        if k:
            where.setdefault(table + _split_key(k.group(1)), n)
    return where


class _Reader:
    """Checks one spec's values; every error names the file, line and key."""

    def __init__(self, path: Path, text: str):
        self.path = path
        self.lines = key_lines(text)

    def error(self, key: tuple[str, ...], message: str) -> InputError:
        line = 0
        for n in range(len(key), 0, -1):  # the key's line, else its table's
            if key[:n] in self.lines:
                line = self.lines[key[:n]]
                break
        return InputError(self.path, line, ".".join(key) or None, message)


# ---- value checks ----------------------------------------------------------------------


def _scenario_kinds() -> dict[str, Any]:
    example = PRESETS["open-field"]
    return {name: getattr(example, name) for name in setting_names() if name != "name"}


def _estimator_kinds() -> dict[str, Any]:
    kinds: dict[str, Any] = {f.name: getattr(EstimatorParams(), f.name) for f in fields(EstimatorParams)}
    kinds.update(RUN_SETTINGS)
    return kinds


def _to_tuple(value: Any) -> Any:
    return tuple(_to_tuple(v) for v in value) if isinstance(value, list) else value


def _float_tuple(value: Any) -> Any:
    """Lists as tuples with integers as floats: every array setting holds coordinates
    (bounds_m, obstacles_m, explicit_anchors), so [0, 0, 30, 30] and [0.0, ...] are one setting."""
    if isinstance(value, list):
        return tuple(_float_tuple(v) for v in value)
    return float(value) if isinstance(value, int) and not isinstance(value, bool) else value


def _coerce(r: _Reader, key: tuple[str, ...], value: Any, example: Any) -> Any:
    """value as the type of example (TOML int -> float allowed; lists -> tuples)."""
    if isinstance(example, bool):
        if not isinstance(value, bool):
            raise r.error(key, f"expected true or false, got {value!r}")
        return value
    if isinstance(example, int):
        if isinstance(value, bool) or not isinstance(value, int):
            raise r.error(key, f"expected an integer, got {value!r}")
        return value
    if isinstance(example, float):
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            raise r.error(key, f"expected a number, got {value!r}")
        if not math.isfinite(value):
            raise r.error(key, f"expected a finite number, got {value!r}")
        return float(value)
    if isinstance(example, str):
        if not isinstance(value, str):
            raise r.error(key, f"expected a string, got {value!r}")
        return value
    if isinstance(example, tuple):
        if not isinstance(value, list):
            raise r.error(key, f"expected an array, got {value!r}")
        return _float_tuple(value)
    raise r.error(key, f"cannot set this setting from a spec")  # pragma: no cover


def _section_kinds(section: str) -> dict[str, Any]:
    if section == "scenario":
        return {"preset": "", **_scenario_kinds()}
    if section == "estimator":
        return _estimator_kinds()
    return dict(CHANNEL_SETTINGS)


def _setting(r: _Reader, section: str, key: tuple[str, ...], name: str, value: Any) -> tuple[str, Any]:
    """(canonical name, checked value) of one setting of a section."""
    kinds = _section_kinds(section)
    canonical = ALIASES.get(name, name) if section == "estimator" else name
    if canonical not in kinds:
        raise r.error(key, f"unknown {section} setting; choose from {', '.join(sorted(kinds))}")
    value = _coerce(r, key, value, kinds[canonical])
    if section == "scenario" and canonical == "preset" and value not in PRESETS:
        raise r.error(key, f"unknown preset {value!r}; choose one of {', '.join(PRESETS)}")
    if section == "estimator":
        if canonical in ("iterations", "max_components") and value < 1:
            raise r.error(key, "must be at least 1")
        if canonical == "schedule":
            from ..driver import SCHEDULES

            if value not in SCHEDULES:
                raise r.error(key, f"unknown schedule {value!r}; choose one of {', '.join(SCHEDULES)}")
    if section == "channel" and canonical in ("packet_loss", "bit_error_rate") and not 0.0 <= value <= 1.0:
        raise r.error(key, f"{value} is not a probability in [0, 1]")
    return canonical, value


def _seeds(r: _Reader, value: Any) -> tuple[int, ...]:
    key = ("seeds",)
    if isinstance(value, bool):
        raise r.error(key, "expected a count, a list of seeds or { first = N, count = M }")
    if isinstance(value, int):
        if value < 1:
            raise r.error(key, "need at least one seed")
        return tuple(range(value))
    if isinstance(value, list):
        if not value or not all(isinstance(s, int) and not isinstance(s, bool) and s >= 0 for s in value):
            raise r.error(key, "expected a non-empty list of integers >= 0")
        if len(set(value)) != len(value):
            raise r.error(key, "a seed is listed twice")
        return tuple(value)
    if isinstance(value, dict):
        extra = set(value) - {"first", "count"}
        if extra or "count" not in value:
            raise r.error(key, "expected { first = N, count = M }")
        first, count = value.get("first", 0), value["count"]
        if not all(isinstance(v, int) and not isinstance(v, bool) for v in (first, count)) or first < 0 or count < 1:
            raise r.error(key, "first must be an integer >= 0 and count >= 1")
        return tuple(range(first, first + count))
    raise r.error(key, "expected a count, a list of seeds or { first = N, count = M }")


def _engines(r: _Reader, value: Any) -> tuple[str, ...]:
    from .. import runner  # read at run time: other engines may be registered

    known = tuple(runner.ENGINES)
    names = [value] if isinstance(value, str) else value
    if not isinstance(names, list) or not names or not all(isinstance(n, str) for n in names):
        raise r.error(("engines",), "expected an engine name or a non-empty list of them")
    for n in names:
        if n not in known:
            raise r.error(("engines",), f"unknown engine {n!r}; choose from {', '.join(known)}")
    if len(set(names)) != len(names):
        raise r.error(("engines",), "an engine is listed twice")
    return tuple(names)


def _plots(r: _Reader, value: Any, swept: list[str]) -> tuple[PlotSpec, ...]:
    from .table import METRIC_COLUMNS, ITERATION_METRICS

    tables = [value] if isinstance(value, dict) else value
    if not isinstance(tables, list) or not all(isinstance(t, dict) for t in tables):
        raise r.error(("plot",), "expected a [plot] table or [[plot]] tables")
    plots = []
    for t in tables:
        extra = set(t) - {"x", "y", "series"}
        if extra:
            raise r.error(("plot", sorted(extra)[0]), "unknown plot key; use x, y, series")
        x, y = t.get("x"), t.get("y")
        if x != "iteration" and x not in swept:
            raise r.error(("plot", "x"), f"x must be a swept setting ({', '.join(swept) or 'none'}) or 'iteration'")
        metrics = ITERATION_METRICS if x == "iteration" else METRIC_COLUMNS
        if y not in metrics:
            raise r.error(("plot", "y"), f"unknown metric {y!r}; choose from {', '.join(metrics)}")
        series = t.get("series")
        if series is not None:
            series = [series] if isinstance(series, str) else series
            allowed = set(swept) | {"engine"}
            if not isinstance(series, list) or not all(s in allowed for s in series):
                raise r.error(("plot", "series"), f"series must be swept settings or 'engine' ({', '.join(sorted(allowed))})")
            series = tuple(series)
        plots.append(PlotSpec(x, y, series))
    return tuple(plots)


def _check_scenarios(r: _Reader, spec: CampaignSpec) -> None:
    """Every combination of scenario settings must make valid SimulationSettings.

    The fixed settings with every swept setting at its first value are tried
    first, then each other swept value alone, so the error points at the key
    that breaks them."""
    import itertools

    axes = [a for a in spec.axes if a.section == "scenario"]

    def check(over: dict, key: tuple[str, ...]) -> None:
        over = dict(over)
        preset = over.pop("preset", "open-field")
        try:
            resolve_settings(preset, **over)
        except (ValueError, TypeError) as err:
            raise r.error(key, f"not valid with preset {preset!r}: {err}") from None

    fixed = dict(spec.fixed["scenario"])
    base = {**fixed, **{a.name: a.values[0] for a in axes}}  # every axis at its first value
    check(base, ("scenario",))
    for a in axes:
        for v in a.values[1:]:
            check({**base, a.name: v}, ("grid", "scenario", a.name))
    for combo in itertools.product(*(a.values for a in axes)):
        check({**fixed, **{a.name: v for a, v in zip(axes, combo)}}, ("grid", "scenario"))


def parse_spec(text: str, path: str | Path = "<spec>") -> CampaignSpec:
    """A CampaignSpec from TOML text; InputError on any problem."""
    path = Path(path)
    r = _Reader(path, text)
    try:
        doc = tomllib.loads(text)
    except tomllib.TOMLDecodeError as err:
        m = re.search(r"at line (\d+)", str(err))
        raise InputError(path, int(m.group(1)) if m else 0, None, f"not valid TOML: {err}") from None

    for key in doc:
        if key not in TOP_KEYS:
            raise r.error((key,), f"unknown key; a spec has {', '.join(TOP_KEYS)}")
    name = doc.get("name")
    if not isinstance(name, str) or not NAME_RE.match(name):
        raise r.error(("name",), "required: a name of letters, digits, '-', '_' or '.'")
    description = doc.get("description", "")
    if not isinstance(description, str):
        raise r.error(("description",), "expected a string")
    seeds = _seeds(r, doc.get("seeds", 1))
    engines = _engines(r, doc.get("engines", ["float"]))

    fixed: dict[str, dict[str, Any]] = {s: {} for s in SECTIONS}
    for section in SECTIONS:
        table = doc.get(section, {})
        if not isinstance(table, dict):
            raise r.error((section,), "expected a table")
        for k, v in table.items():
            canonical, value = _setting(r, section, (section, k), k, v)
            if canonical in fixed[section]:
                raise r.error((section, k), f"set twice (as {canonical} too)")
            fixed[section][canonical] = value

    axes: list[Axis] = []
    grid = doc.get("grid", {})
    if not isinstance(grid, dict):
        raise r.error(("grid",), "expected tables [grid.scenario], [grid.estimator], [grid.channel]")
    for section, table in grid.items():
        if section not in SECTIONS or not isinstance(table, dict):
            raise r.error(("grid", section), f"unknown grid table; use {', '.join('grid.' + s for s in SECTIONS)}")
        for k, values in table.items():
            key = ("grid", section, k)
            if not isinstance(values, list) or not values:
                raise r.error(key, "a swept setting needs a non-empty array of values")
            checked = [_setting(r, section, key, k, v) for v in values]
            canonical = checked[0][0]
            vals = tuple(v for _, v in checked)
            if len(set(map(repr, vals))) != len(vals):
                raise r.error(key, "a value is listed twice")
            if canonical in fixed[section] or any(a.name == canonical for a in axes):
                raise r.error(key, "set both as a fixed and as a swept setting (or swept twice)")
            axes.append(Axis(section, canonical, vals))

    spec = CampaignSpec(path, name, description, seeds, engines, fixed, tuple(axes))
    if "plot" in doc:
        spec = CampaignSpec(path, name, description, seeds, engines, fixed, tuple(axes), _plots(r, doc["plot"], spec.swept))
    _check_scenarios(r, spec)
    return spec


def load_spec(path: str | Path) -> CampaignSpec:
    """Read and check a spec file (InputError when it is missing or bad)."""
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8")
    except OSError as err:
        raise InputError(path, 0, None, f"cannot read the campaign spec: {err.strerror or err}") from None
    return parse_spec(text, path)
