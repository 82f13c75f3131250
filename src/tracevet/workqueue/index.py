"""The queue index: one small summary per record, so listing never reads data files.

``index.json`` is a snapshot ``{"version": 1, "log_size": N, "records":
{id: summary}}``; ``index.journal`` holds one JSON line per later change
(the new summary of one record and the log size after the change). A
reader applies the journal to the snapshot; when the journal outgrows the
snapshot a writer folds it in (atomic rewrite) and empties it. Both are
written only under the queue lock and read under a shared hold of it.

The index is derived data: everything in it can be rebuilt from the record
folders and the decision log (:func:`rebuild`, run by ``tracevet log
--verify``). On loading, entries appended to the log after the index was
last written (a writer that died in between) are applied, and record
folders missing from the index are read in, so the index catches up by
itself.

A summary holds: ``id``, ``source_name``, ``added``, ``origin``, ``kind``,
``units``, ``fs``, ``n_channels``, ``n_samples``, ``duration_s``, ``original_sha256``,
``runs`` (count), ``current_run`` (newest run id or None),
``worst_severity``, ``n_flags`` (of the newest run) and
``last_decision`` (decision, run, reviewer, time, seq, note, newest_run,
requested_settings, hash, overrides) or None.
"""

from __future__ import annotations

import json
import os
from typing import Any


from tracevet.recording.atomic import write_text_atomic
from tracevet.workqueue.ids import run_number
from tracevet.workqueue.layout import FILE_MODE, QueuePaths
from tracevet.workqueue.log import LogEntry, read_log
from tracevet.workqueue.records import list_record_ids, read_meta
from tracevet.workqueue.runs import list_runs, read_run_meta
from tracevet.workqueue.states import STATE_AFTER, RecordState

INDEX_VERSION = 1
_META_KEYS = (
    "source_name", "added", "origin", "kind", "units", "fs", "n_channels", "n_samples", "duration_s", "original_sha256",
)
_MIN_COMPACT_BYTES = 256 * 1024

# Record states: one owner (tracevet.workqueue.states); the short names stay importable from here.
TO_CLEAN = RecordState.TO_CLEAN
TO_REVIEW = RecordState.TO_REVIEW
IN_REVIEW = RecordState.IN_REVIEW
ACCEPTED = RecordState.ACCEPTED
REJECTED = RecordState.REJECTED
SENT_BACK = RecordState.SENT_BACK


def summary_from_files(paths: QueuePaths, record_id: str, last_decision: dict | None = None) -> dict:
    """Build a record's summary from ``record.json`` and its runs' ``run.json``."""
    meta = read_meta(paths, record_id)
    summary: dict[str, Any] = {"id": record_id}
    summary.update({k: meta.get(k) for k in _META_KEYS})
    apply_runs(paths, summary)
    summary["last_decision"] = last_decision
    return summary


def apply_runs(paths: QueuePaths, summary: dict) -> None:
    """Refresh the run fields of ``summary`` from the record's run folders."""
    runs = list_runs(paths, summary["id"])
    summary["runs"] = len(runs)
    summary["current_run"] = runs[-1] if runs else None
    summary["worst_severity"] = None
    summary["n_flags"] = 0
    if runs:
        meta = read_run_meta(paths, summary["id"], runs[-1])
        summary["worst_severity"] = meta.get("worst_severity")
        summary["n_flags"] = int(meta.get("n_flags") or 0)


def decision_summary(entry: LogEntry) -> dict:
    """The part of a decision entry the index keeps."""
    note = entry.note
    return {
        "decision": entry.decision,
        "run": entry.run,
        "reviewer": entry.reviewer,
        "time": entry.time,
        "seq": entry.seq,
        "note": note if len(note) <= 200 else note[:199] + "…",
        "newest_run": entry.get("newest_run"),
        "requested_settings": entry.get("requested_settings"),
        "hash": entry.hash,
        "overrides": entry.get("overrides"),
    }


def base_state(summary: dict) -> RecordState:
    """A record's state from its summary alone (claims not considered)."""
    decision = summary.get("last_decision")
    current = summary.get("current_run")
    if not decision:
        return TO_REVIEW if current else TO_CLEAN
    newest_then = decision.get("newest_run")
    try:
        if current and (not newest_then or run_number(current) > run_number(newest_then)):
            return TO_REVIEW
    except Exception:  # a damaged summary: treat the newest run as unreviewed
        return TO_REVIEW
    return STATE_AFTER.get(decision.get("decision"), TO_REVIEW)


class Index:
    """The loaded index: ``records`` maps record id to summary."""

    def __init__(self, records: dict[str, dict], log_size: int, journal_bytes: int = 0, snapshot_bytes: int = 0):
        self.records = records
        self.log_size = log_size
        self.dirty: set[str] = set()
        self.removed: set[str] = set()
        self.journal_bytes = journal_bytes
        self.snapshot_bytes = snapshot_bytes
        self.damaged: list[str] = []

    @classmethod
    def load(cls, paths: QueuePaths, catch_up: bool = True) -> "Index":
        """Read snapshot and journal (hold the queue lock, shared or exclusive).

        With ``catch_up`` the index also applies log entries written after
        it and reads record folders it does not know; what changed is
        marked dirty so the next :meth:`commit` saves it.
        """
        records: dict[str, dict] = {}
        log_size = 0
        damaged: list[str] = []
        snapshot_bytes = journal_bytes = 0
        try:
            raw = paths.index.read_bytes()
            snapshot_bytes = len(raw)
            data = json.loads(raw)
            if (
                not isinstance(data, dict)
                or data.get("version") != INDEX_VERSION
                or not isinstance(data.get("records"), dict)
            ):
                raise ValueError("unexpected structure")
            records = data["records"]
            log_size = int(data.get("log_size", 0))
        except FileNotFoundError:
            pass
        except (OSError, ValueError, TypeError) as exc:
            damaged.append(f"index.json unreadable ({str(exc)[:60]})")
            records, log_size = {}, -1
        try:
            raw = paths.journal.read_bytes()
        except FileNotFoundError:
            raw = b""
        journal_bytes = len(raw)
        for number, line in enumerate(raw.split(b"\n"), start=1):
            if not line:
                continue
            try:
                item = json.loads(line)
                if item.get("base"):
                    log_size = int(item["log_size"]) if log_size >= 0 else log_size
                    continue
                record_id = item["id"]
                if item.get("removed"):
                    records.pop(record_id, None)
                else:
                    records[record_id] = item["summary"]
                log_size = max(log_size, int(item.get("log_size", log_size))) if log_size >= 0 else log_size
            except (ValueError, KeyError, TypeError):
                damaged.append(f"index.journal line {number} unreadable")
        if catch_up and (log_size < 0 or (not records and list_record_ids(paths))):
            # no usable index (damaged, deleted or never written): build it from the files
            fresh, _problems = rebuild(paths)
            fresh.damaged = damaged or ["index missing"]
            fresh.dirty.update(fresh.records)
            return fresh
        index = cls(records, log_size, journal_bytes, snapshot_bytes)
        index.damaged = damaged
        if catch_up:
            index._catch_up(paths)
        return index

    def _catch_up(self, paths: QueuePaths) -> None:
        try:
            actual = paths.log.stat().st_size
        except FileNotFoundError:
            actual = 0
        if self.log_size < 0 or actual < self.log_size:
            # index unreadable or log shorter than the index remembers: take decisions from the whole log
            for summary in self.records.values():
                summary["last_decision"] = None
            self._apply_entries(paths, read_log(paths.log).entries)
            self.dirty.update(self.records)
        elif actual > self.log_size:
            with open(paths.log, "rb") as handle:
                handle.seek(self.log_size)
                tail = handle.read()
            entries = []
            for line in tail.split(b"\n")[:-1]:
                try:
                    parsed = json.loads(line)
                except ValueError:
                    continue
                if isinstance(parsed, dict):
                    entries.append(LogEntry(int(parsed.get("seq", 0) or 0), parsed))
            self._apply_entries(paths, entries)
        self.log_size = actual
        on_disk = list_record_ids(paths)
        missing = [r for r in on_disk if r not in self.records]
        if missing:
            self._read_in(paths, missing)
        present = set(on_disk)
        for record_id in list(self.records):
            if record_id not in present:
                del self.records[record_id]
                self.removed.add(record_id)

    def _read_in(self, paths: QueuePaths, record_ids: list[str]) -> None:
        """Add record folders the index did not know, with their decisions (one pass over the log)."""
        added = set()
        for record_id in record_ids:
            try:
                self.records[record_id] = summary_from_files(paths, record_id, None)
            except Exception:  # an unreadable record folder is reported by verify, not here
                continue
            added.add(record_id)
            self.dirty.add(record_id)
        if added:
            for entry in read_log(paths.log).entries:
                if entry.record in added and entry.event == "decision":
                    self.records[entry.record]["last_decision"] = decision_summary(entry)

    def _apply_entries(self, paths: QueuePaths, entries: list[LogEntry]) -> None:
        for entry in entries:
            record_id = entry.record
            if not isinstance(record_id, str) or record_id not in self.records:
                continue  # records the index does not know are read in from their folders
            if entry.event == "decision":
                self.records[record_id]["last_decision"] = decision_summary(entry)
                self.dirty.add(record_id)

    def put(self, summary: dict) -> None:
        """Set a record's summary (saved by the next :meth:`commit`)."""
        self.records[summary["id"]] = summary
        self.dirty.add(summary["id"])

    def commit(self, paths: QueuePaths) -> None:
        """Save dirty summaries; the caller holds the queue lock exclusively."""
        try:
            self.log_size = paths.log.stat().st_size
        except FileNotFoundError:
            self.log_size = 0
        if self.damaged or self.journal_bytes > max(_MIN_COMPACT_BYTES, self.snapshot_bytes):
            self.write_snapshot(paths)
            return
        if not self.dirty and not self.removed:
            return
        lines = [json.dumps({"id": r, "removed": True, "log_size": self.log_size}) for r in sorted(self.removed)]
        lines += [
            json.dumps({"id": r, "summary": self.records[r], "log_size": self.log_size})
            for r in sorted(self.dirty)
            if r in self.records
        ]
        data = ("\n".join(lines) + "\n").encode("utf-8")
        fd = os.open(str(paths.journal), os.O_WRONLY | os.O_APPEND | os.O_CREAT, 0o666)
        try:
            os.write(fd, data)
        finally:
            os.close(fd)
        self.journal_bytes += len(data)
        self.dirty.clear()
        self.removed.clear()

    def write_snapshot(self, paths: QueuePaths) -> None:
        """Write ``index.json`` whole and empty the journal (queue lock held)."""
        text = json.dumps({"version": INDEX_VERSION, "log_size": self.log_size, "records": self.records})
        write_text_atomic(paths.index, text, mode=FILE_MODE)
        write_text_atomic(paths.journal, json.dumps({"base": True, "log_size": self.log_size}) + "\n", mode=FILE_MODE)
        self.snapshot_bytes = len(text)
        self.journal_bytes = 0
        self.dirty.clear()
        self.removed.clear()
        self.damaged = []


def _journal_tail_log_size(paths: QueuePaths) -> tuple[int | None, int]:
    """``log_size`` of the journal's last line (None if unknown) and the journal's size."""
    try:
        with open(paths.journal, "rb") as handle:
            size = handle.seek(0, os.SEEK_END)
            handle.seek(max(0, size - 65536))
            tail = handle.read()
    except FileNotFoundError:
        return None, 0
    lines = tail.split(b"\n")
    if len(lines) < 2:
        return None, size
    try:
        return int(json.loads(lines[-2])["log_size"]), size
    except (ValueError, KeyError, TypeError):
        return None, size


def update(paths: QueuePaths, summaries: list[dict], log_size_before: int) -> None:
    """Save new summaries of some records; the caller holds the queue lock exclusively.

    ``log_size_before`` is the size of the decision log before the caller
    changed it. When the index was up to date with the log at that point,
    the summaries are appended to the journal without reading the index
    (fast on large queues); otherwise the index is loaded, caught up and
    saved whole.
    """
    known, journal_bytes = _journal_tail_log_size(paths)
    try:
        snapshot_bytes = paths.index.stat().st_size
    except FileNotFoundError:
        snapshot_bytes = -1
    if known == log_size_before and snapshot_bytes >= 0 and journal_bytes <= max(_MIN_COMPACT_BYTES, snapshot_bytes):
        try:
            log_size = paths.log.stat().st_size
        except FileNotFoundError:
            log_size = 0
        lines = [json.dumps({"id": s["id"], "summary": s, "log_size": log_size}) for s in summaries]
        fd = os.open(str(paths.journal), os.O_WRONLY | os.O_APPEND | os.O_CREAT, 0o666)
        try:
            os.write(fd, ("\n".join(lines) + "\n").encode("utf-8"))
        finally:
            os.close(fd)
        return
    index = Index.load(paths)
    for summary in summaries:
        index.put(summary)
    index.commit(paths)


def rebuild(paths: QueuePaths) -> tuple[Index, list[tuple[str, str]]]:
    """Build the index from record folders and the whole log.

    Returns the index and ``(record id, problem)`` for record folders that
    could not be read.
    """
    records: dict[str, dict] = {}
    problems: list[tuple[str, str]] = []
    for record_id in list_record_ids(paths):
        try:
            records[record_id] = summary_from_files(paths, record_id, None)
        except Exception as exc:  # reported, never fatal for the rest
            problems.append((record_id, str(exc)[:120]))
    contents = read_log(paths.log)
    for entry in contents.entries:
        if entry.event == "decision" and entry.record in records:
            records[entry.record]["last_decision"] = decision_summary(entry)
    try:
        size = paths.log.stat().st_size
    except FileNotFoundError:
        size = 0
    return Index(records, size), problems


def comparable(summary: dict) -> dict:
    """A summary reduced to what must agree between the stored and a rebuilt index."""
    return json.loads(json.dumps(summary))


def differences(stored: Index, fresh: Index) -> list[str]:
    """Record ids whose stored summary differs from the rebuilt one (or is missing/extra)."""
    ids = set(stored.records) | set(fresh.records)
    return sorted(
        r
        for r in ids
        if r not in stored.records
        or r not in fresh.records
        or comparable(stored.records[r]) != comparable(fresh.records[r])
    )


