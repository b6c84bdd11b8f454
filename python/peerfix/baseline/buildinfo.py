"""What the loaded fixed-point core says about its own build.

A baseline records this so that a report can say which build made which
estimates.  The sources, in order of trust:

- the module file itself: its path and SHA-256 (always), the compiler named
  in the ELF ``.comment`` section (when pyelftools is installed), and the
  compile-time bounds the module exports (``PFX_MAX_*``, ``PFX_WIRE_VERSION``);
- the build stamp (CFLAGS, LDFLAGS, DEFINES) that ``core/_build.py`` writes
  into the generated wrapper source.  Read from the module itself when it
  exports ``pfx_build_stamp()`` (modules built by core/_build.py do);
  else from the wrapper ``_pfx.c`` beside the module, where a build by hand
  (``python python/peerfix/core/_build.py`` in a folder) leaves it, and only
  when that file is not newer than the module.  An installed module has no
  such file: its stamp is recorded as unknown, never guessed.
"""

from __future__ import annotations

import hashlib
import re
from pathlib import Path

# The stamp as _build.py writes it into the wrapper ("/* build: ... */"), or bare.
STAMP = re.compile(r"PEERFIX_CFLAGS=(.*?) PEERFIX_LDFLAGS=(.*?) PEERFIX_DEFINES=(.*?)(?: \*/|$)", re.MULTILINE)
BOUND_NAMES = (
    "PFX_MAX_COMPONENTS",
    "PFX_MAX_WORKING",
    "PFX_MAX_CANDIDATES",
    "PFX_MAX_NEIGHBOURS",
    "PFX_MAX_BROAD_ARCS",
    "PFX_MAX_RINGS",
    "PFX_WIRE_VERSION",
)
# The C core, relative to the repository root (for the source digest).
C_CORE_GLOBS = ("c_core/src/*.c", "c_core/include/*.h")


def file_sha256(path: Path) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as f:
        for block in iter(lambda: f.read(1 << 20), b""):
            h.update(block)
    return h.hexdigest()


def parse_stamp(text: str) -> dict | None:
    """The build stamp in a generated wrapper source, or None."""
    m = STAMP.search(text)
    if m is None:
        return None
    cflags, ldflags, defines = (g.strip() for g in m.groups())
    return {"cflags": cflags, "ldflags": ldflags, "defines": defines.split() if defines else []}


def _wrapper_stamp(library: Path) -> tuple[dict | None, str | None]:
    wrapper = library.parent / "_pfx.c"
    if not wrapper.is_file() or wrapper.stat().st_mtime > library.stat().st_mtime:
        return None, None  # absent, or rewritten after the module was built: not this build's
    return parse_stamp(wrapper.read_text(encoding="utf-8", errors="replace")), str(wrapper)


def _elf_comment(library: Path) -> list[str] | None:
    """The compiler identification strings of an ELF file (.comment), or None when unreadable."""
    try:
        from elftools.common.exceptions import ELFError
        from elftools.elf.elffile import ELFFile
    except ImportError:
        return None
    try:
        with open(library, "rb") as f:
            section = ELFFile(f).get_section_by_name(".comment")
            if section is None:
                return []
            return sorted({s.decode("utf-8", "replace") for s in section.data().split(b"\0") if s})
    except (OSError, ELFError):  # not ELF (another platform): the compiler stays unknown
        return None


def source_digest(root: Path) -> str | None:
    """SHA-256 over the C core's sources under `root` (names and bytes), or None without them."""
    files = sorted(p for g in C_CORE_GLOBS for p in root.glob(g))
    if not files:
        return None
    h = hashlib.sha256()
    for p in files:
        h.update(p.relative_to(root).as_posix().encode() + b"\0" + p.read_bytes() + b"\0")
    return h.hexdigest()


def core_build_info() -> dict:
    """The loaded core's identity (see the module docstring for where each field comes from)."""
    from .. import core
    from ..core import _pfx

    library = Path(_pfx.__file__).resolve()
    if hasattr(_pfx.lib, "pfx_build_stamp"):
        stamp, stamp_source = parse_stamp(_pfx.ffi.string(_pfx.lib.pfx_build_stamp()).decode()), "pfx_build_stamp()"
    else:
        stamp, stamp_source = _wrapper_stamp(library)
    repo_root = Path(__file__).resolve().parents[3]
    return {
        "library": str(library),
        "library_sha256": file_sha256(library),
        "loaded_via": core.CORE_LIBRARY_ENV if core.CORE_LIBRARY else "installed module",
        "compiler": _elf_comment(library),
        "build_stamp": stamp,  # None: unknown (installed module)
        "build_stamp_source": stamp_source,
        "bounds": {name: int(getattr(_pfx.lib, name)) for name in BOUND_NAMES if hasattr(_pfx.lib, name)},
        # The source tree beside this package now: not proof of what the module was built from.
        "c_core_source_sha256": source_digest(repo_root),
    }
