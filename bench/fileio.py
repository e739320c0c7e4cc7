"""Atomic file writes, shared by every stage that writes a file.

A temporary file in the same folder, flushed and synced, then renamed over the
target: a run killed at any moment leaves either the old file or the new one,
never half of one. The file gets the mode an ordinary ``open()`` would give it
(``mkstemp`` alone makes it readable by its owner only).
"""

from __future__ import annotations

import os
import tempfile
from pathlib import Path

_UMASK = os.umask(0o022)
os.umask(_UMASK)
FILE_MODE = 0o666 & ~_UMASK


def write_atomic(path: str | Path, data: bytes) -> None:
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(dir=path.parent, prefix=f".{path.name}.", suffix=".tmp")
    try:
        with os.fdopen(fd, "wb") as fh:
            os.fchmod(fh.fileno(), FILE_MODE)
            fh.write(data)
            fh.flush()
            os.fsync(fh.fileno())
        os.replace(tmp, path)
    except BaseException:
        try:
            os.unlink(tmp)
        except FileNotFoundError:
            pass
        raise
