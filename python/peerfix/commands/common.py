"""Options shared by the commands that run an estimator."""

from __future__ import annotations

import argparse
import dataclasses
import json
import sys

from ..driver import SCHEDULES
from ..reference import EstimatorParams


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


def estimator_params(args) -> EstimatorParams:
    params = EstimatorParams()
    if args.components is not None:
        params = params.replace(max_components=args.components)
    if args.robust:
        params = params.replace(robust=True)
    fields = {f.name: f for f in dataclasses.fields(EstimatorParams)}
    for item in args.param:
        name, sep, value = item.partition("=")
        if not sep or name not in fields:
            raise SystemExit(f"peerfix: error: --param {item!r}: expected NAME=VALUE with NAME one of {', '.join(fields)}")
        kind = type(getattr(params, name))
        try:
            parsed = (value.lower() in ("1", "true", "yes", "on")) if kind is bool else kind(value)
        except ValueError:
            raise SystemExit(f"peerfix: error: --param {name}: {value!r} is not a {kind.__name__}")
        params = params.replace(**{name: parsed})
    if params.max_components < 1:
        raise SystemExit("peerfix: error: --components must be at least 1")
    return params


def print_json(doc) -> None:
    json.dump(doc, sys.stdout, indent=2)
    sys.stdout.write("\n")
