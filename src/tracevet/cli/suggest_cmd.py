"""``tracevet suggest``: search candidate settings for a record and print the best as a profile.

Contract for scripts (keep stable): without ``--json`` the whole of stdout is
a YAML profile (comment lines and the settings) that ``tracevet denoise
--profile`` accepts; with ``--json`` exactly one JSON object. Exit 0 when a
candidate without fail flags was found, 1 when none was (or the record has no
beats: "cannot suggest: no beats"), 2 with one line on stderr for bad input
or usage, and then nothing is written.
"""

from __future__ import annotations

import argparse
import json
import sys
import textwrap

from tracevet.cli import assess_cmd
from tracevet.cli.denoise_cmd import add_input_arguments, check_output_path, read_input
from tracevet.errors import InputError
from tracevet.recording import SUPPORTED_WRITE, write_recording
from tracevet.text import inert

CAUTION = "tracevet is not a medical device and does not diagnose; a suggestion is checked by a person before use."


def _comment(text: str, width: int = 100) -> list[str]:
    return ["# " + line for line in textwrap.wrap(text, width=width - 2) or [""]]


def profile_text(suggestion, input_name: str) -> str:
    """The suggestion as a YAML profile with comment lines (what ``denoise --profile`` reads)."""
    best = suggestion.best
    lines = [f"# tracevet suggest: settings for {inert(input_name, 200)}"]
    lines += _comment(
        f"searched: {len(suggestion.ranked)} candidates on {suggestion.searched_on}; "
        f"candidate set {suggestion.candidate_set_digest[:12]}"
    )
    lines += _comment(f"predicted on the whole record: {best.flags_text()}; {best.measures_text()}")
    for flag in best.flags:
        lines += _comment(f"  {flag.severity} {flag.id}: {inert(flag.message, 300)}")
    lines += _comment(f"changed from the base settings: {best.change}")
    report = getattr(suggestion, "report", None)
    if report is not None:
        for line in report.lines():
            lines += _comment(f"on this record: {inert(line, 300)}")
    lines += _comment(f"why: {suggestion.reason}")
    for i, other in enumerate(suggestion.runners_up, start=2):
        lines += _comment(f"#{i}: {other.change} ({other.flags_text()}; {other.measures_text()}; on {other.scope})")
    if not suggestion.found:
        lines += _comment("no candidate without a fail flag was found: these settings are the least bad, not a fix")
    lines += _comment("use: tracevet denoise INPUT OUTPUT --profile THIS_FILE")
    text = "\n".join(lines) + "\n" + best.settings.to_yaml() + f"# digest: {best.settings.digest()}\n"
    return text


def run(args: argparse.Namespace) -> int:
    """Run ``tracevet suggest``."""
    from tracevet.cleaning import DEFAULT_SETTINGS, load_profile

    if args.input is None:
        raise InputError("tracevet suggest", "needs INPUT (see 'tracevet suggest --help')")
    output = check_output_path(args.write, args.input) if args.write else None
    base = load_profile(args.profile) if args.profile else DEFAULT_SETTINGS
    limits = assess_cmd.load_limits_file(args.limits) if args.limits else None
    recording = read_input(args)
    from tracevet.suggestion import NO_BEATS, NoBeats, suggest

    bar = None
    if sys.stderr.isatty() and not args.quiet:
        from tracevet.cli.progress import ProgressBar

        bar = ProgressBar("suggest")
    try:
        suggestion = suggest(
            recording,
            base=base,
            limits=limits,
            progress=(lambda fraction, _message: bar.update(fraction * 100, 100)) if bar else None,
        )
    except NoBeats:
        if args.json:
            print(json.dumps({"found": False, "reason": NO_BEATS}))
        print(f"tracevet suggest: {NO_BEATS} in {inert(args.input, 200)}", file=sys.stderr)
        return 1
    if args.json:
        print(json.dumps(suggestion.to_json_dict(), allow_nan=False))
    else:
        sys.stdout.write(profile_text(suggestion, args.input))
    if output is not None:
        if suggestion.found:
            write_recording(suggestion.cleaned, output)
            print(f"tracevet suggest: wrote the cleaned record to {inert(args.write, 200)}", file=sys.stderr)
        else:
            print(
                f"tracevet suggest: nothing written to {inert(args.write, 200)} (no candidate without a fail flag)",
                file=sys.stderr,
            )
    return 0 if suggestion.found else 1


def register(subparsers) -> argparse.ArgumentParser:
    """Add the ``suggest`` command to the ``tracevet`` parser."""
    parser = subparsers.add_parser(
        "suggest",
        help="search candidate cleaning settings for a record and print the best as a profile",
        description=(
            "Try a bounded set of cleaning settings on INPUT (each cleaned exactly as 'tracevet denoise' "
            "would and assessed), rank them (no fail flag, no warning, most noise removed, least shape "
            "change), check the best on the whole record and print it as a profile for 'denoise --profile', "
            "with its predicted flags and the two runners-up. See docs/suggest.md."
        ),
        epilog=(
            "example:\n"
            "  tracevet suggest diver.edf > diver.yaml && tracevet denoise diver.edf clean.edf --profile diver.yaml\n\n"
            "exit status: 0 settings without fail flags found; 1 none found, or no beats in the record;\n"
            "2 bad input or usage (one line on stderr, nothing written).\n" + CAUTION
        ),
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    add_input_arguments(parser)
    parser.add_argument(
        "--profile", metavar="FILE", help="settings the search starts from (YAML profile; default: the defaults)"
    )
    parser.add_argument("--limits", metavar="FILE", help="flag limits (YAML), as for 'tracevet assess'")
    parser.add_argument("--json", action="store_true", help="print one JSON object instead of the profile")
    parser.add_argument(
        "--write",
        metavar="OUTPUT",
        help=f"also write the record cleaned with the suggestion ({', '.join(SUPPORTED_WRITE)})",
    )
    parser.add_argument("--quiet", action="store_true", help="no progress bar")
    parser.set_defaults(func=run)
    return parser


def suggest_pass(queue, args: argparse.Namespace, cluster=None) -> int:
    """``tracevet clean QUEUE --suggest``: a suggested run for every flagged record; 1 if any record failed."""
    from tracevet.cli.queue_cmd import BatchProgressBar, severity_words
    from tracevet.workqueue.suggested import suggest_flagged

    shown = BatchProgressBar("suggesting", quiet=args.quiet)
    outcomes = suggest_flagged(queue, workers=max(1, int(args.workers)), progress=shown, cluster=cluster)
    if not outcomes:
        print("no flagged record waiting for review: nothing to suggest")
        return 0
    made = [o for o in outcomes if o.run_id]
    print(f"suggested runs added for {len(made)} of {len(outcomes)} flagged record(s): {severity_words(made)}")
    for outcome in outcomes:
        if outcome.run_id:
            print(f"  {inert(outcome.record_id)}: {outcome.run_id} (suggested, {outcome.n_flags} flag(s))")
        elif outcome.skipped:
            print(f"  {inert(outcome.record_id)}: no run added: {inert(outcome.skipped, 200)}")
    if shown.failures:
        shown.print_failures(f"tracevet: no suggestion for {len(shown.failures)} record(s) (listed above)")
        return 1
    return 0
