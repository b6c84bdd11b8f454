"""The fixed-point C core, driven through cffi.

- ``peerfix.core._pfx``: the compiled cffi module (built at install time by
  ``_build.py`` from ``c_core/``); ``lib`` holds the C functions.
- ``peerfix.core.quantise``: pure-Python mirrors of the C rounding, bit for
  bit, and SI-float <-> Q-format conversion.
- ``peerfix.core.fixed``: thin checked wrappers over the C primitives.

This file stays free of the compiled module so that ``quantise`` works on a
machine where the C core has not been built.

Loading another build of the core (release-regression tests, A/B of build
flags): set ``PEERFIX_CORE_LIBRARY=/path/to/_pfx.<suffix>.so`` (a module built
by ``python python/peerfix/core/_build.py``).  That file is then loaded as
``peerfix.core._pfx`` when this package is first imported, before anything
imports the installed module, and ``CORE_LIBRARY`` holds its path (None: the
installed module is used).  A path that does not exist, or a different
``peerfix.core._pfx`` already imported, is an ImportError: a silent fallback
to the installed core would defeat the purpose.
"""

from __future__ import annotations

import importlib.machinery
import importlib.util
import os
import sys
from enum import IntEnum
from pathlib import Path

CORE_LIBRARY_ENV = "PEERFIX_CORE_LIBRARY"
_MODULE = __name__ + "._pfx"


def _load_core_library(env: str = CORE_LIBRARY_ENV) -> str | None:
    """Load the file named by $PEERFIX_CORE_LIBRARY as peerfix.core._pfx; its path, or None."""
    value = os.environ.get(env, "").strip()
    if not value:
        return None
    path = Path(value).resolve()
    if not path.is_file():
        raise ImportError(f"{env}={value}: no such file", name=_MODULE, path=str(path))
    loaded = sys.modules.get(_MODULE)
    if loaded is not None:
        if Path(getattr(loaded, "__file__", "")).resolve() == path:
            return str(path)
        raise ImportError(f"{env}={value}: {_MODULE} is already loaded from {loaded.__file__}", name=_MODULE)
    loader = importlib.machinery.ExtensionFileLoader(_MODULE, str(path))
    spec = importlib.util.spec_from_file_location(_MODULE, path, loader=loader)
    if spec is None:  # pragma: no cover - only for paths the import system cannot describe
        raise ImportError(f"{env}={value}: not loadable as an extension module", name=_MODULE)
    module = importlib.util.module_from_spec(spec)
    sys.modules[_MODULE] = module  # before exec, as the import system does
    try:
        spec.loader.exec_module(module)
    except BaseException:
        del sys.modules[_MODULE]
        raise
    return str(path)


CORE_LIBRARY: str | None = _load_core_library()


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


__all__ = ["CORE_LIBRARY", "CORE_LIBRARY_ENV", "CoreError", "Status"]
