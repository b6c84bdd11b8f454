"""Shared helpers of the target-budget tests: one cross build per
configuration per session (cached in build/target between sessions), and
one emulator per build.

Tests skip, with the reason, when the cross compiler or unicorn is missing;
test_environment.py fails instead when CI=true, so CI never skips silently.
"""

from __future__ import annotations

import contextlib
import importlib.util
import io
import shutil

import pytest

HAVE_UNICORN = all(importlib.util.find_spec(m) is not None for m in ("unicorn", "capstone", "elftools"))
HAVE_CROSS = shutil.which("arm-none-eabi-gcc") is not None

needs_unicorn = pytest.mark.skipif(
    not HAVE_UNICORN, reason="unicorn/capstone/pyelftools not installed (pip install -e '.[test]')"
)
needs_cross = pytest.mark.skipif(
    not (HAVE_CROSS and HAVE_UNICORN),
    reason="arm-none-eabi-gcc or unicorn missing (tools/install_cross.sh; pip install -e '.[test]')",
)

_builds: dict = {}
_emulators: dict = {}


def target_build(name: str):
    """The cached BuildResult of one configuration (e.g. "cortex-m4-O2")."""
    from peerfix.budget.build import TargetConfig, build

    if name not in _builds:
        _builds[name] = build(TargetConfig.parse(name))
    return _builds[name]


def target_emulator(name: str):
    from peerfix.budget.emulator import Emulator

    if name not in _emulators:
        result = target_build(name)
        _emulators[name] = Emulator.from_elf(result.elf, result.config.cpu)
    return _emulators[name]


def run_cli(argv: list[str]) -> tuple[int, str]:
    """`peerfix ARGV` in this process: (exit status, what it printed)."""
    from peerfix.cli import main

    out = io.StringIO()
    with contextlib.redirect_stdout(out):
        status = main(argv)
    return status, out.getvalue()
