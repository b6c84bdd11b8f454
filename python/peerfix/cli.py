"""The `peerfix` command: parses, calls library functions, prints.

Every subcommand lives in the module that does the work; this file only
wires them together and turns input errors into exit status 2.
"""

from __future__ import annotations

import argparse
import sys

from . import __version__
from .errors import InputError


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="peerfix",
        description="Cooperative positioning for ranging radio tags: simulate, estimate, check.",
    )
    parser.add_argument("--version", action="version", version=f"peerfix {__version__}")
    sub = parser.add_subparsers(dest="command", required=True, metavar="COMMAND")

    from .commands import air, baseline, budget, compare, demo, run, sweep
    from .simulate import cli as simulate_cli

    simulate_cli.register(sub)
    run.register(sub)
    compare.register(sub)
    air.register(sub)
    demo.register(sub)
    budget.register(sub)
    baseline.register(sub)
    sweep.register(sub)
    return parser


def main(argv: list[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    try:
        return int(args.handler(args) or 0)
    except InputError as err:
        print(f"peerfix: error: {err}", file=sys.stderr)
        return 2


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
