"""The ``tracevet`` command: argument parsing, dispatch and error handling.

Contract for scripts: exit 0 on success, 2 with one line on stderr for bad
input or usage (``tracevet assess`` also uses 1 for "at least one fail
flag"). No traceback is ever printed unless ``TRACEVET_DEBUG=1`` is set.
"""

from __future__ import annotations

import argparse
import importlib
import os
import sys
from typing import Sequence

from tracevet import __version__
from tracevet.caution import CAUTION
from tracevet.errors import TracevetError
from tracevet.text import inert


# One module per command group under tracevet.cli; each has register(subparsers).
COMMAND_MODULES = (
    "denoise_cmd",
    "assess_cmd",
    "suggest_cmd",
    "queue_cmd",
    "review_cmd",
    "demo_cmd",
)


class UsageError(TracevetError):
    """Bad command-line usage."""


class OneLineParser(argparse.ArgumentParser):
    """An ArgumentParser whose errors are one line and exit code 2."""

    def error(self, message: str):  # noqa: D401 - argparse API
        raise UsageError(f"{self.prog}: {message} (see '{self.prog} --help')")


def build_parser() -> argparse.ArgumentParser:
    """Build the full argument parser with every command registered."""
    parser = OneLineParser(
        prog="tracevet",
        description=(
            "Review and sign-off of wavelet-denoised heart recordings (ECG, MCG): "
            "clean, assess shape fidelity, work through a queue, log every decision.\n\n" + CAUTION
        ),
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    parser.add_argument("--version", action="version", version=f"tracevet {__version__}")
    subparsers = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=OneLineParser)
    for name in COMMAND_MODULES:
        try:
            module = importlib.import_module(f"tracevet.cli.{name}")
        except ModuleNotFoundError as exc:
            if exc.name == f"tracevet.cli.{name}":
                continue  # command group not built in this version
            raise
        module.register(subparsers)
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    """Run the command line and return its exit code."""
    try:
        parser = build_parser()
        args = parser.parse_args(argv)
        if not getattr(args, "func", None):
            parser.print_help()
            return 0
        return int(args.func(args) or 0)
    except SystemExit as exc:  # --help and --version
        return int(exc.code or 0) if isinstance(exc.code, int) or exc.code is None else 2
    except TracevetError as exc:
        line = exc.one_line()
        print(line if line.startswith("tracevet") else f"tracevet: {line}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("tracevet: interrupted", file=sys.stderr)
        return 130
    except BrokenPipeError:
        return 0
    except Exception as exc:  # last resort: never a traceback for the user
        if os.environ.get("TRACEVET_DEBUG") == "1":
            raise
        print(
            f"tracevet: internal error ({type(exc).__name__}: {inert(exc, 200)}); "
            "set TRACEVET_DEBUG=1 for details",
            file=sys.stderr,
        )
        return 3


def entry_point() -> None:
    """Console-script entry point."""
    sys.exit(main())
