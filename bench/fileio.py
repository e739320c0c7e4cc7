"""File helpers shared by every stage: atomic writes, bounded reads, file hashes, temp cleanup, path checks.

Atomic writes: a temporary file in the same folder, flushed and synced, then
renamed over the target: a run killed at any moment leaves either the old file
or the new one, never half of one. The file gets the mode an ordinary
``open()`` would give it (``mkstemp`` alone makes it readable by its owner
only). Temporary names are ``.<name>.<random>.tmp`` (``.tmp<suffix>`` when a
library picks the format from the suffix), which `remove_temp_files` knows.

A file a user names is read only when it is a regular file: opening a FIFO
waits for a writer forever, and a device may never end. `not_regular` says
what a path is without opening it; `read_limited` checks the open descriptor
(so the file checked is the file read) and a size limit.
"""

from __future__ import annotations

import contextlib
import hashlib
import os
import re
import stat
import tempfile
from collections.abc import Iterable, Iterator, Sequence
from pathlib import Path

_UMASK = os.umask(0o022)
os.umask(_UMASK)
FILE_MODE = 0o666 & ~_UMASK

#: Names of the temporary files `write_atomic` and `atomic_target` make.
TEMP_NAME = re.compile(r"^\..+\.[A-Za-z0-9_]+\.tmp(\.[A-Za-z0-9]+)?$")


def unlink_quietly(path: str | Path) -> None:
    """Remove ``path`` if it is there."""
    try:
        os.unlink(path)
    except FileNotFoundError:
        pass


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
        unlink_quietly(tmp)
        raise


@contextlib.contextmanager
def atomic_target(path: str | Path) -> Iterator[Path]:
    """A temporary path beside ``path`` (same suffix) for a writer that wants a file name; renamed over
    ``path`` when the block ends, removed if it raises."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(dir=path.parent, prefix=f".{path.name}.", suffix=".tmp" + path.suffix)
    os.close(fd)
    os.chmod(tmp, FILE_MODE)
    try:
        yield Path(tmp)
        os.replace(tmp, path)
    except BaseException:
        unlink_quietly(tmp)
        raise


def remove_temp_files(folder: str | Path) -> list[Path]:
    """Delete the temporary files an interrupted atomic write left in ``folder`` (not below it)."""
    removed = []
    try:
        entries = list(Path(folder).iterdir())
    except OSError:
        return removed
    for p in entries:
        if TEMP_NAME.match(p.name) and p.is_file():
            try:
                p.unlink()
                removed.append(p)
            except OSError:
                pass
    return removed


class FileReadError(OSError):
    """A file that `read_limited` refuses; ``str()`` says why in words."""


def read_limited(path: str | Path, max_bytes: int) -> bytes:
    """The bytes of the regular file ``path``, refusing a folder, a FIFO or device, and more than ``max_bytes``.

    Opened without blocking (a FIFO with no writer would otherwise hang the open), then checked on the
    open descriptor, so the file checked is the file read.
    """
    try:
        fd = os.open(path, os.O_RDONLY | getattr(os, "O_NONBLOCK", 0))
    except IsADirectoryError:
        raise FileReadError(f"{path} is a folder, not a file") from None
    try:
        st = os.fstat(fd)
        if stat.S_ISDIR(st.st_mode):
            raise FileReadError(f"{path} is a folder, not a file")
        if not stat.S_ISREG(st.st_mode):
            raise FileReadError(f"{path} is not a regular file (a pipe, socket or device)")
        if st.st_size > max_bytes:
            raise FileReadError(f"{path} is {st.st_size} bytes, over the limit of {max_bytes} bytes")
        with os.fdopen(fd, "rb", closefd=False) as fh:
            data = fh.read(max_bytes + 1)
    finally:
        os.close(fd)
    if len(data) > max_bytes:   # grew since the check
        raise FileReadError(f"{path} is over the limit of {max_bytes} bytes")
    return data


def sha256_file(path: str | Path, chunk_bytes: int = 1 << 20) -> str:
    """Hex SHA-256 of a file's bytes, read in chunks."""
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(chunk_bytes), b""):
            h.update(block)
    return h.hexdigest()


def sha256_files(root: str | Path, files: Iterable[str | Path]) -> str:
    """Hex SHA-256 over ``files`` in name order: each one's path relative to ``root``, then its bytes."""
    root = Path(root)
    h = hashlib.sha256()
    for f in sorted(Path(f) for f in files):
        h.update(f.relative_to(root).as_posix().encode())
        h.update(f.read_bytes())
    return h.hexdigest()


def is_inside(path: Path, roots: Sequence[Path]) -> bool:
    """Whether the (resolved) ``path`` is one of the (resolved) ``roots`` or below one."""
    return any(path == r or path.is_relative_to(r) for r in roots)


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
