"""Options shared by the commands that run an estimator."""

from __future__ import annotations

import argparse
import dataclasses
import json
import sys

from ..driver import SCHEDULES
from ..reference import EstimatorParams
from ..reference.params import robust_preset


def add_estimator_options(p: argparse.ArgumentParser) -> None:
    p.add_argument("--iterations", type=int, default=4, help="iterations per epoch (default 4)")
    p.add_argument("--schedule", choices=SCHEDULES, default="slot", help="slot (default): agents update in turn from the newest broadcasts; broadcast: all update from the previous iteration")
    p.add_argument("--components", type=int, default=None, metavar="K", help="components per belief (default 4)")
    p.add_argument("--robust", action="store_true", help="blocked-path (two-ring) likelihood for every range")
    p.add_argument("--no-coop", action="store_true", help="ignore agent-agent ranges (anchors-only baseline)")
    p.add_argument(
        "--param",
        action="append",
        default=[],
        metavar="NAME=VALUE",
        help="set any estimator setting (see peerfix.reference.params.EstimatorParams); repeatable",
    )


def add_air_options(p: argparse.ArgumentParser) -> None:
    p.add_argument("--no-air", action="store_true", help="fixed engine: hand beliefs over as structs, not frame bytes")
    p.add_argument("--packet-loss", type=float, default=0.0, metavar="P", help="probability that a receiver misses a broadcast")
    p.add_argument("--bit-error-rate", type=float, default=0.0, metavar="B", help="probability that a bit of a frame flips (fixed engine on the air)")
    p.add_argument("--channel-seed", type=int, default=0, metavar="N", help="seed of the loss and bit-error draws")


def channel_from(args):
    from ..channel import Channel

    try:
        return Channel(args.packet_loss, args.bit_error_rate, args.channel_seed)
    except ValueError as err:
        raise SystemExit(f"peerfix: error: {err}")


def param_overrides(items) -> tuple[tuple[str, object], ...]:
    """--param NAME=VALUE items as (name, value) pairs, each value of its field's type."""
    defaults = EstimatorParams()
    fields = [f.name for f in dataclasses.fields(EstimatorParams)]
    pairs = []
    for item in items:
        name, sep, value = item.partition("=")
        if not sep or name not in fields:
            raise SystemExit(f"peerfix: error: --param {item!r}: expected NAME=VALUE with NAME one of {', '.join(fields)}")
        kind = type(getattr(defaults, name))
        try:
            parsed = (value.lower() in ("1", "true", "yes", "on")) if kind is bool else kind(value)
        except ValueError:
            raise SystemExit(f"peerfix: error: --param {name}: {value!r} is not a {kind.__name__}")
        pairs.append((name, parsed))
    return tuple(pairs)


def estimator_params(args) -> EstimatorParams:
    params = EstimatorParams()
    if args.components is not None:
        params = params.replace(max_components=args.components)
    if args.robust:
        params = params.replace(robust=True)
    overrides = param_overrides(args.param)
    params = params.replace(**dict(overrides))
    if params.max_components < 1:
        raise SystemExit("peerfix: error: --components must be at least 1")
    if params.robust:
        # The robust likelihood comes with its own reduction settings
        # (docs/estimator.md, "Robust preset"); what --param set explicitly wins.
        params = robust_preset(params, keep=tuple(name for name, _ in overrides))
    return params


def print_json(doc) -> None:
    json.dump(doc, sys.stdout, indent=2)
    sys.stdout.write("\n")


def add_time_options(p: argparse.ArgumentParser) -> None:
    """Time rules for logs with many epochs (docs/scenario-format.md, "Time and epochs");
    each overrides the scenario's [tracking] value."""
    p.add_argument("--epoch-window-s", type=float, default=None, metavar="S", help="stamps within S of an epoch's first stamp share the epoch (default: site, else 0 = exact t_s)")
    p.add_argument("--walk-speed-mps", type=float, default=None, metavar="V", help="how fast a tag may move between epochs (default: site, else a fixed random walk of 1 m^2/s)")
    p.add_argument("--silence-timeout-s", type=float, default=None, metavar="S", help="a tag silent for longer than S starts again from the prior (default: site, else 10 s)")
    p.add_argument("--fix-sd-m", type=float, default=None, metavar="M", help="first-fix criterion: sd of the dominant mode at most M (default 0.5 m)")


def time_options(args) -> dict:
    """run_scenario keyword arguments from add_time_options; bad values exit with a message."""
    for name, low, inclusive in (("epoch_window_s", 0.0, True), ("walk_speed_mps", 0.0, True), ("silence_timeout_s", 0.0, False), ("fix_sd_m", 0.0, False)):
        value = getattr(args, name)
        if value is None:
            continue
        ok = value == value and value != float("inf") and (value >= low if inclusive else value > low)
        if not ok:
            flag = "--" + name.replace("_", "-")
            raise SystemExit(f"peerfix: error: {flag} must be a finite number {'>=' if inclusive else '>'} {low:g}, found {value!r}")
    kw = {name: getattr(args, name) for name in ("epoch_window_s", "walk_speed_mps", "silence_timeout_s")}
    if args.fix_sd_m is not None:
        kw["fix_sd_m"] = args.fix_sd_m
    return kw


def add_log_options(p: argparse.ArgumentParser) -> None:
    p.add_argument(
        "--set-aside-bad-rows",
        action="store_true",
        help="skip malformed ranges.csv rows (bad number, unknown node, negative range, ...) instead of stopping; they are counted and listed by reason with their lines",
    )


def log_summary_lines(doc: dict, shown: int = 10) -> list[str]:
    """Human lines about the log (rules fired, rows set aside) and the first fixes, from a metrics document."""
    log = doc.get("log") or {}
    lines = []
    if log:
        fired = {k: v for k, v in log["rules"].items() if v["count"]}
        rules = ", ".join(f"{k} {v['count']}" for k, v in fired.items()) or "none"
        lines.append(f"log: {log['rows_used']} rows in {log['epochs']} epochs (window {log['epoch_window_s']:g} s); rules fired: {rules}")
        for reason, entry in log["set_aside"].items():
            shown_lines = ", ".join(str(n) for n in entry["lines"][:shown])
            more = f" and {entry['count'] - shown} more" if entry["count"] > shown else ""
            lines.append(f"set aside: {entry['count']} row(s), {reason}, line(s) {shown_lines}{more}")
    lat = doc.get("latency") or {}
    if lat and lat.get("agents_heard"):
        text = f"first fix: {lat['agents_fixed']}/{lat['agents_heard']} agents"
        if lat["latency_median_s"] is not None:
            text += f", latency median {lat['latency_median_s']:.3f} s, max {lat['latency_max_s']:.3f} s"
        if lat.get("agents_within_1m") is not None:
            text += f"; within 1 m: {lat['agents_within_1m']}"
            if lat["latency_within_1m_median_s"] is not None:
                text += f", median {lat['latency_within_1m_median_s']:.3f} s"
        lines.append(text)
    time = doc.get("time") or {}
    if time.get("resets_total"):
        lines.append(f"resets to the prior: {time['resets_total']} (silence timeout {time['silence_timeout_s']:g} s, or spread beyond the site)")
    return lines
