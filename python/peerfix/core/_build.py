"""cffi build script for ``peerfix.core._pfx`` (API mode).

Run by setuptools through ``cffi_modules`` in setup.py (so ``pip install .``
and ``pip install -e .`` compile the C core), or by hand:
``python python/peerfix/core/_build.py`` builds the module in the current
directory.

The cdef is not written here: it is read from the public header
c_core/include/peerfix.h and every project header that it includes, taking
the text between the ``/* PFX_CDEF_BEGIN */`` and ``/* PFX_CDEF_END */``
markers, in include order.  The header stays the single source of truth.

Environment (all optional):
  PEERFIX_CFLAGS   extra compiler flags, appended after the defaults
                   (e.g. "-fsanitize=address,undefined -fno-omit-frame-pointer");
                   they are passed to the linker too, which sanitizers need.
  PEERFIX_LDFLAGS  extra linker-only flags.
  PEERFIX_DEFINES  macros for variant builds, separated by spaces or commas:
                   "PFX_USE_BUILTIN_CLZ PFX_MAX_COMPONENTS=32".
"""

from __future__ import annotations

import os
import re
import shlex
from pathlib import Path

from cffi import FFI

MODULE_NAME = "peerfix.core._pfx"
BASE_CFLAGS = ["-std=c99", "-Wall", "-Wextra", "-Werror", "-O2"]

# setuptools runs this file with __file__ set to the path given in setup.py.
# (In an installed copy these paths point nowhere; only the build uses them.)
ROOT = Path(__file__).resolve().parents[3]
C_CORE = ROOT / "c_core"
INCLUDE = C_CORE / "include"
PUBLIC_HEADER = INCLUDE / "peerfix.h"

_BEGIN = "/* PFX_CDEF_BEGIN */"
_END = "/* PFX_CDEF_END */"
_LOCAL_INCLUDE = re.compile(r'^\s*#\s*include\s+"([^"]+)"')


def read_cdef(header: Path = PUBLIC_HEADER, _seen: set[Path] | None = None) -> str:
    """The marked declarations of ``header`` and of the project headers it includes."""
    seen = set() if _seen is None else _seen
    header = header.resolve()
    if header in seen:
        return ""
    seen.add(header)
    parts: list[str] = []
    inside = False
    for number, line in enumerate(header.read_text(encoding="utf-8").splitlines(), start=1):
        stripped = line.strip()
        if stripped == _BEGIN:
            if inside:
                raise ValueError(f"{header}:{number}: nested {_BEGIN}")
            inside = True
            continue
        if stripped == _END:
            if not inside:
                raise ValueError(f"{header}:{number}: {_END} without {_BEGIN}")
            inside = False
            continue
        included = _LOCAL_INCLUDE.match(line)
        if included:
            target = header.parent / included.group(1)
            if target.is_file():
                parts.append(read_cdef(target, seen))
            continue
        if inside:
            parts.append(line)
    if inside:
        raise ValueError(f"{header}: {_BEGIN} is never closed")
    return "\n".join(parts)


def _defines() -> list[tuple[str, str | None]]:
    macros: list[tuple[str, str | None]] = []
    for item in re.split(r"[\s,]+", os.environ.get("PEERFIX_DEFINES", "").strip()):
        if not item:
            continue
        name, sep, value = item.partition("=")
        macros.append((name, value if sep else None))
    return macros


def _relative(path: Path) -> str:
    """Paths relative to the working directory where possible (setuptools prefers them)."""
    try:
        return str(path.relative_to(Path.cwd().resolve()))
    except ValueError:
        return str(path)


def make_ffibuilder() -> FFI:
    extra_cflags = shlex.split(os.environ.get("PEERFIX_CFLAGS", ""))
    extra_ldflags = shlex.split(os.environ.get("PEERFIX_LDFLAGS", ""))
    sources = sorted((C_CORE / "src").glob("*.c"))
    if not sources:
        raise FileNotFoundError(f"no C sources under {C_CORE / 'src'}")
    builder = FFI()
    builder.cdef(read_cdef())
    # The flags are written into the generated wrapper so that a change of
    # flags changes that file and setuptools rebuilds instead of reusing a
    # stale module from build/.
    defines = " ".join(n if v is None else f"{n}={v}" for n, v in _defines())
    stamp = (
        f"PEERFIX_CFLAGS={' '.join(extra_cflags)} PEERFIX_LDFLAGS={' '.join(extra_ldflags)} "
        f"PEERFIX_DEFINES={defines}"
    )
    # The module also answers pfx_build_stamp(), so that a baseline records how
    # the core it ran was built (python/peerfix/baseline/buildinfo.py).
    builder.cdef("const char *pfx_build_stamp(void);")
    c_stamp = stamp.replace("\\", "\\\\").replace('"', '\\"')
    builder.set_source(
        MODULE_NAME,
        f"/* build: {stamp.replace('*/', '')} */\n#include \"peerfix.h\"\n"
        f'const char *pfx_build_stamp(void) {{ return "{c_stamp}"; }}\n',
        sources=[_relative(p) for p in sources],
        include_dirs=[_relative(INCLUDE)],
        define_macros=_defines(),
        extra_compile_args=BASE_CFLAGS + extra_cflags,
        extra_link_args=extra_cflags + extra_ldflags,
        depends=[_relative(p) for p in sorted(INCLUDE.glob("*.h"))],
    )
    return builder


# setuptools' cffi_modules runs this file with __name__ == "__cffi__"; a plain
# import (e.g. a test reading read_cdef) builds nothing and needs no sources.
if __name__ in ("__cffi__", "__main__"):
    ffibuilder = make_ffibuilder()

if __name__ == "__main__":
    ffibuilder.compile(verbose=True)
