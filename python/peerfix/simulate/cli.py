"""`peerfix simulate`: make a scenario folder from a preset, a seed and overrides."""

from __future__ import annotations

import argparse
import json
import sys

from .moving import MOVING_PRESETS
from .presets import ANCHOR_RULES, DEPLOYMENTS, PRESETS

# CLI option (argparse dest) -> SimulationSettings field, for plain overrides.
_OVERRIDES = {
    "agents": "agents",
    "deployment": "deployment",
    "radio_range_m": "radio_range_m",
    "sigma_m": "sigma_m",
    "sigma_per_m": "sigma_per_m",
    "blocked_probability": "blocked_probability",
    "blocked_bias_mean_m": "blocked_bias_mean_m",
    "packet_loss": "packet_loss",
    "grid_jitter_m": "grid_jitter_m",
    "strip_width_m": "strip_width_m",
    "strip_length_m": "strip_length_m",
    "duration_s": "duration_s",
    "rate_hz": "rate_hz",
}


def register(subparsers: argparse._SubParsersAction) -> None:
    p = subparsers.add_parser(
        "simulate",
        help="simulate a network (static, or tags moving over time) and write it as a scenario folder",
        description="Simulate a network from a preset and a seed and write it as a scenario folder: "
        "a static preset gives one epoch, a moving preset (tags driving and walking, joining and leaving) "
        "many.  Same preset, overrides and seed give the same folder.",
    )
    p.add_argument("--preset", choices=[*PRESETS, *MOVING_PRESETS], help="demo site to start from")
    p.add_argument("--seed", type=int, default=0, help="random seed (default 0)")
    p.add_argument("--out", metavar="DIR", help="scenario folder to write")
    p.add_argument("--overwrite", action="store_true", help="replace an existing scenario folder")
    p.add_argument("--json", action="store_true", help="print the summary as JSON")
    p.add_argument("--list-presets", action="store_true", help="list the presets and exit")
    g = p.add_argument_group("overrides (default: the preset's value)")
    g.add_argument("--agents", type=int, metavar="N")
    g.add_argument("--anchors", metavar="RULE[:N]",
                   help=f"anchor rule, one of {', '.join(r for r in ANCHOR_RULES if r != 'explicit')}; "
                   "N is the count for perimeter/lattice, the spacing in metres for strip-walls")
    g.add_argument("--deployment", choices=DEPLOYMENTS)
    g.add_argument("--radio-range-m", type=float, metavar="X")
    g.add_argument("--sigma-m", type=float, metavar="X")
    g.add_argument("--sigma-per-m", type=float, metavar="X")
    g.add_argument("--blocked-probability", type=float, metavar="P")
    g.add_argument("--blocked-bias-mean-m", type=float, metavar="X")
    g.add_argument("--packet-loss", type=float, metavar="P")
    g.add_argument("--grid-jitter-m", type=float, metavar="X")
    g.add_argument("--strip-width-m", type=float, metavar="X")
    g.add_argument("--strip-length-m", type=float, metavar="X")
    m = p.add_argument_group("overrides of a moving preset")
    m.add_argument("--duration-s", type=float, metavar="T", help="length of the recording (s)")
    m.add_argument("--rate-hz", type=float, metavar="F", help="ranging epochs per second")
    p.set_defaults(handler=run)


def parse_anchor_rule(text: str) -> dict[str, object]:
    """'perimeter:14' -> {anchor_rule, anchor_count}; 'strip-walls:40' -> {anchor_rule, anchor_spacing_m}."""
    rule, _, number = text.partition(":")
    if rule not in ANCHOR_RULES or rule == "explicit":
        raise ValueError(f"--anchors '{text}': rule must be one of "
                         f"{', '.join(r for r in ANCHOR_RULES if r != 'explicit')}")
    out: dict[str, object] = {"anchor_rule": rule}
    if not number:
        return out
    if rule == "open-field-13":
        raise ValueError(f"--anchors '{text}': rule '{rule}' takes no number")
    try:
        value = float(number)
    except ValueError:
        raise ValueError(f"--anchors '{text}': '{number}' is not a number") from None
    if rule == "strip-walls":
        out["anchor_spacing_m"] = value
    elif value.is_integer():
        out["anchor_count"] = int(value)
    else:
        raise ValueError(f"--anchors '{text}': the anchor count must be a whole number")
    return out


def overrides_from_args(args: argparse.Namespace) -> dict[str, object]:
    overrides: dict[str, object] = {
        field: getattr(args, dest) for dest, field in _OVERRIDES.items() if getattr(args, dest) is not None
    }
    if args.anchors is not None:
        overrides.update(parse_anchor_rule(args.anchors))
    return overrides


def summary_line(summary: dict, preset: str, seed: int, out: str) -> str:
    if summary.get("epochs", 1) > 1:
        roles = ", ".join(f"{n} {r}" for r, n in summary["roles"].items())
        return (
            f"{preset} seed {seed}: {summary['agents']} agents ({roles}), {summary['anchors']} anchors, "
            f"{summary['epochs']} epochs over {summary['duration_s']:g} s, {summary['ranges']} ranges "
            f"({summary['ranges_per_epoch']:.0f} per epoch), {summary['late_joiners']} joining late, "
            f"{summary['early_leavers']} leaving early, {100 * summary['blocked_share']:.1f}% blocked -> {out}"
        )
    return (
        f"{preset} seed {seed}: {summary['agents']} agents, {summary['anchors']} anchors, "
        f"{summary['ranges']} ranges, mean agent degree {summary['mean_agent_degree']:.1f}, "
        f"{summary['agents_lt3_anchor_neighbours']} agents with <3 anchor neighbours, "
        f"{100 * summary['blocked_share']:.1f}% blocked -> {out}"
    )


def run(args: argparse.Namespace) -> int:
    if args.list_presets:
        for name, settings in [*PRESETS.items(), *MOVING_PRESETS.items()]:
            print(f"{name}: {settings.description}")
        return 0
    missing = [opt for opt, val in (("--preset", args.preset), ("--out", args.out)) if val is None]
    if missing:
        print(f"peerfix simulate: error: {' and '.join(missing)} required", file=sys.stderr)
        return 2

    from . import simulate, summarize
    from ..scenario.writer import write_scenario  # lazy: the writer is a separate module

    try:
        scenario = simulate(args.preset, args.seed, **overrides_from_args(args))
    except (ValueError, TypeError) as err:
        print(f"peerfix simulate: error: {err}", file=sys.stderr)
        return 2
    try:
        folder = write_scenario(scenario, args.out, overwrite=args.overwrite)
    except FileExistsError as err:
        print(f"peerfix simulate: error: {err} (use --overwrite to replace it)", file=sys.stderr)
        return 2

    summary = summarize(scenario)
    if args.json:
        print(json.dumps({"preset": args.preset, "seed": args.seed, "out": str(folder), **summary}))
    else:
        print(summary_line(summary, args.preset, args.seed, str(folder)))
    return 0
