"""The cells of a campaign: one network (preset, overrides, seed) run by one engine
with one set of estimator and channel settings.

A cell's key is a hash of everything that fixes its result: the fully resolved
simulator settings and estimator parameters (not just the spec's changes), so
a changed preset or default gives a new key and is run again, while the same
settings in another spec or a reordered spec reuse the stored result.
"""

from __future__ import annotations

import hashlib
import itertools
import json
from dataclasses import asdict, dataclass
from typing import Any

from ..reference import EstimatorParams
from ..simulate import resolve_settings
from .spec import CHANNEL_SETTINGS, RUN_SETTINGS, CampaignSpec

CELL_FORMAT = 1  # bump when a cell's result document changes meaning


@dataclass(frozen=True)
class Cell:
    campaign: str
    preset: str
    seed: int
    engine: str
    scenario: tuple[tuple[str, Any], ...]  # simulator overrides (fixed and swept)
    estimator: tuple[tuple[str, Any], ...]  # EstimatorParams changes
    iterations: int
    schedule: str
    cooperative: bool
    packet_loss: float  # channel: a receiver misses a broadcast
    bit_error_rate: float
    air: bool
    hold_last_heard: bool = False  # receivers reuse a neighbour's last heard broadcast (driver.run_epoch)

    def params(self) -> EstimatorParams:
        return EstimatorParams(**dict(self.estimator))

    def resolved(self) -> dict:
        """Everything that fixes the result, resolved (what the key hashes)."""
        settings = asdict(resolve_settings(self.preset, **dict(self.scenario)))
        settings.pop("description")  # words only
        return {
            "format": CELL_FORMAT,
            "preset": self.preset,
            "settings": settings,
            "seed": self.seed,
            "engine": self.engine,
            "params": self.params().as_dict(),
            "iterations": self.iterations,
            "schedule": self.schedule,
            "cooperative": self.cooperative,
            "hold_last_heard": self.hold_last_heard,
            "channel": {"packet_loss": self.packet_loss, "bit_error_rate": self.bit_error_rate, "air": self.air},
        }

    @property
    def key(self) -> str:
        blob = json.dumps(self.resolved(), sort_keys=True, separators=(",", ":"))
        return hashlib.sha256(blob.encode()).hexdigest()[:20]

    def settings_row(self) -> dict[str, Any]:
        """The settings columns of the results table."""
        params = self.params()
        row: dict[str, Any] = {
            "campaign": self.campaign,
            "key": self.key,
            "preset": self.preset,
            "seed": self.seed,
            "engine": self.engine,
            "K": params.max_components,
            "robust": params.robust,
            "iterations": self.iterations,
            "schedule": self.schedule,
            "cooperative": self.cooperative,
            "hold_last_heard": self.hold_last_heard,
            "channel_packet_loss": self.packet_loss,
            "channel_bit_error_rate": self.bit_error_rate,
            "air": self.air,
        }
        for name, value in self.scenario + self.estimator:
            if name not in ("max_components", "robust"):
                row[name] = list(value) if isinstance(value, tuple) else value
        return row

    def as_doc(self) -> dict:
        """A plain dict (what crosses to a worker process or a Dask worker)."""
        d = asdict(self)
        d["scenario"] = [list(p) for p in self.scenario]
        d["estimator"] = [list(p) for p in self.estimator]
        return d

    @classmethod
    def from_doc(cls, d: dict) -> "Cell":
        from .spec import _to_tuple

        d = dict(d)
        d["scenario"] = tuple((k, _to_tuple(v)) for k, v in d["scenario"])
        d["estimator"] = tuple((k, _to_tuple(v)) for k, v in d["estimator"])
        return cls(**d)


def expand(spec: CampaignSpec) -> list[Cell]:
    """Every cell of the spec, in a stable order: settings product, then engine, then seed."""
    cells = []
    for combo in itertools.product(*(a.values for a in spec.axes)):
        values = {s: dict(spec.fixed[s]) for s in spec.fixed}
        for axis, v in zip(spec.axes, combo):
            values[axis.section][axis.name] = v
        scenario = values["scenario"]
        preset = scenario.pop("preset", "open-field")
        est = values["estimator"]
        run = {k: est.pop(k, default) for k, default in RUN_SETTINGS.items()}
        chan = {k: values["channel"].get(k, default) for k, default in CHANNEL_SETTINGS.items()}
        for engine in spec.engines:
            for seed in spec.seeds:
                cells.append(
                    Cell(
                        campaign=spec.name,
                        preset=preset,
                        seed=seed,
                        engine=engine,
                        scenario=tuple(sorted(scenario.items())),
                        estimator=tuple(sorted(est.items())),
                        iterations=int(run["iterations"]),
                        schedule=str(run["schedule"]),
                        cooperative=bool(run["cooperative"]),
                        hold_last_heard=bool(run["hold_last_heard"]),
                        packet_loss=float(chan["packet_loss"]),
                        bit_error_rate=float(chan["bit_error_rate"]),
                        air=bool(chan["air"]),
                    )
                )
    return cells
