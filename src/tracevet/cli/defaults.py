"""Defaults shared by the commands that open a queue: which queue when none is named.

One owner for the rule, so ``tracevet review``, ``status`` and ``log`` open the
same queue without an argument. The reviewer-name rule lives in the core
(:func:`tracevet.workqueue.resolve_reviewer`), since the app uses it too.
"""

from __future__ import annotations

import os
from pathlib import Path

from tracevet.errors import InputError

QUEUE_ENV = "TRACEVET_QUEUE"
QUEUE_HELP = f"queue folder (default: ${QUEUE_ENV}, else the repository's queue/ folder)"


def default_queue_path() -> Path | None:
    """The queue opened without an argument: ``$TRACEVET_QUEUE``, else the checkout's ``queue/``.

    ``queue/`` is found relative to the installed package
    (``src/tracevet/../../queue``), which exists when running from a
    checkout; None when neither is available.
    """
    configured = os.environ.get(QUEUE_ENV)
    if configured:
        return Path(configured).expanduser()
    checkout_queue = Path(__file__).resolve().parents[3] / "queue"
    if checkout_queue.is_dir():
        return checkout_queue
    return None


def queue_path(given: str | None) -> Path:
    """The queue folder named on the command line, else the default one (InputError if none)."""
    if given:
        return Path(given).expanduser()
    path = default_queue_path()
    if path is None:
        raise InputError("queue", f"no queue given and no default found: pass a queue folder or set ${QUEUE_ENV}")
    return path
