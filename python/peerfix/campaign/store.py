"""Finished cells on disk: one small JSON per cell, DIR/cells/<key>.json.

A result is written to a temporary file in the same folder and renamed into
place (os.replace is atomic on POSIX and Windows), so an interrupted campaign
leaves either a whole result or none; a rerun skips every key that has a file.
"""

from __future__ import annotations

import json
import os
import tempfile
from pathlib import Path

from ..runner import _json_safe


class CellStore:
    def __init__(self, out: str | Path):
        self.folder = Path(out) / "cells"

    def path(self, key: str) -> Path:
        return self.folder / f"{key}.json"

    def has(self, key: str) -> bool:
        return self.path(key).is_file()

    def load(self, key: str) -> dict:
        with open(self.path(key)) as f:
            return json.load(f)

    def save(self, result: dict) -> Path:
        self.folder.mkdir(parents=True, exist_ok=True)
        target = self.path(result["key"])
        fd, tmp = tempfile.mkstemp(prefix=f".{result['key']}.", suffix=".tmp", dir=self.folder)
        try:
            with os.fdopen(fd, "w") as f:
                json.dump(_json_safe(result), f, separators=(",", ":"))
                f.flush()
                os.fsync(f.fileno())
            os.replace(tmp, target)
        except BaseException:
            Path(tmp).unlink(missing_ok=True)
            raise
        return target
