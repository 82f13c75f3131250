"""The queue lock: one exclusive ``flock`` on ``QUEUE/.lock`` serialises changes.

Every change to shared queue state (decision log, index, claims, new
record folders) happens while this lock is held, so the order of locks
never matters and two processes cannot interleave. Within one process
the lock is re-entrant (a thread-safe depth counter), because ``flock``
taken twice through two file descriptions of the same file would block
itself.
"""

from __future__ import annotations

import contextlib
import fcntl
import os
import threading
from pathlib import Path
from typing import Iterator

from tracevet.errors import InputError

_STATE_GUARD = threading.Lock()
_STATE: dict[str, tuple[threading.RLock, list]] = {}


def _state(path: Path) -> tuple[threading.RLock, list]:
    key = str(path)
    with _STATE_GUARD:
        if key not in _STATE:
            _STATE[key] = (threading.RLock(), [0, None, False])
        return _STATE[key]


@contextlib.contextmanager
def held(path: Path, shared: bool = False) -> Iterator[None]:
    """Hold the lock file ``path`` (exclusive, or shared for readers).

    Re-entrant within a process: an inner ``held`` on the same path while
    the outer one is exclusive is a no-op. A shared hold never upgrades.
    """
    path = Path(path)
    rlock, slot = _state(path)
    with rlock:
        if slot[0] > 0:
            if slot[2] and not shared:
                raise RuntimeError("cannot take the queue lock exclusively inside a shared hold")
            slot[0] += 1
            try:
                yield
            finally:
                slot[0] -= 1
            return
        try:
            fd = os.open(str(path), os.O_RDWR | os.O_CREAT, 0o666)
        except PermissionError:
            if not shared:
                raise InputError(
                    str(path.parent),
                    "no permission to change this queue (its files must be writable by your user or group)",
                ) from None
            fd = os.open(str(path), os.O_RDONLY)  # a reader without write permission still waits for writers
        try:
            fcntl.flock(fd, fcntl.LOCK_SH if shared else fcntl.LOCK_EX)
            slot[0], slot[1], slot[2] = 1, fd, shared
            try:
                yield
            finally:
                slot[0], slot[1], slot[2] = 0, None, False
                fcntl.flock(fd, fcntl.LOCK_UN)
        finally:
            os.close(fd)


def try_hold(path: Path) -> int | None:
    """Take an exclusive lock on ``path`` without waiting.

    Returns the open descriptor (close it to release) or ``None`` when
    another process holds the lock. Used for the one-clean-at-a-time guard.
    """
    fd = os.open(str(path), os.O_RDWR | os.O_CREAT, 0o666)
    try:
        fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
    except BlockingIOError:
        os.close(fd)
        return None
    return fd
