"""``tracevet demo``: build the invented demo scenario as a queue (or as plain files)."""

from __future__ import annotations

import argparse
from pathlib import Path

from tracevet.text import inert


def register(subparsers) -> None:
    """Add the ``demo`` command."""
    parser = subparsers.add_parser(
        "demo",
        help="build the demo queue (invented dive-study recordings), cleaned and assessed",
        description=(
            "Build a queue holding the demo scenario: invented recordings of a fictional cold-water "
            "dive study (chest ECG with shivering noise, breathing drift and 60 Hz mains; one bench "
            "MCG in pT), some cleaned with sensible settings, three with settings that are too "
            "aggressive, one arriving already cleaned by another pipeline. The assessment decides "
            "what is flagged. With --files-only, only the recording files are written."
        ),
    )
    parser.add_argument("queue", metavar="QUEUE", help="folder for the new queue (must not exist or be empty)")
    parser.add_argument(
        "--files-only",
        action="store_true",
        help="write the scenario's recordings as .npz files into QUEUE (a plain folder) instead of a queue",
    )
    parser.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    """Build the demo queue or files and print what was made."""
    from tracevet import demo

    target = Path(args.queue)
    if args.files_only:
        for _spec, original, cleaned in demo.write_scenario_files(target):
            print(inert(original))
            if cleaned is not None:
                print(inert(cleaned))
        return 0
    from tracevet.cli.progress import ProgressBar
    from tracevet.workqueue import Queue

    bar = ProgressBar("cleaning and assessing the demo")
    total = len(demo.SCENARIO)
    ids = demo.build_demo_queue(target, lambda fraction: bar.update(round(fraction * total), total))
    queue = Queue.open(target)
    for record_id in ids:
        summary = queue.record(record_id)
        worst = summary.worst_severity or "no flags"
        print(f"{inert(record_id):40s} {summary.state:10s} {worst}")
    print(f"demo queue ready: tracevet review {inert(target)}")
    return 0
