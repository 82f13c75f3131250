"""``tracevet assess``: compare a cleaned recording with its original and flag shape distortion.

Contract for scripts (keep stable): with ``--json`` exactly one JSON object on
stdout, ``{"metrics": {...}, "flags": [{"id", "severity", "message", "value",
"limit", "source", "where", "where_more", "beats_affected", "beats_measured"}, ...]}``;
exit 0 when no flag is ``fail``, 1 when at least one is, 2 with one line on
stderr for bad input or usage.
"""

from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path

import yaml

from tracevet.assessment.limits import FLAG_IDS, limits_from_mapping
from tracevet.assessment.metric_words import METRIC_ROWS, channel_metrics, format_metric
from tracevet.caution import CAUTION
from tracevet.cli.options import add_read_options
from tracevet.errors import InputError
from tracevet.recording import SUPPORTED_READ, Recording, read_recording
from tracevet.recording.atomic import write_text_atomic
from tracevet.safe_yaml import load_yaml
from tracevet.text import inert


# Metrics shown in the readable report: labels and units have one owner (assessment.metric_words).
REPORT_ROWS = METRIC_ROWS


def load_limits_file(path: str):
    """Read flag limits from YAML: a ``flag_limits:`` section or the mapping itself.

    Raises InputError with one line naming the file for anything unusable.
    """
    file = Path(path)
    if not file.is_file():
        raise InputError(path, "no such file")
    try:
        data = load_yaml(file.read_text(encoding="utf-8"))  # safe; a flag given twice is refused
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError(path, f"cannot read ({type(exc).__name__})") from None
    except yaml.YAMLError as exc:
        mark = getattr(exc, "problem_mark", None)
        where = f" at line {mark.line + 1}" if mark is not None else ""
        problem = " ".join(str(getattr(exc, "problem", None) or "").split())[:100]
        raise InputError(path, f"not valid YAML{where}" + (f": {problem}" if problem else "")) from None
    if data is None:
        return {}
    if isinstance(data, dict) and "flag_limits" in data:
        data = data["flag_limits"]
    return limits_from_mapping(data if data is not None else {}, path)


def _format(value, unit: str, units: str | None) -> str:
    return format_metric(value, unit, inert(units) if units else None)


def report_text(result, original: Recording, args: argparse.Namespace) -> str:
    """The readable report: record, metrics per channel, flags, outcome."""
    ctx = result.context
    units = ctx.get("units")
    lines = [
        f"tracevet assess: {inert(args.original)} (original) vs {inert(args.cleaned)} (cleaned)",
        f"record: {ctx.get('kind')}, units {inert(units) if units else 'unknown'}, {original.n_channels} channel(s), "
        f"{original.fs:g} Hz, {original.duration_s:.1f} s; amplitude limits "
        + ("absolute, in mV" if ctx.get("limit_mode") == "absolute" else "relative, fraction of the R amplitude"),
    ]
    multi = original.n_channels > 1
    for name in original.channels:
        lines.append("")
        lines.append(f"channel {inert(name)}")
        values = channel_metrics(result.metrics, name, multi)
        for key, label, unit in REPORT_ROWS:
            lines.append(f"  {label:<32s} {_format(values.get(key), unit, units)}")
    lines.append("")
    if result.flags:
        lines.append(f"flags ({len(result.flags)}):")
        for flag in result.flags:
            lines.append(f"  {flag.severity.upper():4s} {flag.id}: {inert(flag.message)}")
            lines.append(f"       where: {flag.where_text()}")
            lines.append(f"       source: {inert(flag.source)}")
    else:
        lines.append("flags: none")
    fails = sum(f.severity == "fail" for f in result.flags)
    warns = sum(f.severity == "warn" for f in result.flags)
    outcome = "FAIL" if fails else ("WARN" if warns else "PASS")
    lines.append(f"result: {outcome} ({fails} fail, {warns} warn)")
    lines.append(CAUTION)
    return "\n".join(lines)


def json_text(result) -> str:
    """The JSON contract as one line of text (no NaN)."""
    return json.dumps(result.to_json_dict(), allow_nan=False, ensure_ascii=True)


def exit_code(result) -> int:
    """1 when at least one flag fails, else 0."""
    return 1 if result.worst_severity == "fail" else 0


def run(args: argparse.Namespace) -> int:
    """Run ``tracevet assess``."""
    from tracevet.assessment import assess  # heavy (SciPy): imported when the command runs

    limits = load_limits_file(args.limits) if args.limits else None
    if args.save:  # checked before the work, so a typo costs nothing
        folder = Path(args.save)
        if folder.exists() and not folder.is_dir():
            raise InputError(args.save, "is a file, not a folder")
        if not folder.is_dir():
            raise InputError(args.save, "folder does not exist")
    original = read_recording(args.original, fs=args.fs, kind=args.kind, units=args.units)
    cleaned = read_recording(args.cleaned, fs=args.fs, kind=args.kind, units=args.units)
    result = assess(original, cleaned, limits=limits)
    if args.save:
        result.save(folder)
    if args.json:
        sys.stdout.write(json_text(result) + "\n")
    else:
        sys.stdout.write(report_text(result, original, args) + "\n")
    return exit_code(result)


def add_denoise_assess_arguments(parser: argparse.ArgumentParser) -> None:
    """``tracevet denoise`` options that assess the cleaned result in the same pass."""
    group = parser.add_argument_group("assessment of the result")
    group.add_argument(
        "--assess",
        action="store_true",
        help="assess the cleaned result against INPUT and print the report; exit 1 when a flag fails",
    )
    group.add_argument(
        "--assess-json",
        metavar="FILE",
        help="write the assessment's JSON object (metrics and flags) to FILE (.json); implies --assess",
    )
    group.add_argument(
        "--limits", metavar="FILE", help="YAML file with flag limits for the assessment (a flag_limits: mapping)"
    )


def check_denoise_assess_args(args: argparse.Namespace):
    """Validate the assessment options of ``tracevet denoise`` before any work; return the limits."""
    if args.limits and not (args.assess or args.assess_json):
        raise InputError("--limits", "applies only with --assess or --assess-json")
    if args.assess_json:
        path = Path(args.assess_json)
        if path.suffix.lower() != ".json":
            raise InputError(args.assess_json, "the assessment file must end in .json")
        if path.is_dir() or not (path.parent if str(path.parent) else Path(".")).is_dir():
            raise InputError(args.assess_json, "is a folder or its folder does not exist")
    return load_limits_file(args.limits) if args.limits else None


def assess_after_denoise(args: argparse.Namespace, original: Recording, cleaned: Recording, limits) -> int:
    """Assess a fresh cleaning (``tracevet denoise --assess``); print the report, write JSON if asked."""
    from tracevet.assessment import assess

    result = assess(original, cleaned, limits=limits)
    if args.assess_json:
        write_text_atomic(args.assess_json, json_text(result) + "\n")
    report_args = argparse.Namespace(original=args.input, cleaned=args.output)
    sys.stdout.write(report_text(result, original, report_args) + "\n")
    return exit_code(result)


def register(subparsers) -> argparse.ArgumentParser:
    """Add the ``assess`` command to the ``tracevet`` parser."""
    parser = subparsers.add_parser(
        "assess",
        help="compare a cleaned recording with its original beat by beat and flag shape distortion",
        description=(
            "Find the beats on ORIGINAL, build median beat templates of the original and the cleaned "
            "trace, measure how the cleaning changed the shape (R amplitude, QRS width, beat timing, ST "
            "level, P and T waves, ringing, beat shape in the removed part, clipping, edges) and flag "
            "changes beyond the limits. Amplitude limits are absolute (mV) for ECG in known units and "
            "relative (fraction of the R amplitude) otherwise."
        ),
        epilog=(
            f"flags: {', '.join(FLAG_IDS)}\n"
            "limits file: YAML with a flag_limits: mapping, e.g.\n"
            "  flag_limits:\n    r-peak-change: {warn: 0.10, fail: 0.15}\n    edge-artefact: off\n\n"
            "exit status: 0 no fail flag; 1 at least one fail flag; 2 bad input or usage (one line on stderr).\n"
            + CAUTION
        ),
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    parser.add_argument(
        "original", metavar="ORIGINAL", help=f"the recording before cleaning ({', '.join(SUPPORTED_READ)})"
    )
    parser.add_argument("cleaned", metavar="CLEANED", help="the cleaned recording (same length, rate and channels)")
    add_read_options(parser, "the files")
    parser.add_argument("--limits", metavar="FILE", help="YAML file with flag limits (a flag_limits: mapping)")
    parser.add_argument("--json", action="store_true", help="print exactly one JSON object: metrics and flags")
    parser.add_argument("--save", metavar="FOLDER", help="also write assessment.json and beats.npz into FOLDER")
    parser.set_defaults(func=run)
    return parser
