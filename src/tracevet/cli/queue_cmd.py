"""Queue commands: init, add, clean, status, decide, claim, release, log, export.

Thin wrappers over :mod:`tracevet.workqueue`. Exit codes: 0 success; 1 for
``log --verify`` problems and records that could not be cleaned; 2 bad
input, or a record held by another reviewer (one line on stderr).
"""

from __future__ import annotations

import json
import sys
from collections import Counter

from tracevet.cli.defaults import QUEUE_HELP, queue_path
from tracevet.cli.options import add_reviewer_option, add_set_option
from tracevet.recording.model import units_option
from tracevet.text import inert


def register(subparsers) -> None:
    """Add the queue commands to the ``tracevet`` parser."""
    p = subparsers.add_parser(
        "init", help="make a new work queue folder", description="Make a new, empty work queue folder."
    )
    p.add_argument("queue", metavar="QUEUE", help="folder to create (or an empty one)")
    p.add_argument("--profile", metavar="FILE", help="cleaning profile (YAML) the queue cleans with")
    add_set_option(p, "cleaning setting for the queue (repeatable)")
    p.add_argument("--kind", default="ecg", help="kind for files that do not say: ecg, mcg, other (default ecg)")
    p.add_argument("--units", default="mV", type=units_option, help="units for files that do not say (default mV)")
    p.add_argument(
        "--claim-idle-minutes",
        type=float,
        default=30.0,
        metavar="MIN",
        help="idle time after which a claim may be taken over (default 30)",
    )
    p.set_defaults(func=cmd_init)

    p = subparsers.add_parser(
        "add",
        help="add recordings to a queue",
        description=(
            "Add raw recordings (cleaned later by 'tracevet clean'), "
            "or with --pair one recording already cleaned elsewhere."
        ),
    )
    p.add_argument("queue", metavar="QUEUE")
    p.add_argument("files", nargs="*", metavar="FILE", help="recordings (.csv, .npy, .npz, .edf)")
    p.add_argument("--pair", nargs=2, metavar=("ORIGINAL", "CLEANED"), help="add one record cleaned outside tracevet")
    p.add_argument("--fs", type=float, help="sampling rate in Hz (needed for .npy)")
    p.add_argument("--kind", help="ecg, mcg or other (default: from the file, else the queue's)")
    p.add_argument("--units", type=units_option, help="units (default: from the file, else the queue's)")
    add_reviewer_option(p, "who adds them")
    p.add_argument("--allow-duplicates", action="store_true", help="add files whose bytes are already in the queue")
    p.set_defaults(func=cmd_add)

    p = subparsers.add_parser(
        "clean",
        help="clean and assess every record waiting",
        description="Clean and assess every record waiting to be cleaned or sent back for a re-run; resumable.",
    )
    p.add_argument("queue", metavar="QUEUE")
    p.add_argument("--workers", type=int, default=2, help="worker processes on this machine (default 2)")
    add_set_option(p, "change a cleaning setting for this batch")
    p.add_argument(
        "--cluster",
        metavar="ADDRESS",
        help="send the work to this Dask scheduler (tcp://HOST:PORT or tls://HOST:PORT; default $TRACEVET_CLUSTER, "
        "else the queue's 'cluster:' setting; needs tracevet[cluster]; see docs/cluster.md)",
    )
    p.add_argument(
        "--local",
        action="store_true",
        help="use this machine's processes even if $TRACEVET_CLUSTER or the queue names a cluster",
    )
    p.add_argument(
        "--shared-filesystem",
        action="store_true",
        help="with a cluster: workers read the originals at this queue's path (checked by SHA-256) "
        "instead of receiving their bytes",
    )
    p.add_argument("--quiet", action="store_true", help="no progress bar")
    p.add_argument(
        "--suggest",
        action="store_true",
        help="then, for each record whose newest run has flags, add a run made with suggested settings "
        "(docs/suggest.md)",
    )
    p.set_defaults(func=cmd_clean)

    p = subparsers.add_parser(
        "status",
        help="counts per state, flags and who holds what",
        description="Show the queue's records by state, flags and claims.",
    )
    p.add_argument("queue", metavar="QUEUE", nargs="?", help=QUEUE_HELP)
    p.add_argument("--list", action="store_true", help="one line per record")
    p.add_argument("--json", action="store_true", help="machine-readable output")
    p.set_defaults(func=cmd_status)

    p = subparsers.add_parser(
        "decide",
        help="accept, reject or send back a record",
        description=(
            "Record a decision on a record's run (default: the newest). "
            "A rejection needs a note; so does accepting a run with a fail flag."
        ),
    )
    p.add_argument("queue", metavar="QUEUE")
    p.add_argument("record", metavar="RECORD")
    p.add_argument("decision", choices=("accept", "reject", "rerun"))
    p.add_argument("--note", default="", help="why (stored as typed)")
    add_reviewer_option(p, "who decides")
    p.add_argument("--run", help="the run signed off (default: the newest)")
    add_set_option(p, "with rerun: settings for the re-run (over the queue's)")
    p.add_argument("--profile", metavar="FILE", help="with rerun: a profile for the re-run")
    p.add_argument(
        "--override",
        action="store_true",
        help="decide over another reviewer's decision that still stands (the log entry names the one overridden)",
    )
    p.add_argument("--json", action="store_true", help="print the log entry as JSON")
    p.set_defaults(func=cmd_decide)

    for name, text in (
        ("claim", "mark a record as being reviewed by you"),
        ("release", "give up your claim on a record"),
    ):
        p = subparsers.add_parser(name, help=text, description=text[0].upper() + text[1:] + ".")
        p.add_argument("queue", metavar="QUEUE")
        p.add_argument("record", metavar="RECORD")
        add_reviewer_option(p, "who")
        p.set_defaults(func=cmd_claim if name == "claim" else cmd_release)

    p = subparsers.add_parser(
        "log",
        help="show or verify the decision log",
        description=(
            "Show the decision log, check it (--verify: hash chain, every referenced file, the index) "
            "or remove a torn last line (--repair)."
        ),
    )
    p.add_argument("queue", metavar="QUEUE", nargs="?", help=QUEUE_HELP)
    p.add_argument("--record", help="only entries about this record")
    p.add_argument("--json", action="store_true", help="entries (or problems) as JSON")
    group = p.add_mutually_exclusive_group()
    group.add_argument("--verify", action="store_true", help="check everything; exit 1 if anything is wrong")
    group.add_argument("--repair", action="store_true", help="remove a torn last line, keeping every complete entry")
    add_reviewer_option(p, "with --repair: who repairs")
    p.set_defaults(func=cmd_log)

    p = subparsers.add_parser(
        "export",
        help="export accepted records with a manifest and sign-off report",
        description=(
            "Copy the accepted records' signed-off cleaned data to DEST "
            "with manifest.csv, manifest.json and sign-off.txt."
        ),
    )
    p.add_argument("queue", metavar="QUEUE")
    p.add_argument("dest", metavar="DEST", help="new folder to create")
    add_reviewer_option(p, "who exports")
    p.set_defaults(func=cmd_export)


def _reviewer(args) -> str:
    from tracevet.workqueue import resolve_reviewer

    return resolve_reviewer(getattr(args, "reviewer", None))


def _open(args):
    from tracevet.workqueue import Queue

    return Queue.open(queue_path(args.queue))


# ---------------------------------------------------------------- init / add
def cmd_init(args) -> int:
    """``tracevet init QUEUE``."""
    from tracevet.workqueue import Queue, new_settings

    cleaning: dict = {}
    if args.profile or args.overrides:
        from tracevet.cli.denoise_cmd import settings_from_args

        cleaning = settings_from_args(args).to_dict()
    settings = new_settings(
        cleaning=cleaning, kind=args.kind, units=args.units, claim_idle_minutes=args.claim_idle_minutes
    )
    queue = Queue.init(args.queue, settings)
    print(f"queue ready: {inert(queue.root)} (settings in {inert(queue.paths.settings.name)})")
    return 0


def cmd_add(args) -> int:
    """``tracevet add QUEUE FILE...`` or ``--pair ORIGINAL CLEANED``."""
    from tracevet.cli.main import UsageError

    if args.pair and args.files:
        raise UsageError("tracevet add: give either FILE... or --pair ORIGINAL CLEANED, not both")
    if not args.pair and not args.files:
        raise UsageError("tracevet add: nothing to add (give FILE... or --pair ORIGINAL CLEANED)")
    queue = _open(args)
    reviewer = _reviewer(args)
    if args.pair:
        record_id = queue.add_pair(
            args.pair[0],
            args.pair[1],
            fs=args.fs,
            kind=args.kind,
            units=args.units,
            added_by=reviewer,
            allow_duplicates=args.allow_duplicates,
        )
        item = queue.record(record_id)
        print(f"added {record_id} (cleaned elsewhere; {item.current_run_id} assessed: {_flag_text(item)})")
        return 0
    ids = queue.add_files(
        args.files,
        fs=args.fs,
        kind=args.kind,
        units=args.units,
        added_by=reviewer,
        allow_duplicates=args.allow_duplicates,
    )
    for path, record_id in zip(args.files, ids):
        print(f"added {record_id}  <- {inert(path, 200)}")
    print(f"{len(ids)} record(s) waiting to be cleaned; run 'tracevet clean {inert(args.queue, 200)}'")
    return 0


def _flag_text(item) -> str:
    if item.current_run_id is None:
        return "not cleaned"
    if not item.n_flags:
        return "no flags"
    return f"{item.n_flags} flag(s), worst {item.worst_severity}"


# --------------------------------------------------------------------- clean
def cmd_clean(args) -> int:
    """``tracevet clean QUEUE``: clean every waiting record with a progress bar."""
    from dataclasses import replace

    from tracevet.workqueue.batch import clean_waiting
    from tracevet.workqueue.cluster import choose_cluster

    if args.local and args.cluster:
        from tracevet.cli.main import UsageError

        raise UsageError("tracevet clean: give either --cluster ADDRESS or --local, not both")
    queue = _open(args)
    cluster = choose_cluster(args.cluster, queue.settings.cluster, queue.settings.source, local=args.local)
    if cluster is not None and args.shared_filesystem:
        cluster = replace(cluster, shared_filesystem=True)
    shown = BatchProgressBar("cleaning", quiet=args.quiet, rate=True)
    outcomes = clean_waiting(queue, workers=args.workers, overrides=args.overrides, progress=shown, cluster=cluster)
    code = 0
    if not outcomes:
        print("nothing waiting to be cleaned")
    else:
        made = [o for o in outcomes if o.run_id]
        where = f" on {inert(cluster.address, 80)}" if cluster is not None else ""
        print(f"cleaned {len(made)} record(s){where}: {severity_words(made)}")
        if shown.retries:
            print(f"{shown.retries} task(s) retried (a worker died or a task failed and was run again)")
        if shown.failures:
            count = len(shown.failures)
            shown.print_failures(f"tracevet: {count} record(s) could not be cleaned (listed above); they stay waiting")
            code = 1
    if getattr(args, "suggest", False):
        from tracevet.cli.suggest_cmd import suggest_pass

        code = max(code, suggest_pass(queue, args, cluster))
    return code


class BatchProgressBar:
    """``progress(done, total, outcome)`` of a batch shown on a progress bar (none when ``quiet``).

    Counts finished records and retries, keeps the outcomes with an error
    and shows each as it comes; ``rate`` adds records per minute and retries
    to the bar.
    """

    def __init__(self, label: str, quiet: bool = False, rate: bool = False):
        from tracevet.cli.progress import ProgressBar

        self.bar = None if quiet else ProgressBar(label)
        self.rate = rate
        self.failures: list = []
        self.finished = 0
        self.retries = 0

    def __call__(self, done: float, total: int, outcome) -> None:
        """Take one progress report of the batch."""
        if outcome is not None:
            self.finished += 1
            self.retries += getattr(outcome, "retries", 0)
            if outcome.error:
                self.failures.append(outcome)
                if self.bar:
                    self.bar.message(f"tracevet: {outcome.record_id}: {outcome.error}")
        if self.bar and total:
            note = self.bar.rate_text(self.finished, self.retries) if self.rate else ""
            self.bar.update(done, total, note=note)

    def print_failures(self, summary: str) -> None:
        """Each failed record's line on stderr (unless the bar already showed it), then ``summary``."""
        if self.bar is None:
            for outcome in self.failures:
                print(f"tracevet: {outcome.record_id}: {outcome.error}", file=sys.stderr)
        print(summary, file=sys.stderr)


def severity_words(made) -> str:
    """``N with fail flags, N with warnings, N without flags`` over batch outcomes that made a run."""
    counts = Counter(o.worst_severity or "none" for o in made)
    return (
        f"{counts.get('fail', 0)} with fail flags, {counts.get('warn', 0)} with warnings, "
        f"{counts.get('none', 0)} without flags"
    )


# -------------------------------------------------------------------- status
def _holder_text(item) -> str:
    if item.holder is None:
        return ""
    text = item.holder.describe()
    return text + (" (may be taken over)" if item.holder_stale else "")


def cmd_status(args) -> int:
    """``tracevet status QUEUE``: counts per state, flags, claims."""
    from tracevet.workqueue import STATES

    queue = _open(args)
    records = queue.records()
    states = Counter(r.state for r in records)
    cleaned = [r for r in records if r.current_run_id]
    flags = Counter(r.worst_severity or "none" for r in cleaned)
    held = [r for r in records if r.holder is not None]
    if args.json:
        document = {
            "queue": str(queue.root),
            "queue_id": queue.settings.queue_id,
            "total": len(records),
            "states": {s: states.get(s, 0) for s in STATES},
            "flags": {"fail": flags.get("fail", 0), "warn": flags.get("warn", 0), "none": flags.get("none", 0)},
            "claims": [dict(r.holder.to_dict(), stale=r.holder_stale) for r in held],
            "records": [
                {
                    "id": r.id,
                    "state": r.state,
                    "source_name": r.source_name,
                    "worst_severity": r.worst_severity,
                    "n_flags": r.n_flags,
                    "current_run": r.current_run_id,
                    "holder": r.holder.reviewer if r.holder else None,
                    "last_decision": r.last_decision,
                }
                for r in records
            ],
        }
        json.dump(document, sys.stdout)
        sys.stdout.write("\n")
        return 0
    print(f"queue {inert(queue.root)}: {len(records)} record(s)")
    for state in STATES:
        print(f"  {state:<10} {states.get(state, 0):>6}  {state.meaning}")
    print(
        f"flags on the newest runs: {flags.get('fail', 0)} fail, {flags.get('warn', 0)} warn, {flags.get('none', 0)} "
        "none"
    )
    if held:
        print("held:")
        for r in held:
            print(f"  {r.id}  {_holder_text(r)}")
    if args.list:
        print("records:")
        for r in records:
            who = f"  held by {inert(r.holder.reviewer, 40)}" if r.holder else ""
            flag = r.worst_severity or ("-" if r.current_run_id is None else "ok")
            print(f"  {r.id:<24} {r.state:<10} {flag:<5} {r.n_runs} run(s)  {inert(r.source_name, 60)}{who}")
    return 0


# ---------------------------------------------------------- decide / claims
def cmd_decide(args) -> int:
    """``tracevet decide QUEUE RECORD accept|reject|rerun [--override]``."""
    from tracevet.errors import InputError
    from tracevet.workqueue.states import DECISION_PAST

    queue = _open(args)
    requested = None
    if args.decision == "rerun" and (args.overrides or args.profile):
        from tracevet.cleaning import apply_overrides, load_profile

        base = load_profile(args.profile) if args.profile else queue.settings.cleaning_settings()
        requested = apply_overrides(base, args.overrides)
    elif args.overrides or args.profile:
        raise InputError("--set/--profile", "settings go with a 'rerun' decision only")
    entry = queue.decide(
        args.record, args.decision, args.note, _reviewer(args), run_id=args.run, requested_settings=requested,
        override=args.override,
    )
    if args.json:
        print(json.dumps(entry.data))
        return 0
    word = DECISION_PAST[entry.decision]
    line = (
        f"{entry.record} {entry.run}: {word} by {inert(entry.reviewer, 60)} "
        f"(log entry {entry.seq}, hash {entry.hash[:16]})"
    )
    overridden = entry.get("overrides")
    if isinstance(overridden, dict):
        past = DECISION_PAST.get(str(overridden.get("decision")), inert(overridden.get("decision"), 20))
        line += f"; overrides entry {overridden.get('seq')} ({past} by {inert(overridden.get('reviewer'), 60)})"
    print(line)
    return 0


def cmd_claim(args) -> int:
    """``tracevet claim QUEUE RECORD``: hold a record from the command line (lapses by idle time)."""
    queue = _open(args)
    claim = queue.claim(args.record, _reviewer(args), bind_process=False)
    print(
        f"{claim.record} is now held by {inert(claim.reviewer, 60)} (lapses after "
        f"{queue.settings.claim_idle_minutes:g} min without activity)"
    )
    return 0


def cmd_release(args) -> int:
    """``tracevet release QUEUE RECORD``."""
    queue = _open(args)
    released = queue.release(args.record, _reviewer(args))
    print(f"{args.record}: claim released" if released else f"{args.record}: was not claimed")
    return 0


# ----------------------------------------------------------------------- log
def _entry_line(entry) -> str:
    time = entry.time[:19].replace("T", " ")
    who = inert(entry.reviewer, 40)
    if entry.event == "decision":
        what = f"{entry.decision:<7} {entry.record} {entry.run}"
    elif entry.event == "add":
        what = f"{'added':<7} {entry.record} from {inert(entry.get('source_name'), 60)}"
    elif entry.event == "takeover":
        what = f"{'takeover':<7} {entry.record}: {inert(entry.get('reason'), 80)}"
    else:
        what = f"{entry.event:<7} {inert(entry.note, 100)}"
    overridden = entry.get("overrides") if entry.event == "decision" else None
    if isinstance(overridden, dict):
        what += (
            f" (overrides entry {overridden.get('seq')}, {inert(overridden.get('decision'), 10)}"
            f" by {inert(overridden.get('reviewer'), 40)})"
        )
    note = f'  "{inert(entry.note, 300)}"' if entry.event == "decision" and entry.note else ""
    digest = entry.get("settings_digest")
    extra = (
        f"  settings {digest[:12]}"
        if entry.event == "decision" and digest
        else ("  external run" if entry.event == "decision" else "")
    )
    return f"{entry.seq:>5}  {time}Z  {who:<12} {what}{extra}{note}"


def cmd_log(args) -> int:
    """``tracevet log QUEUE [--record ID] [--json] [--verify | --repair]``."""
    queue = _open(args)
    if args.verify:
        return _verify_log(queue, args.json)
    if args.repair:
        return _repair_log(queue, _reviewer(args))
    record = None
    if args.record is not None:
        from tracevet.workqueue.ids import check_record_id

        record = check_record_id(args.record, "--record")
    entries = queue.log_entries(record)
    if args.json:
        json.dump([e.data for e in entries], sys.stdout)
        sys.stdout.write("\n")
        return 0
    if not entries:
        print("no entries" + (f" for {record}" if record else ""))
    for entry in entries:
        print(_entry_line(entry))
        if record is not None and entry.event == "decision":
            print(f"         original sha256 {entry.get('original_sha256')}")
            print(f"         cleaned  sha256 {entry.get('cleaned_sha256')}")
            print(f"         settings digest {entry.get('settings_digest') or 'none (cleaned outside tracevet)'}")
            print(f"         entry hash {entry.hash}")
    from tracevet.workqueue import log as log_mod

    torn = log_mod.read_log(queue.paths.log).torn
    if torn is not None:
        print(
            f"tracevet: the log ends with a torn line (line {torn.line}, {torn.size} bytes) from an interrupted "
            f"write; 'tracevet log {inert(queue.root, 100)} --repair' removes it",
            file=sys.stderr,
        )
    return 0


def _verify_log(queue, as_json: bool) -> int:
    """``tracevet log --verify``: every problem, then the verdict; 1 when anything is wrong."""
    from tracevet.workqueue.verify import head_summary

    problems = queue.verify()
    errors = [p for p in problems if not p.repaired]
    head = head_summary(queue)
    if as_json:
        print(json.dumps({"ok": not errors, "problems": [p.to_dict() for p in problems], "head": head}))
        return 1 if errors else 0
    for problem in problems:
        print(inert(str(problem)))
    if errors:
        print(f"tracevet: {len(errors)} problem(s) found", file=sys.stderr)
        return 1
    print(
        f"log verified: {head['entries']} entries, chain intact, every referenced file matches its "
        f"checksum; newest entry hash {head['hash']}"
    )
    return 0


def _repair_log(queue, reviewer: str) -> int:
    """``tracevet log --repair``: remove a torn last line (logged), or say there is none."""
    entry = queue.repair_log(reviewer)
    if entry is None:
        print("nothing to repair: the log ends with a complete entry")
    else:
        print(
            f"removed a torn last line ({entry.get('removed_bytes')} bytes, saved as {entry.get('saved_as')}); "
            f"logged as entry {entry.seq}"
        )
    return 0


# -------------------------------------------------------------------- export
def cmd_export(args) -> int:
    """``tracevet export QUEUE DEST``."""
    from tracevet.workqueue.export import export_accepted

    queue = _open(args)
    result = export_accepted(queue, args.dest, exported_by=_reviewer(args))
    print(
        f"exported {result.count} accepted record(s) to {inert(result.dest)} (manifest.csv, manifest.json, "
        "sign-off.txt)"
    )
    return 0
