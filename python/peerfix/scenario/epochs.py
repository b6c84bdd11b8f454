"""From a ranging log to epochs: sort, group by time window, and count every rule that fired.

A log from outside arrives unsorted, with gaps, repeats and jittered clocks.
group_epochs turns a scenario as read into one whose ranges are sorted by
time and stamped with their epoch's time, and says how often each rule of
docs/scenario-format.md ("Logs from outside") applied, with line numbers.
Nothing is dropped here: every row read lands in exactly one epoch.
"""

from __future__ import annotations

import dataclasses
from collections import Counter
from dataclasses import dataclass, field

import numpy as np

from .model import RangeTable, Scenario, Truth

# Line numbers kept per rule in the report (the count is always complete).
LINES_SHOWN = 50
# A gap: an interval between two epochs above this multiple of the median interval.
GAP_FACTOR = 1.5

# Rule names, in report order.
RULES = (
    "out_of_order",  # a row stamped earlier than an earlier row of another node: sorted into place
    "clock_backwards",  # a row stamped earlier than an earlier row of its own node_a: sorted into place
    "jitter_grouped",  # a row whose stamp is not its epoch's time (within the window)
    "repeated_range",  # a further row of one direction of one pair within an epoch: fused
    "both_directions",  # a pair ranged A->B and B->A within an epoch: fused
    "gap",  # an interval between epochs above GAP_FACTOR x the median interval
    "slant_shorter_than_height",  # anchor range below the height difference: plane range 0
)


@dataclass
class RuleCount:
    """How often a rule fired, and where."""

    all_lines: list[int] = field(default_factory=list)

    def add(self, line: int) -> None:
        self.all_lines.append(int(line))

    @property
    def count(self) -> int:
        return len(self.all_lines)

    @property
    def lines(self) -> list[int]:
        """The first LINES_SHOWN lines where it fired, in file order."""
        return sorted(self.all_lines)[:LINES_SHOWN]

    def as_dict(self) -> dict:
        return {"count": self.count, "lines": self.lines, "lines_complete": self.count <= LINES_SHOWN}


@dataclass
class LogReport:
    """How the log was read: rows kept and set aside, epochs, and the rules that fired."""

    epoch_window_s: float
    rows_used: int
    epochs: int
    rules: dict[str, RuleCount]
    set_aside: dict[str, list[int]]  # reason -> every line set aside for it

    def as_dict(self) -> dict:
        return {
            "epoch_window_s": self.epoch_window_s,
            "rows_used": self.rows_used,
            "rows_set_aside": sum(len(v) for v in self.set_aside.values()),
            "epochs": self.epochs,
            "rules": {name: rule.as_dict() for name, rule in self.rules.items()},
            "set_aside": {reason: {"count": len(lines), "lines": lines} for reason, lines in self.set_aside.items()},
        }

    def fired(self) -> dict[str, int]:
        """Rules that fired at least once: name -> count."""
        return {name: rule.count for name, rule in self.rules.items() if rule.count}


@dataclass
class EpochPlan:
    """The scenario regrouped: ranges sorted, t_s = epoch time; rows of epoch e are start[e]:stop[e]."""

    scenario: Scenario
    epoch_t_s: np.ndarray  # (E,) sorted
    start: np.ndarray  # (E,) first row of each epoch in scenario.ranges
    stop: np.ndarray  # (E,)
    raw_t_s: np.ndarray  # (M,) each row's stamp as read, in the sorted order
    report: LogReport

    def rows(self, e: int) -> slice:
        return slice(int(self.start[e]), int(self.stop[e]))


def group_epochs(scenario: Scenario, epoch_window_s: float = 0.0) -> EpochPlan:
    """Sort the ranges by time (stable) and group them into epochs.

    An epoch opens at the earliest stamp not yet grouped; every stamp at most
    epoch_window_s after it joins that epoch, whose t_s is the opening stamp.
    epoch_window_s = 0 groups exactly equal t_s (one epoch per distinct t_s).
    Truth rows are re-stamped by the same windows so they meet their epoch.
    """
    if not np.isfinite(epoch_window_s) or epoch_window_s < 0:
        raise ValueError(f"epoch_window_s must be finite and >= 0, got {epoch_window_s!r}")
    w = float(epoch_window_s)
    table = scenario.ranges
    m = len(table)
    t = np.asarray(table.t_s, dtype=float)
    lines = np.zeros(m, dtype=np.int64) if table.line is None else np.asarray(table.line, dtype=np.int64)
    rules = {name: RuleCount() for name in RULES}

    _order_rules(t, table.node_a, lines, w, rules)
    order = np.argsort(t, kind="stable")  # file order kept among equal stamps
    raw = t[order]
    starts, stops = _windows(raw, w)
    epoch_t = raw[starts] if m else np.zeros(0)
    stamped = np.repeat(epoch_t, stops - starts)

    sorted_lines = lines[order]
    for k in np.flatnonzero(raw != stamped):
        rules["jitter_grouped"].add(sorted_lines[k])
    node_a = [table.node_a[i] for i in order]
    node_b = [table.node_b[i] for i in order]
    _repeat_rules(node_a, node_b, sorted_lines, starts, stops, rules)
    _gap_rule(epoch_t, starts, sorted_lines, rules)
    _slant_rule(scenario, node_a, node_b, table.range_m[order], sorted_lines, rules)

    ranges = RangeTable(
        t_s=stamped,
        node_a=node_a,
        node_b=node_b,
        range_m=np.asarray(table.range_m, dtype=float)[order],
        extra={name: [values[i] for i in order] for name, values in table.extra.items()},
        line=sorted_lines,
    )
    truth = _restamp_truth(scenario.truth, epoch_t, w)
    set_aside: dict[str, list[int]] = {}
    for row in scenario.set_aside:
        set_aside.setdefault(row.reason, []).append(row.line)
    report = LogReport(w, m, len(epoch_t), rules, set_aside)
    grouped = dataclasses.replace(scenario, ranges=ranges, truth=truth)
    return EpochPlan(grouped, epoch_t, starts, stops, raw, report)


def _windows(sorted_t: np.ndarray, w: float) -> tuple[np.ndarray, np.ndarray]:
    """Greedy windows over sorted stamps: [start, stop) index ranges."""
    starts, stops = [], []
    i, m = 0, len(sorted_t)
    while i < m:
        j = int(np.searchsorted(sorted_t, sorted_t[i] + w, side="right"))
        starts.append(i)
        stops.append(j)
        i = j
    return np.array(starts, dtype=np.int64), np.array(stops, dtype=np.int64)


def _order_rules(t: np.ndarray, node_a: list[str], lines: np.ndarray, w: float, rules: dict[str, RuleCount]) -> None:
    """File-order checks: late rows, and late rows of a node whose own stamps ran backwards."""
    latest = -np.inf  # latest stamp of any row so far
    latest_of: dict[str, float] = {}  # latest stamp of each node_a so far
    for k in range(len(t)):
        tk = t[k]
        if tk < latest - w:
            if latest_of.get(node_a[k], -np.inf) > tk + w:
                rules["clock_backwards"].add(lines[k])
            else:
                rules["out_of_order"].add(lines[k])
        if tk > latest:
            latest = tk
        if tk > latest_of.get(node_a[k], -np.inf):
            latest_of[node_a[k]] = tk


def _repeat_rules(node_a, node_b, lines, starts, stops, rules) -> None:
    for s, e in zip(starts, stops):
        seen: Counter = Counter()
        for k in range(s, e):
            a, b = node_a[k], node_b[k]
            if seen[(a, b)]:
                rules["repeated_range"].add(lines[k])
            elif seen[(b, a)]:
                rules["both_directions"].add(lines[k])  # the first row of the reverse direction
            seen[(a, b)] += 1


def _gap_rule(epoch_t: np.ndarray, starts: np.ndarray, lines: np.ndarray, rules) -> None:
    if len(epoch_t) < 3:
        return  # fewer than two intervals: no typical interval to compare with
    dt = np.diff(epoch_t)
    typical = float(np.median(dt))
    for e in np.flatnonzero(dt > GAP_FACTOR * typical):
        rules["gap"].add(lines[starts[e + 1]])  # first row after the gap


def _slant_rule(scenario: Scenario, node_a, node_b, range_m, lines, rules) -> None:
    from ..network import height_offsets  # the plane reduction lives with the links

    dz = height_offsets(scenario)
    if not dz:
        return
    for k, (a, b) in enumerate(zip(node_a, node_b)):
        h = dz.get(a, dz.get(b))
        if h is not None and range_m[k] < abs(h):
            rules["slant_shorter_than_height"].add(lines[k])


def _restamp_truth(truth: Truth | None, epoch_t: np.ndarray, w: float) -> Truth | None:
    """Truth rows inside an epoch's window take the epoch's t_s (the first of a node per epoch is kept)."""
    if truth is None or w == 0 or len(epoch_t) == 0:
        return truth
    t = np.asarray(truth.t_s, dtype=float)
    e = np.searchsorted(epoch_t, t, side="right") - 1
    inside = (e >= 0) & (t - epoch_t[np.maximum(e, 0)] <= w)
    new_t = np.where(inside, epoch_t[np.maximum(e, 0)], t)
    keep, seen = [], set()
    for k in np.argsort(t, kind="stable"):
        key = (float(new_t[k]), truth.node_id[k])
        if key not in seen:
            seen.add(key)
            keep.append(k)
    keep.sort()
    return Truth(
        t_s=new_t[keep],
        node_id=[truth.node_id[k] for k in keep],
        xy_m=np.asarray(truth.xy_m)[keep],
        extra={name: [values[k] for k in keep] for name, values in truth.extra.items()},
    )
