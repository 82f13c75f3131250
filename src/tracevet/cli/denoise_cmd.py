"""``tracevet denoise``: clean a recording with the wavelet engine and write it.

Contract for scripts (keep stable): exit 0 on success; 2 with one line on
stderr for bad input or usage, and then no output file is written or
changed. The input file is never changed.

The pieces are separate functions so that other commands (and options such
as an assessment of the result) can reuse them: :func:`add_input_arguments`,
:func:`add_settings_arguments`, :func:`settings_from_args`,
:func:`check_output_path`, :func:`read_input`.
"""

from __future__ import annotations

import argparse
import os
import re
import sys
from pathlib import Path

from tracevet.caution import CAUTION
from tracevet.cleaning import (
    DEFAULT_SETTINGS,
    PROFILE_HELP,
    PROFILES,
    SETTING_CHOICES,
    SETTING_HELP,
    CleaningSettings,
    apply_overrides,
    load_profile,
)
from tracevet.cli import assess_cmd
from tracevet.cli.options import add_read_options, add_set_option
from tracevet.errors import InputError
from tracevet.recording import Recording, SUPPORTED_READ, SUPPORTED_WRITE, read_recording, write_recording
from tracevet.text import inert



def _compact_choices(values) -> str:
    """Summarise long choice lists: 'db1..db38' per family, in sorted order."""
    values = list(values)
    if len(values) <= 12:
        return ", ".join(str(v) for v in values)
    families: dict[str, list[str]] = {}
    for value in values:
        letters = re.match(r"[a-z]*", value)
        families.setdefault(letters.group(0) if letters else value, []).append(value)
    parts = []
    for family in sorted(families):
        names = families[family]
        if len(names) == 1:
            parts.append(names[0])
            continue
        key = lambda v: tuple(float(p) for p in re.findall(r"\d+", v))  # noqa: E731
        names = sorted(names, key=key)
        parts.append(f"{names[0]}..{names[-1]} ({len(names)})")
    return ", ".join(parts)


def settings_reference() -> str:
    """Help text: every setting with its meaning, choices and default."""
    defaults = DEFAULT_SETTINGS.to_dict()
    lines = ["settings (change with --set KEY=VALUE or a --profile YAML file):"]
    for name, help_text in SETTING_HELP.items():
        lines.append(f"  {name} (default: {defaults[name]})")
        lines.append(f"      {help_text}")
        if name in SETTING_CHOICES:
            lines.append(f"      choices: {_compact_choices(SETTING_CHOICES[name])}")
    lines += ["", "built-in profiles (--profile NAME; see docs/cleaning.md for their measured trade-offs):"]
    lines += [f"  {name}: {PROFILE_HELP[name]}" for name in PROFILES]
    lines += [
        "",
        "mains auto: the settings digest printed and recorded is that of the settings applied (mains resolved",
        "to 50, 60 or off); the line found is printed after the 'cleaned' line.",
        "",
        "example:",
        "  tracevet denoise holter.edf holter-clean.edf --set mains=50 --set transform=dwt",
        "",
        "exit status: 0 cleaned and written; 2 bad input or usage (one line on stderr, nothing written).",
        CAUTION,
    ]
    return "\n".join(lines)


def add_input_arguments(parser: argparse.ArgumentParser) -> None:
    """INPUT and the options that say how to read it (--fs, --kind, --units)."""
    parser.add_argument("input", metavar="INPUT", nargs="?", help=f"recording to clean ({', '.join(SUPPORTED_READ)})")
    add_read_options(parser, "the file")


def add_settings_arguments(parser: argparse.ArgumentParser) -> None:
    """--profile, --set and --show-settings."""
    parser.add_argument(
        "--profile",
        metavar="NAME|FILE",
        help=f"built-in profile ({', '.join(PROFILES)}) or a YAML profile file (safe loading only); "
        "unnamed settings keep their default",
    )
    add_set_option(parser, "change one setting, after the profile (repeatable), e.g. --set level=5")
    parser.add_argument(
        "--show-settings", action="store_true", help="print the effective settings as YAML and their SHA-256 digest"
    )


def settings_from_args(args: argparse.Namespace) -> CleaningSettings:
    """Defaults, then the profile, then the --set overrides, validated."""
    settings = load_profile(args.profile) if args.profile else DEFAULT_SETTINGS
    return apply_overrides(settings, args.overrides)


def show_settings(settings: CleaningSettings, stream=None) -> None:
    """Print the settings as YAML with their digest as a comment line."""
    stream = stream or sys.stdout
    stream.write(settings.to_yaml())
    stream.write(f"# digest: {settings.digest()}\n")


def check_output_path(output: str, input_path: str | None = None) -> Path:
    """Refuse an output path before any work: bad extension, missing folder, the input itself."""
    path = Path(output)
    suffix = path.suffix.lower()
    if suffix not in SUPPORTED_WRITE:
        raise InputError(
            output, f"cannot write '{suffix or 'no extension'}' files (supported: {', '.join(SUPPORTED_WRITE)})"
        )
    if path.is_dir():
        raise InputError(output, "is a folder, not a file name")
    if not (path.parent if str(path.parent) else Path(".")).is_dir():
        raise InputError(output, "its folder does not exist")
    if input_path is not None and path.exists() and Path(input_path).exists():
        if os.path.samefile(path, input_path):
            raise InputError(output, "is the input file; tracevet never overwrites its input")
    return path


def read_input(args: argparse.Namespace) -> Recording:
    """Read INPUT with --fs, --kind and --units applied."""
    return read_recording(args.input, fs=args.fs, kind=args.kind, units=args.units)


def run(args: argparse.Namespace) -> int:
    """Run ``tracevet denoise``."""
    settings = settings_from_args(args)
    if args.show_settings:
        show_settings(settings)
        if args.input is None and args.output is None:
            return 0
    if args.input is None or args.output is None:
        raise InputError("tracevet denoise", "needs INPUT and OUTPUT (see 'tracevet denoise --help')")
    output = check_output_path(args.output, args.input)
    assess_limits = assess_cmd.check_denoise_assess_args(args)
    from tracevet.cleaning import clean_with_report  # the engine (and SciPy) only when a record is cleaned

    recording = read_input(args)
    cleaned, report = clean_with_report(recording, settings)
    write_recording(cleaned, output)
    applied = report.settings
    print(
        f"cleaned {inert(args.input)} -> {inert(args.output)}: {cleaned.n_channels} channel(s), "
        f"{cleaned.n_samples} samples at {cleaned.fs:g} Hz, settings {applied.digest()[:12]}"
    )
    for line in report.lines(inert(recording.units or "")):
        print(f"  {line}")
    if args.assess or args.assess_json:
        return assess_cmd.assess_after_denoise(args, recording, cleaned, assess_limits)
    return 0


def register(subparsers) -> argparse.ArgumentParser:
    """Add the ``denoise`` command to the ``tracevet`` parser."""
    parser = subparsers.add_parser(
        "denoise",
        help="clean a recording (wavelet shrinkage, baseline and mains removal) and write it",
        description=(
            "Clean INPUT with the wavelet-shrinkage engine and write the result to OUTPUT, in the format "
            f"of OUTPUT's extension ({', '.join(SUPPORTED_WRITE)}). Uses the default settings unless a "
            "profile or --set says otherwise; every channel is cleaned independently. The input is never "
            "changed; the output is written atomically."
        ),
        epilog=settings_reference(),
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    add_input_arguments(parser)
    parser.add_argument(
        "output",
        metavar="OUTPUT",
        nargs="?",
        help=f"where to write the cleaned recording ({', '.join(SUPPORTED_WRITE)})",
    )
    add_settings_arguments(parser)
    assess_cmd.add_denoise_assess_arguments(parser)
    parser.set_defaults(func=run)
    return parser
