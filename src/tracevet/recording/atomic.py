"""Atomic file writes: temporary file in the same folder, fsync, rename."""

from __future__ import annotations

import contextlib
import os
import tempfile
from pathlib import Path
from typing import Callable, BinaryIO


def fsync_dir(path: Path) -> None:
    """fsync a directory so that a rename inside it survives a crash."""
    try:
        fd = os.open(str(path), os.O_RDONLY)
    except OSError:
        return
    try:
        os.fsync(fd)
    except OSError:
        pass
    finally:
        os.close(fd)


def _current_umask() -> int:
    """The process umask, read without changing it where the system allows."""
    try:
        with open("/proc/self/status", encoding="ascii") as status:
            for line in status:
                if line.startswith("Umask:"):
                    return int(line.split()[1], 8)
    except (OSError, ValueError, IndexError):
        pass
    old = os.umask(0o022)
    os.umask(old)
    return old


def default_mode(path: Path) -> int:
    """Permissions for a file written over ``path``: those it has, else what ``open`` would give.

    ``tempfile.mkstemp`` creates private (0600) files; without this, every
    atomically written file would be unreadable for the rest of a team sharing
    a queue or an output folder.
    """
    try:
        return path.stat().st_mode & 0o7777
    except OSError:
        return 0o666 & ~_current_umask()


def write_atomic(path: str | os.PathLike, writer: Callable[[BinaryIO], object], mode: int | None = None) -> None:
    """Write a file atomically.

    ``writer`` receives a binary file object open on a temporary file in the
    target folder. After it returns, the data are flushed and fsynced, the
    temporary file is renamed over ``path`` and the folder is fsynced. If the
    writer raises, the temporary file is removed and ``path`` is untouched.
    The file gets ``mode`` if given, else :func:`default_mode`.
    """
    path = Path(path)
    folder = path.parent if str(path.parent) else Path(".")
    fd, tmp_name = tempfile.mkstemp(prefix=f".{path.name[:40]}.", suffix=".tmp", dir=folder)
    try:
        with os.fdopen(fd, "wb") as handle:
            writer(handle)
            handle.flush()
            os.fsync(handle.fileno())
        os.chmod(tmp_name, default_mode(path) if mode is None else mode)
        os.replace(tmp_name, path)
    except BaseException:
        with contextlib.suppress(OSError):
            os.unlink(tmp_name)
        raise
    fsync_dir(folder)


def write_bytes_atomic(path: str | os.PathLike, data: bytes, mode: int | None = None) -> None:
    """Write ``data`` to ``path`` atomically (see :func:`write_atomic`)."""
    write_atomic(path, lambda handle: handle.write(data), mode=mode)


def write_text_atomic(path: str | os.PathLike, text: str, mode: int | None = None) -> None:
    """Write UTF-8 ``text`` to ``path`` atomically (see :func:`write_atomic`)."""
    write_bytes_atomic(path, text.encode("utf-8"), mode=mode)
