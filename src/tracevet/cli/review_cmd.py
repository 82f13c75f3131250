"""``tracevet review [QUEUE] [--reviewer NAME]``: open the review app on a queue."""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from tracevet.cli.defaults import QUEUE_ENV, QUEUE_HELP, default_queue_path, queue_path
from tracevet.cli.options import add_reviewer_option
from tracevet.errors import InputError
from tracevet.text import inert
from tracevet.workqueue.queue import resolve_reviewer

__all__ = ["QUEUE_ENV", "default_queue_path", "register", "run"]


def register(subparsers) -> None:
    """Add the ``review`` command."""
    parser = subparsers.add_parser(
        "review",
        help="open the keyboard-only review app on a queue",
        description=(
            "Step through a queue in the terminal: look at original, cleaned and removed traces and the "
            "averaged beat, read the flags, accept, reject or re-run, with a note. Every decision is "
            "written to the queue's log before the app says it is saved. Press ? in the app for every key."
        ),
    )
    parser.add_argument("queue", nargs="?", help=QUEUE_HELP)
    add_reviewer_option(parser, "name written into claims and decisions")
    parser.set_defaults(func=run)


def fill_default_queue_with_demo(path: Path) -> bool:
    """Fill the empty default queue from the demo generator, if it is available.

    Returns True when the demo filled the queue. When the demo builder is
    not part of this installation, prints one line saying the queue is
    empty and how to add records, and returns False.
    """
    try:
        from tracevet.demo import build_demo_queue
    except ImportError:
        print(
            f"tracevet: the queue {inert(path)} holds no records yet; add recordings with "
            f"'tracevet add {inert(path)} FILE...' and clean them, then run 'tracevet review' again",
            file=sys.stderr,
        )
        return False

    def progress(fraction: float) -> None:
        print(f"\rbuilding the demo queue: {fraction * 100:5.1f} %", end="", file=sys.stderr, flush=True)

    build_demo_queue(path, progress)
    print(file=sys.stderr)
    return True


def _holds_records(path: Path) -> bool:
    """True when ``path`` is a queue with at least one record (False if it is not a queue yet)."""
    try:
        return bool(_open_queue(path).records())
    except InputError:
        return False


def _open_queue(path: Path):
    from tracevet.workqueue import Queue

    return Queue.open(path)


def run(args: argparse.Namespace) -> int:
    """Open the queue and run the app until the reviewer quits."""
    is_default = args.queue is None
    path = queue_path(args.queue)
    reviewer = resolve_reviewer(args.reviewer)
    if is_default and not _holds_records(path):
        if not fill_default_queue_with_demo(path):
            return 2
    queue = _open_queue(path)
    if not sys.stdout.isatty() or not sys.stdin.isatty():
        raise InputError("terminal", "tracevet review needs an interactive terminal (stdin and stdout)")
    from tracevet.app.app import ReviewApp

    app = ReviewApp(queue, reviewer)
    try:
        app.run()
    finally:
        app.release_claim()
    return 0
