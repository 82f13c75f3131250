"""``tracevet export``: the accepted records, with a manifest and a sign-off report.

The destination folder receives, for every record whose latest decision is
``accept`` (and that has no newer run since):

* ``RECORD.npz`` (or the extension of a file cleaned elsewhere): the
  cleaned data of the run that was signed off, byte for byte;
* ``manifest.json`` and ``manifest.csv``: one row per record with the
  file's SHA-256, the original's SHA-256, run, origin, settings digest
  (and, in JSON, the full settings), reviewer, time, note, flags and the
  log entry (sequence number and hash) that holds the sign-off; plus the
  queue id and the log head, so the export can be checked against the log;
* ``sign-off.txt``: the same facts as a readable report.

Before copying, each cleaned file's checksum is compared with the one in
its run and in the decision entry; any mismatch stops the export. The
folder is assembled beside the destination and renamed into place whole.
In ``manifest.csv`` notes, names and reviewers are shown inert (control
characters made visible) and a cell starting with ``=``, ``+``, ``-`` or
``@`` gets a leading apostrophe so spreadsheets do not run it as a formula;
``manifest.json`` holds the text exactly as given.
"""

from __future__ import annotations

import csv
import io
import json
import os
import uuid
from dataclasses import dataclass
from pathlib import Path

from tracevet import __version__
from tracevet.caution import CAUTION
from tracevet.errors import InputError
from tracevet.recording.atomic import fsync_dir, write_text_atomic
from tracevet.text import inert
from tracevet.workqueue.checksums import sha256_file
from tracevet.workqueue.index import ACCEPTED
from tracevet.workqueue.layout import FILE_MODE
from tracevet.workqueue.records import _remove_tree, copy_verified
from tracevet.workqueue.runs import cleaned_path, run_info
from tracevet.workqueue.settings import utc_now_text

CSV_COLUMNS = (
    "record", "source_name", "file", "sha256", "run", "origin", "settings_digest", "original_sha256",
    "reviewer", "decided_utc", "note", "worst_severity", "flags", "log_seq", "log_entry_hash",
)


@dataclass(frozen=True)
class ExportResult:
    """Where the export went and how many records it holds."""

    dest: Path
    count: int
    log_head: dict


def _formula_safe(value: object) -> str:
    text = "" if value is None else str(value)
    return "'" + text if text[:1] in ("=", "+", "-", "@", "\t", "\r") else text


def _refuse_broken_chain(queue) -> None:
    """Raise InputError if the decision log's hash chain is broken.

    A sign-off whose entry was edited, removed or reordered must not leave
    the queue looking valid. A torn last line (an interrupted append) is no
    break: every complete entry still verifies. The head anchor is read
    before the log, so an append racing with the export cannot look like a
    cut-off log.
    """
    from tracevet.workqueue import log as log_mod

    head = log_mod.read_head(queue.paths)
    contents = log_mod.read_log(queue.paths.log)
    torn_line = contents.torn.line if contents.torn is not None else None
    faults = [p for p in log_mod.chain_problems(contents, head) if torn_line is None or p[0] != torn_line]
    if faults:
        line, _record, message = faults[0]
        where = f"{queue.paths.log.name} line {line}" if line is not None else queue.paths.log.name
        more = f" (and {len(faults) - 1} more problem(s))" if len(faults) > 1 else ""
        raise InputError(where, f"{message}{more}; nothing exported (run 'tracevet log QUEUE --verify')")


def export_accepted(queue, dest: str | os.PathLike, exported_by: str | None = None) -> ExportResult:
    """Export the accepted records of ``queue`` into the new folder ``dest``."""
    dest = Path(dest)
    if dest.exists() and (not dest.is_dir() or any(dest.iterdir())):
        raise InputError(str(dest), "already exists and is not an empty folder; choose a new destination")
    if not dest.parent.is_dir():
        raise InputError(str(dest), "its parent folder does not exist")
    try:
        dest.resolve().relative_to(queue.root)
        raise InputError(str(dest), "is inside the queue folder; export somewhere else")
    except ValueError:
        pass
    _refuse_broken_chain(queue)
    entries = {e.seq: e for e in queue.log_entries()}
    from tracevet.workqueue.verify import head_summary

    head = head_summary(queue)
    accepted = [r for r in queue.records() if r.state == ACCEPTED]
    staging = dest.parent / f".{dest.name[:60]}.partial-{os.getpid()}-{uuid.uuid4().hex[:6]}"
    staging.mkdir()
    rows = []
    try:
        for item in accepted:
            entry = entries.get((item.last_decision or {}).get("seq"))
            if entry is None or entry.decision != "accept" or entry.record != item.id:
                raise InputError(
                    item.id, "its sign-off entry is missing from the log; run 'tracevet log QUEUE --verify'"
                )
            info = run_info(queue.paths, item.id, entry.run)
            source = cleaned_path(queue.paths, item.id, info)
            actual = sha256_file(source)
            if actual != entry.get("cleaned_sha256") or actual != info.cleaned_sha256:
                raise InputError(
                    queue.paths.relative(source),
                    "no longer matches the data signed off; nothing exported (run 'tracevet log QUEUE --verify')",
                )
            name = f"{item.id}{source.suffix}"
            copied = copy_verified(source, staging / name)
            os.chmod(staging / name, 0o444)
            flags = entry.get("flags") or []
            rows.append({
                "record": item.id,
                "source_name": item.source_name,
                "file": name,
                "sha256": copied,
                "run": entry.run,
                "origin": info.origin,
                "settings_digest": entry.get("settings_digest"),
                "settings": entry.get("settings"),
                "original_sha256": entry.get("original_sha256"),
                "reviewer": entry.reviewer,
                "decided_utc": entry.time,
                "note": entry.note,
                "worst_severity": entry.get("worst_severity"),
                "flags": [
                    {"id": f.get("id"), "severity": f.get("severity"), "message": f.get("message")} for f in flags
                ],
                "log_seq": entry.seq,
                "log_entry_hash": entry.hash,
            })
        manifest = {
            "format": "tracevet-export/1",
            "queue_id": queue.settings.queue_id,
            "queue": str(queue.root),
            "exported_utc": utc_now_text(),
            "exported_by": exported_by,
            "tracevet_version": __version__,
            "log_head": head,
            "records": rows,
        }
        write_text_atomic(staging / "manifest.json", json.dumps(manifest, indent=2) + "\n", mode=FILE_MODE)
        write_text_atomic(staging / "manifest.csv", _csv(rows), mode=FILE_MODE)
        write_text_atomic(staging / "sign-off.txt", _report(manifest), mode=FILE_MODE)
        if dest.exists():
            dest.rmdir()
        os.rename(staging, dest)
        fsync_dir(dest.parent)
    except BaseException:
        if staging.exists():
            _remove_tree(staging)
        raise
    return ExportResult(dest, len(rows), head)


def _csv(rows: list[dict]) -> str:
    buffer = io.StringIO()
    writer = csv.writer(buffer, lineterminator="\n")
    writer.writerow(CSV_COLUMNS)
    for row in rows:
        values = dict(row)
        values["flags"] = " ".join(f"{f['id']}:{f['severity']}" for f in row["flags"])
        for key in ("note", "source_name", "reviewer"):
            values[key] = inert(values[key])  # the exact text is in manifest.json
        writer.writerow([_formula_safe(values.get(c)) for c in CSV_COLUMNS])
    return buffer.getvalue()


def _report(manifest: dict) -> str:
    head = manifest["log_head"]
    lines = [
        "tracevet sign-off report",
        "========================",
        "",
        f"Queue:            {inert(manifest['queue'])} (queue id {manifest['queue_id']})",
        f"Exported:         {manifest['exported_utc'][:19].replace('T', ' ')} UTC by tracevet "
        f"{manifest['tracevet_version']}"
        + (f", {inert(manifest['exported_by'], 100)}" if manifest.get("exported_by") else ""),
        f"Decision log:     {head['entries']} entries, newest entry hash {head['hash']}",
        f"Accepted records: {len(manifest['records'])}",
        "",
        "Each record below was accepted by the reviewer named, on the exact data whose",
        "SHA-256 is given; 'tracevet log QUEUE --verify' checks these facts against the",
        "queue's hash-chained decision log. Text typed by reviewers is shown with",
        "control characters made visible.",
    ]
    for row in manifest["records"]:
        origin = (
            "cleaned by tracevet" if row["origin"] == "tracevet" else "cleaned outside tracevet (no tracevet settings)"
        )
        flags = row["flags"]
        flag_text = "none" if not flags else "; ".join(f"{f['severity']} {inert(f['id'], 40)}" for f in flags)
        lines += [
            "",
            f"{row['record']}  (added from {inert(row['source_name'], 200)})",
            f"  run          {row['run']}, {origin}"
            + (f", settings digest {row['settings_digest']}" if row["settings_digest"] else ""),
            f"  signed off   {str(row['decided_utc'])[:19].replace('T', ' ')} UTC by {inert(row['reviewer'], 100)} "
            f"(log entry {row['log_seq']})",
            f"  note         {inert(row['note']) or '(none)'}",
            f"  flags        {flag_text}",
            f"  original     sha256 {row['original_sha256']}",
            f"  cleaned      {row['file']}  sha256 {row['sha256']}",
            f"  log entry    hash {row['log_entry_hash']}",
        ]
    lines += ["", CAUTION, "These sign-offs record review decisions only.", ""]
    return "\n".join(lines)
