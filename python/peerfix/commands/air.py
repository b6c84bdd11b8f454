"""`peerfix air --out DIR`: bytes on the air against accuracy, K = 1 to 8 (fixed core, frames in the loop)."""

from __future__ import annotations

from pathlib import Path

from ..harness.air import air_study, write_air_report
from .common import print_json


def register(sub) -> None:
    p = sub.add_parser("air", help="bytes on the air and accuracy for K = 1..8 on a preset", description=__doc__)
    p.add_argument("--out", type=Path, required=True, metavar="DIR", help="folder for air.md, air.json, accuracy_vs_bytes.png")
    p.add_argument("--preset", default="open-field")
    p.add_argument("--seeds", type=int, default=10, help="networks per K (seeds 0..N-1)")
    p.add_argument("--iterations", type=int, default=4)
    p.add_argument("--max-k", type=int, default=8)
    p.add_argument("--packet-loss", type=float, default=0.0, metavar="P")
    p.add_argument("--bit-error-rate", type=float, default=0.0, metavar="B")
    p.add_argument("--json", action="store_true")
    p.set_defaults(handler=handle)


def handle(args) -> int:
    settings = {
        "preset": args.preset,
        "seeds": args.seeds,
        "iterations": args.iterations,
        "packet_loss": args.packet_loss,
        "bit_error_rate": args.bit_error_rate,
    }
    rows = air_study(range(1, args.max_k + 1), range(args.seeds), args.iterations, args.preset, args.packet_loss, args.bit_error_rate)
    doc = write_air_report(rows, args.out, settings)
    if args.json:
        print_json(doc)
    else:
        print((args.out / "air.md").read_text())
    return 0
