"""Network simulator: static networks of anchors and agents, one epoch.

    simulate("cold-store", seed=1)                 -> Scenario
    simulate("open-field", seed=7, agents=200)     -> Scenario with an override
    simulate(SimulationSettings(...), seed=3)      -> Scenario from own settings

Same settings and seed give the identical scenario.
"""

from __future__ import annotations

from dataclasses import replace

from ..scenario.model import Scenario
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


def simulate(preset: str | SimulationSettings, seed: int, **overrides: object) -> Scenario:
    """One static scenario (t_s = 0) from a preset or settings, a seed and overrides."""
    return build_scenario(resolve_settings(preset, **overrides), seed)


__all__ = ["PRESETS", "SimulationSettings", "list_presets", "resolve_settings", "simulate", "summarize"]
