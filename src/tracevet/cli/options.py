"""Command-line options that several commands share: one spelling, one place.

``--set KEY=VALUE`` (cleaning settings), ``--reviewer NAME`` (who acts, with
the default rule of :func:`tracevet.workqueue.resolve_reviewer`) and the
options that say how to read a recording (``--fs``, ``--kind``, ``--units``).
Each command gives the help text that says what the option does for it.
"""

from __future__ import annotations

import argparse

from tracevet.recording import KINDS
from tracevet.recording.model import units_option
from tracevet.workqueue.queue import REVIEWER_ENV


def add_set_option(parser: argparse.ArgumentParser, help_text: str) -> None:
    """``--set KEY=VALUE`` (repeatable), collected in ``args.overrides``."""
    parser.add_argument(
        "--set", dest="overrides", action="append", default=[], metavar="KEY=VALUE", help=help_text
    )


def add_reviewer_option(parser: argparse.ArgumentParser, who: str) -> None:
    """``--reviewer NAME``; ``who`` says what the name is used for."""
    parser.add_argument("--reviewer", help=f"{who} (default ${REVIEWER_ENV} or login name)")


def add_read_options(parser: argparse.ArgumentParser, files: str) -> None:
    """``--fs``, ``--kind`` and ``--units``: how to read the input ``files`` ("the file", "the files")."""
    parser.add_argument(
        "--fs",
        type=float,
        metavar="HZ",
        help=f"sampling rate in Hz (needed for .npy; must agree with {files} otherwise)",
    )
    parser.add_argument("--kind", choices=KINDS, help=f"what the recording is: ecg, mcg or other (overrides {files})")
    parser.add_argument(
        "--units", metavar="U", type=units_option, help=f"units of the samples, e.g. mV, uV, pT, fT (overrides {files})"
    )
