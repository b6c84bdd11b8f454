"""In-memory form of a scenario: a site, its anchors, its agents and the ranges.

A scenario on disk is a folder (see docs/scenario-format.md); the reader turns
it into these objects and the simulator builds them directly.  Everything is
SI: metres and seconds.  Node ids are strings.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np


@dataclass(frozen=True)
class RangingModel:
    """What the site knows about its ranging error; the estimators read this.

    sigma_m:            line-of-sight standard deviation of one range.
    radio_range_m:      disc radio range (nodes farther apart never range).
    sigma_per_m:        extra standard deviation per metre of distance
                        (distance-dependent error: sigma_m + sigma_per_m * d).
    blocked_probability: share of ranges on a blocked path (0 = all line of sight).
    blocked_bias_mean_m: mean of the positive exponential bias of a blocked range.
    max_range_m:        a range above this is rejected as absurd by the reader.
    """

    sigma_m: float
    radio_range_m: float
    sigma_per_m: float = 0.0
    blocked_probability: float = 0.0
    blocked_bias_mean_m: float = 1.0
    max_range_m: float | None = None

    def absurd_range_limit_m(self) -> float:
        """Largest range the reader accepts: max_range_m, else twice the radio range."""
        if self.max_range_m is not None:
            return self.max_range_m
        return 2.0 * self.radio_range_m


@dataclass(frozen=True)
class Tracking:
    """How a log becomes epochs and how tags move between them ([tracking] in site.toml).

    None means "not stated here": the run's option or its default applies
    (see docs/scenario-format.md, "Time and epochs").
    epoch_window_s:    stamps within this window of an epoch's first stamp share the epoch.
    walk_speed_mps:    how fast a tag may move; sets the random-walk prediction.
    silence_timeout_s: a tag silent for longer than this starts again from the prior.
    """

    epoch_window_s: float | None = None
    walk_speed_mps: float | None = None
    silence_timeout_s: float | None = None


@dataclass(frozen=True)
class Site:
    name: str
    bounds_m: tuple[float, float, float, float]  # xmin, ymin, xmax, ymax
    ranging: RangingModel
    extra: dict[str, Any] = field(default_factory=dict)  # further site.toml tables, kept verbatim
    # Height of the tags' antennas, in the frame of anchors.csv z_m (None: not stated).
    tag_height_m: float | None = None
    tracking: Tracking = field(default_factory=Tracking)

    @property
    def width_m(self) -> float:
        return self.bounds_m[2] - self.bounds_m[0]

    @property
    def height_m(self) -> float:
        return self.bounds_m[3] - self.bounds_m[1]


@dataclass
class RangeTable:
    """One row per range measurement, in file order.

    t_s (M,), node_a (M,) and node_b (M,) as Python str lists, range_m (M,).
    `extra` holds further optional columns by name (strings, as read) and
    `line` the 1-based line number of each row in ranges.csv (0 when the row
    was made in memory), so later stages can name the line of a row.
    """

    t_s: np.ndarray
    node_a: list[str]
    node_b: list[str]
    range_m: np.ndarray
    extra: dict[str, list[str]] = field(default_factory=dict)
    line: np.ndarray | None = None

    def __len__(self) -> int:
        return len(self.node_a)

    def epochs(self) -> np.ndarray:
        """Distinct t_s values, sorted."""
        return np.unique(self.t_s)


@dataclass(frozen=True)
class SetAsideRow:
    """A malformed ranges.csv row skipped on request: where, why, and the reader's message."""

    line: int
    field: str | None
    reason: str  # a short code, e.g. "nan", "negative_range" (docs/scenario-format.md)
    message: str


@dataclass
class Truth:
    """True positions: one row per node and epoch."""

    t_s: np.ndarray
    node_id: list[str]
    xy_m: np.ndarray  # (N, 2)
    extra: dict[str, list[str]] = field(default_factory=dict)  # further truth.csv columns, as read

    def at(self, t_s: float) -> dict[str, np.ndarray]:
        """node_id -> (2,) true position at epoch t_s (exact match)."""
        sel = np.flatnonzero(self.t_s == t_s)
        return {self.node_id[i]: self.xy_m[i] for i in sel}


@dataclass
class Scenario:
    site: Site
    anchor_ids: list[str]
    anchor_xy_m: np.ndarray  # (A, 2)
    agent_ids: list[str]
    ranges: RangeTable
    truth: Truth | None = None
    # Further columns of anchors.csv / agents.csv by name (strings, as read),
    # one entry per anchor / agent in the order of anchor_ids / agent_ids.
    anchor_extra: dict[str, list[str]] = field(default_factory=dict)
    agent_extra: dict[str, list[str]] = field(default_factory=dict)
    # Mounting height of each anchor (anchors.csv z_m), or None when the file has no z_m.
    anchor_z_m: np.ndarray | None = None
    # ranges.csv rows the reader set aside (only with set_aside_bad_rows=True), in file order.
    set_aside: list[SetAsideRow] = field(default_factory=list)

    def anchor_positions(self) -> dict[str, np.ndarray]:
        return {a: self.anchor_xy_m[i] for i, a in enumerate(self.anchor_ids)}

    def is_static(self) -> bool:
        return len(self.ranges.epochs()) <= 1
