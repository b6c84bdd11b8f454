"""Subcommands of the `peerfix` CLI: each module has register(subparsers)."""
