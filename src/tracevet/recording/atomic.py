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


def write_atomic(path: str | os.PathLike, writer: Callable[[BinaryIO], None], mode: int | None = None) -> None:
    """Write a file atomically.

    ``writer`` receives a binary file object open on a temporary file in the
    target folder. After it returns, the data are flushed and fsynced, the
    temporary file is renamed over ``path`` and the folder is fsynced. If the
    writer raises, the temporary file is removed and ``path`` is untouched.
    """
    path = Path(path)
    folder = path.parent if str(path.parent) else Path(".")
    fd, tmp_name = tempfile.mkstemp(prefix=f".{path.name[:40]}.", suffix=".tmp", dir=folder)
    try:
        with os.fdopen(fd, "wb") as handle:
            writer(handle)
            handle.flush()
            os.fsync(handle.fileno())
        if mode is not None:
            os.chmod(tmp_name, mode)
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
