"""File helpers shared by every stage: atomic writes, and the regular-file test before reading.

A temporary file in the same folder, flushed and synced, then renamed over the
target: a run killed at any moment leaves either the old file or the new one,
never half of one. The file gets the mode an ordinary ``open()`` would give it
(``mkstemp`` alone makes it readable by its owner only).

A file a user names is read only when it is a regular file: opening a FIFO
waits for a writer forever, and a device may never end.
"""

from __future__ import annotations

import os
import stat
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


def not_regular(path: str | Path) -> str | None:
    """What ``path`` is when it exists but is not a regular file (``"a FIFO (named pipe)"``...), else None.

    Follows symbolic links, and never opens the file (opening a FIFO for reading blocks).
    """
    try:
        mode = os.stat(path).st_mode
    except (OSError, ValueError):   # missing, unreadable folder, NUL in the name: reported elsewhere
        return None
    if stat.S_ISREG(mode):
        return None
    if stat.S_ISFIFO(mode):
        return "a FIFO (named pipe)"
    if stat.S_ISDIR(mode):
        return "a folder"
    if stat.S_ISSOCK(mode):
        return "a socket"
    if stat.S_ISCHR(mode) or stat.S_ISBLK(mode):
        return "a device"
    return "not a regular file"
