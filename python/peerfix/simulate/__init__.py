"""Network simulator: static networks (one epoch) and moving ones (many epochs).

    simulate("cold-store", seed=1)                 -> Scenario
    simulate("open-field", seed=7, agents=200)     -> Scenario with an override
    simulate(SimulationSettings(...), seed=3)      -> Scenario from own settings
    simulate("cold-store-shift", seed=1)           -> moving: 42 tags, 10 min at 5 Hz
    simulate("cold-store-shift", seed=1, duration_s=30.0, rate_hz=5.0)

Same settings and seed give the identical scenario.
"""

from __future__ import annotations

from dataclasses import replace

from ..scenario.model import Scenario
from .moving import MOVING_PRESETS, MovingSettings, build_moving_scenario, list_moving_presets, resolve_moving
from .network import build_scenario
from .presets import PRESETS, SimulationSettings, get_preset, list_presets, setting_names
from .summary import summarize


def resolve_settings(preset: str | SimulationSettings, **overrides: object) -> SimulationSettings:
    """The preset (by name or given) with single fields replaced.

    Override keys are SimulationSettings field names; giving explicit_anchors
    alone switches the anchor rule to "explicit".
    """
    base = get_preset(preset) if isinstance(preset, str) else preset
    unknown = sorted(set(overrides) - set(setting_names()))
    if unknown:
        raise TypeError(f"unknown simulation setting(s): {', '.join(unknown)}")
    if "explicit_anchors" in overrides and "anchor_rule" not in overrides:
        overrides["anchor_rule"] = "explicit"
    if "explicit_anchors" in overrides:
        overrides["explicit_anchors"] = tuple(
            (str(a[0]), float(a[1]), float(a[2])) for a in overrides["explicit_anchors"]  # type: ignore[union-attr]
        )
    if overrides.get("anchor_rule", base.anchor_rule) != "explicit" and "explicit_anchors" not in overrides:
        overrides["explicit_anchors"] = ()
    return replace(base, **overrides)


def simulate(preset: str | SimulationSettings | MovingSettings, seed: int, **overrides: object) -> Scenario:
    """One scenario from a preset or settings, a seed and overrides.

    Static presets (list_presets) give one epoch at t_s = 0; moving presets
    (list_moving_presets) many epochs (see moving.py for their overrides).
    """
    if isinstance(preset, MovingSettings):
        return build_moving_scenario(resolve_moving(preset, **overrides), seed)
    if isinstance(preset, str) and preset in MOVING_PRESETS:
        return build_moving_scenario(resolve_moving(MOVING_PRESETS[preset], **overrides), seed)
    if isinstance(preset, str) and preset not in PRESETS:
        raise ValueError(f"unknown preset '{preset}': choose one of {', '.join(all_presets())}")
    return build_scenario(resolve_settings(preset, **overrides), seed)


def all_presets() -> list[str]:
    """Static presets first, then the moving ones (what `peerfix simulate --preset` takes)."""
    return list_presets() + list_moving_presets()


__all__ = ["MOVING_PRESETS", "PRESETS", "MovingSettings", "SimulationSettings", "all_presets", "list_moving_presets",
           "list_presets", "resolve_settings", "simulate", "summarize"]
