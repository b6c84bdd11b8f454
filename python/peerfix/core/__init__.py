"""The fixed-point C core, driven through cffi.

- ``peerfix.core._pfx``: the compiled cffi module (built at install time by
  ``_build.py`` from ``c_core/``); ``lib`` holds the C functions.
- ``peerfix.core.quantise``: pure-Python mirrors of the C rounding, bit for
  bit, and SI-float <-> Q-format conversion.
- ``peerfix.core.fixed``: thin checked wrappers over the C primitives.

This file stays free of the compiled module so that ``quantise`` works on a
machine where the C core has not been built.
"""

from __future__ import annotations

from enum import IntEnum


class Status(IntEnum):
    """Mirror of ``pfx_status_t`` in c_core/include/peerfix.h (a test checks they agree)."""

    OK = 0
    ERR_ARG = 1
    ERR_DOMAIN = 2
    ERR_RANGE = 3
    ERR_FULL = 4
    ERR_EMPTY = 5
    ERR_DEGENERATE = 6
    ERR_FORMAT = 7
    ERR_VERSION = 8
    ERR_STATE = 9


class CoreError(Exception):
    """A C core call returned a status other than PFX_OK."""

    def __init__(self, status: int, what: str):
        self.status = Status(status)
        self.what = what
        super().__init__(f"{what}: {self.status.name}")


__all__ = ["CoreError", "Status"]
