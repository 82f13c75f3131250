"""The :class:`Queue`: one object for everything the CLI and the app do with a queue."""

from __future__ import annotations

import getpass
import os
from dataclasses import dataclass, replace
from pathlib import Path
from typing import Any, Callable, Iterable, Sequence

from tracevet.errors import InputError, TracevetError
from tracevet.recording import Recording, read_recording
from tracevet.recording.atomic import fsync_dir, write_text_atomic
from tracevet.workqueue import claims as claims_mod
from tracevet.workqueue import index as index_mod
from tracevet.workqueue import log as log_mod
from tracevet.workqueue.checksums import sha256_file
from tracevet.workqueue.claims import Claim, ClaimedByOther
from tracevet.workqueue.ids import CaseFoldedIds, check_record_id, make_record_id, run_number
from tracevet.workqueue.index import (
    IN_REVIEW,
    SENT_BACK,
    TO_REVIEW,
    Index,
    apply_runs,
    base_state,
    decision_summary,
    summary_from_files,
)
from tracevet.workqueue.layout import FILE_MODE, INIT_TOLERATED, QueuePaths, find_queue
from tracevet.workqueue.locking import held
from tracevet.workqueue.log import DECISIONS, LogEntry
from tracevet.workqueue.records import (
    StagedRecord,
    commit_staged,
    discard_staged,
    list_record_ids,
    load_original,
    original_path,
    read_meta,
    stage_original,
    work_folder,
    _remove_tree,
)
from tracevet.workqueue.runs import (
    RunInfo,
    build_run,
    cleaned_path,
    commit_run,
    list_runs,
    load_assessment,
    load_cleaned,
    run_info,
    run_with_token,
    write_run_meta,
)
from tracevet.workqueue.settings import QueueSettings, new_settings, read_settings
from tracevet.workqueue.states import DECISION_PAST, DECIDED_STATES, RecordState
from tracevet.text import inert

MAX_NOTE_LENGTH = 10_000
MAX_REVIEWER_LENGTH = 100
_SEVERITY_ORDER = {"fail": 0, "warn": 1, None: 2}


REVIEWER_ENV = "TRACEVET_REVIEWER"


def default_reviewer() -> str:
    """The reviewer name when none is given: the one rule shared by the CLI and the app.

    ``$TRACEVET_REVIEWER`` if set, else the login name, else (no login name
    known, as in some containers) ``uid-N`` with the numeric user id, so the
    same person is always recorded under the same name.
    """
    name = os.environ.get(REVIEWER_ENV, "").strip()
    if name:
        return name
    try:
        login = getpass.getuser().strip()
    except (KeyError, OSError, ImportError):
        login = ""
    if login:
        return login
    getuid = getattr(os, "getuid", None)
    return f"uid-{getuid()}" if getuid is not None else "uid-unknown"


def resolve_reviewer(given: str | None, source: str = "--reviewer") -> str:
    """The reviewer name to write: ``given`` if not None, else :func:`default_reviewer`; checked."""
    return check_reviewer(default_reviewer() if given is None else given, source)


def check_reviewer(name: object, source: str = "--reviewer") -> str:
    """Return the reviewer name as given, or raise InputError if empty or too long."""
    if not isinstance(name, str) or not name.strip():
        raise InputError(source, "a reviewer name is needed (--reviewer NAME or $TRACEVET_REVIEWER)")
    if len(name) > MAX_REVIEWER_LENGTH:
        raise InputError(source, f"reviewer name longer than {MAX_REVIEWER_LENGTH} characters")
    return name


def check_note(note: object, source: str = "--note") -> str:
    """Return the note as given ('' for None), or raise InputError if not text or too long."""
    if note is None:
        return ""
    if not isinstance(note, str):
        raise InputError(source, "the note must be text")
    if len(note) > MAX_NOTE_LENGTH:
        raise InputError(source, f"note longer than {MAX_NOTE_LENGTH} characters")
    return note


@dataclass(frozen=True)
class LastDecision:
    """The newest decision on a record, as the index keeps it (display every text inert).

    Attributes
    ----------
    decision : str
        ``accept``, ``reject`` or ``rerun``.
    run, reviewer, time : str
        The run signed off, who decided, UTC time (ISO 8601).
    seq : int
        The log entry (line number of ``decisions.jsonl``).
    note : str
        The note, cut to 200 characters.
    hash : str or None
        The log entry's hash (None in indexes written before it was kept).
    overrides : dict or None
        When this decision overrode an earlier one: that entry's ``seq``,
        ``hash``, ``reviewer``, ``decision`` and ``run``.
    newest_run : str or None
        The record's newest run when the decision was made.
    """

    decision: str
    run: str
    reviewer: str
    time: str
    seq: int
    note: str
    hash: str | None = None
    overrides: dict | None = None
    newest_run: str | None = None

    @classmethod
    def from_summary(cls, data: dict | None) -> "LastDecision | None":
        """Build from the index's ``last_decision`` dict (None stays None)."""
        if not isinstance(data, dict) or not data.get("decision"):
            return None
        overrides = data.get("overrides")
        return cls(
            decision=str(data.get("decision") or ""),
            run=str(data.get("run") or ""),
            reviewer=str(data.get("reviewer") or ""),
            time=str(data.get("time") or ""),
            seq=int(data.get("seq") or 0),
            note=str(data.get("note") or ""),
            hash=None if data.get("hash") is None else str(data["hash"]),
            overrides=overrides if isinstance(overrides, dict) else None,
            newest_run=None if data.get("newest_run") is None else str(data["newest_run"]),
        )

    @property
    def past_tense(self) -> str:
        """``accepted``, ``rejected`` or ``sent back for a re-run``."""
        return DECISION_PAST.get(self.decision, self.decision)


class DecisionOverride(TracevetError):
    """Deciding would override another reviewer's decision, and no override was asked for.

    ``previous`` is that decision (:class:`LastDecision`).
    """

    def __init__(self, record: str, previous: LastDecision):
        self.record = record
        self.previous = previous
        when = previous.time[:16].replace("T", " ")
        super().__init__(
            f"{record}: {previous.past_tense} by {inert(previous.reviewer, 60)} at {when} UTC "
            f"(log entry {previous.seq}); deciding over another reviewer's decision needs --override"
        )


@dataclass(frozen=True)
class RecordSummary:
    """One record as the worklist shows it (from the index; no data file read).

    Attributes
    ----------
    id : str
        Record id (safe folder name).
    state : RecordState
        ``to-clean``, ``to-review``, ``in-review``, ``accepted``, ``rejected``
        or ``sent-back`` (a ``StrEnum``: compares equal to those words).
    source_name : str
        The file name the record was added from, as given (display it inert).
    kind, units : str or None
    fs : float
    n_channels, n_samples : int
    duration_s : float
    worst_severity : str or None
        ``fail``, ``warn`` or None (newest run; None also when not cleaned).
    n_flags : int
    holder : Claim or None
        Who holds the record, if anyone (see ``holder_stale``).
    holder_stale : bool
        The claim may be taken over (holder gone or idle too long).
    last_decision : dict or None
        ``decision``, ``run``, ``reviewer``, ``time``, ``seq``, ``note`` (cut
        to 200 characters), ``newest_run``.
    current_run_id : str or None
        The newest run.
    n_runs : int
    origin : str
        ``raw`` (cleaned by tracevet) or ``pair`` (added already cleaned).
    added : str
        UTC time the record was added.
    """

    id: str
    state: RecordState
    source_name: str
    kind: str | None
    units: str | None
    fs: float | None
    n_channels: int | None
    n_samples: int | None
    duration_s: float | None
    worst_severity: str | None
    n_flags: int
    holder: Claim | None
    holder_stale: bool
    last_decision: dict | None
    current_run_id: str | None
    n_runs: int
    origin: str
    added: str

    @property
    def last(self) -> LastDecision | None:
        """The newest decision, typed (``last_decision`` is the same as stored)."""
        return LastDecision.from_summary(self.last_decision)

    @property
    def standing_decision(self) -> LastDecision | None:
        """The newest decision if it still stands (no run was added after it), else None."""
        last = self.last
        if last is None:
            return None
        try:
            newest_then = last.newest_run
            if self.current_run_id and (not newest_then or run_number(self.current_run_id) > run_number(newest_then)):
                return None
        except Exception:  # a damaged summary: treat the newest run as unreviewed, as base_state does
            return None
        return last

    @property
    def holder_live(self) -> bool:
        """Someone holds a claim that may not be taken over."""
        return self.holder is not None and not self.holder_stale


def _summary_to_record(summary: dict, claim: Claim | None, idle_minutes: float) -> RecordSummary:
    state = base_state(summary)
    stale = False
    if claim is not None:
        stale = claim.takeover_reason(idle_minutes) is not None
        if not stale and state in (TO_REVIEW, SENT_BACK):
            state = IN_REVIEW
    return RecordSummary(
        id=summary["id"],
        state=state,
        source_name=str(summary.get("source_name") or ""),
        kind=summary.get("kind"),
        units=summary.get("units"),
        fs=summary.get("fs"),
        n_channels=summary.get("n_channels"),
        n_samples=summary.get("n_samples"),
        duration_s=summary.get("duration_s"),
        worst_severity=summary.get("worst_severity"),
        n_flags=int(summary.get("n_flags") or 0),
        holder=claim,
        holder_stale=stale,
        last_decision=summary.get("last_decision"),
        current_run_id=summary.get("current_run"),
        n_runs=int(summary.get("runs") or 0),
        origin=str(summary.get("origin") or ""),
        added=str(summary.get("added") or ""),
    )


class Queue:
    """A work queue folder (see :mod:`tracevet.workqueue`)."""

    def __init__(self, paths: QueuePaths, settings: QueueSettings):
        self.paths = paths
        self.settings = settings

    # ----------------------------------------------------------------- opening
    @classmethod
    def init(cls, path: str | os.PathLike, settings: QueueSettings | None = None) -> "Queue":
        """Make ``path`` a new, empty queue (the folder may not exist yet or must be empty).

        A folder holding only ``README.md``, ``.gitkeep`` or ``.gitignore``
        counts as empty. Refuses a folder that is already a queue.
        """
        root = Path(path)
        if root.exists() and not root.is_dir():
            raise InputError(str(path), "is a file, not a folder")
        if root.is_dir():
            leftovers = sorted(n for n in os.listdir(root) if n not in INIT_TOLERATED)
            if "queue.yaml" in leftovers:
                raise InputError(str(path), "is already a tracevet queue")
            if leftovers:
                raise InputError(
                    str(path), f"folder is not empty ({len(leftovers)} entries); a queue needs an empty or new folder"
                )
        else:
            if not root.parent.is_dir():
                raise InputError(str(path), "its parent folder does not exist")
            root.mkdir()
        settings = settings or new_settings()
        paths = QueuePaths(root.resolve())
        for folder in (paths.records, paths.claims, paths.work):
            folder.mkdir(exist_ok=True)
        write_text_atomic(paths.settings, settings.to_text(), mode=FILE_MODE)
        return cls(paths, read_settings(paths.settings))

    @classmethod
    def open(cls, path: str | os.PathLike) -> "Queue":
        """Open an existing queue; InputError (one line) if ``path`` is not one."""
        paths = find_queue(path)
        return cls(paths, read_settings(paths.settings))

    @property
    def root(self) -> Path:
        """The queue folder."""
        return self.paths.root

    def _lock(self, shared: bool = False):
        return held(self.paths.lock, shared=shared)

    # ----------------------------------------------------------------- reading
    def _index(self) -> Index:
        with self._lock(shared=True):
            index = Index.load(self.paths)
        if index.dirty or index.removed or index.damaged:
            with self._lock():
                index = Index.load(self.paths)
                index.commit(self.paths)
        return index

    def records(self) -> list[RecordSummary]:
        """Every record, in id order, from the index (no data file is read)."""
        index = self._index()
        claims = claims_mod.all_claims(self.paths)
        idle = self.settings.claim_idle_minutes
        return [_summary_to_record(index.records[r], claims.get(r), idle) for r in sorted(index.records)]

    def record(self, record_id: str) -> RecordSummary:
        """One record's summary, read from its own files (InputError if unknown)."""
        record_id = check_record_id(record_id)
        summary = summary_from_files(self.paths, record_id)
        stored = self._index().records.get(record_id)
        summary["last_decision"] = stored.get("last_decision") if stored else None
        return _summary_to_record(
            summary, claims_mod.read_claim(self.paths, record_id), self.settings.claim_idle_minutes
        )

    def record_meta(self, record_id: str) -> dict:
        """The record's ``record.json`` (origin, checksums, metadata)."""
        return read_meta(self.paths, check_record_id(record_id))

    def load_original(self, record_id: str) -> Recording:
        """The original recording, as added."""
        return load_original(self.paths, check_record_id(record_id))

    def runs(self, record_id: str) -> list[RunInfo]:
        """The runs of a record, oldest first (reads only ``run.json`` and ``settings.yaml``)."""
        record_id = check_record_id(record_id)
        read_meta(self.paths, record_id)
        return [run_info(self.paths, record_id, r) for r in list_runs(self.paths, record_id)]

    def load_run(self, record_id: str, run_id: str | None = None):
        """``(cleaned Recording, Assessment)`` of a run (default: the newest)."""
        record_id = check_record_id(record_id)
        meta = read_meta(self.paths, record_id)
        run_id = self._pick_run(record_id, run_id)
        info = run_info(self.paths, record_id, run_id, with_settings=False)
        return load_cleaned(self.paths, record_id, info, meta), load_assessment(self.paths, record_id, run_id)

    def _pick_run(self, record_id: str, run_id: str | None) -> str:
        runs = list_runs(self.paths, record_id)
        if not runs:
            raise InputError(record_id, "has not been cleaned yet (run 'tracevet clean')")
        if run_id is None:
            return runs[-1]
        if run_id not in runs:
            raise InputError(record_id, f"has no run {str(run_id)[:40]!r} (runs: {', '.join(runs)})")
        return run_id

    def log_entries(self, record_id: str | None = None) -> list[LogEntry]:
        """Complete log entries, oldest first (only those about ``record_id`` if given)."""
        with self._lock(shared=True):
            entries = log_mod.read_log(self.paths.log).entries
        if record_id is None:
            return entries
        return [e for e in entries if e.record == record_id]

    def next_for_review(self, reviewer: str) -> str | None:
        """The record ``reviewer`` should look at next, or None when nothing waits.

        Records this reviewer already holds come first, then the others
        ready for review (including ones whose claim may be taken over),
        ``fail`` before ``warn`` before unflagged, then by id.
        """
        candidates = []
        for item in self.records():
            mine = item.holder is not None and item.holder.reviewer == reviewer
            free = item.holder is None or item.holder_stale or mine
            if not free:
                continue
            if item.state in (TO_REVIEW, IN_REVIEW) or (mine and item.state not in DECIDED_STATES):
                candidates.append((0 if mine else 1, _SEVERITY_ORDER.get(item.worst_severity, 2), item.id))
        return min(candidates)[2] if candidates else None

    # ------------------------------------------------------------------ claims
    def claim(self, record_id: str, reviewer: str, bind_process: bool = True) -> Claim:
        """Claim a record for ``reviewer`` (refreshing their own claim).

        Raises :class:`ClaimedByOther` (carrying ``holder``) when another
        reviewer holds a live claim. Taking over a lapsed claim is logged.
        """
        record_id = check_record_id(record_id)
        reviewer = check_reviewer(reviewer)
        read_meta(self.paths, record_id)
        with self._lock():
            claim, previous, reason = claims_mod.take(
                self.paths, record_id, reviewer, self.settings.claim_idle_minutes, bind_process=bind_process
            )
            if previous is not None:
                log_mod.append(self.paths, [_takeover_body(record_id, reviewer, previous, reason)], repairer=reviewer)
        return claim

    def touch_claim(self, record_id: str, reviewer: str) -> Claim:
        """Note activity on ``reviewer``'s claim (claims again if it had lapsed)."""
        return self.claim(record_id, reviewer)

    def release(self, record_id: str, reviewer: str) -> bool:
        """Give up ``reviewer``'s claim; True if there was one. ClaimedByOther if someone else holds it."""
        record_id = check_record_id(record_id)
        reviewer = check_reviewer(reviewer)
        with self._lock():
            return claims_mod.release(self.paths, record_id, reviewer)

    def holder(self, record_id: str) -> Claim | None:
        """The claim on one record, or None (reads one small file; for polling a held record)."""
        return claims_mod.read_claim(self.paths, check_record_id(record_id))

    def claims(self) -> dict[str, Claim]:
        """Every current claim by record id."""
        return claims_mod.all_claims(self.paths)

    # --------------------------------------------------------------- decisions
    def decide(
        self,
        record_id: str,
        decision: str,
        note: str | None,
        reviewer: str,
        run_id: str | None = None,
        requested_settings=None,
        override: bool = False,
    ) -> LogEntry:
        """Record a decision on a run (default: the newest) and return the log entry.

        ``decision`` is ``accept``, ``reject`` or ``rerun``; a rejection needs a
        note, and so does accepting a run with a ``fail`` flag. For ``rerun``,
        ``requested_settings`` (``CleaningSettings`` or a settings dict) are
        what ``tracevet clean`` will use; otherwise the queue's defaults.
        The entry is fsynced before this returns; the reviewer's claim on the
        record ends with the decision.

        A decision that still stands (no run was added since) by *another*
        reviewer is overridden only with ``override=True``; the new entry
        then names the entry it overrides (``overrides``: its ``seq``,
        ``hash``, ``reviewer``, ``decision`` and ``run``), as it does when a
        reviewer changes their own standing decision.

        Raises
        ------
        ClaimedByOther
            Another reviewer holds a live claim on the record.
        DecisionOverride
            Another reviewer's decision stands and ``override`` is False.
        InputError
            Unknown record or run, missing note, or data that no longer match
            their checksums.
        """
        record_id = check_record_id(record_id)
        reviewer = check_reviewer(reviewer)
        note = check_note(note)
        if decision not in DECISIONS:
            raise InputError("decision", f"must be one of {', '.join(DECISIONS)}, got {str(decision)[:20]!r}")
        if decision == "reject" and not note.strip():
            raise InputError("--note", "a rejection needs a note saying why")
        meta = read_meta(self.paths, record_id)
        run_id = self._pick_run(record_id, run_id)
        info = run_info(self.paths, record_id, run_id)
        if decision == "accept" and info.worst_severity == "fail" and not note.strip():
            raise InputError("--note", f"{run_id} of {record_id} has a fail flag: accepting it needs a note saying why")
        original_sha = sha256_file(original_path(self.paths, record_id, meta))
        if original_sha != meta.get("original_sha256"):
            raise InputError(
                record_id, "the original no longer matches its checksum; nothing decided (see 'tracevet log --verify')"
            )
        cleaned_sha = sha256_file(cleaned_path(self.paths, record_id, info))
        if cleaned_sha != info.cleaned_sha256:
            raise InputError(
                f"{record_id}/{run_id}",
                "the cleaned data no longer match their checksum; nothing decided (see 'tracevet log --verify')",
            )
        requested = None
        if decision == "rerun" and requested_settings is not None:
            requested = self._settings_object(requested_settings, "requested settings")
        body: dict[str, Any] = {
            "event": "decision",
            "record": record_id,
            "run": run_id,
            "decision": decision,
            "note": note,
            "reviewer": reviewer,
            "origin": info.origin,
            "settings": info.settings,
            "settings_digest": info.settings_digest,
            "original_sha256": original_sha,
            "cleaned_sha256": cleaned_sha,
            "cleaned_file": info.cleaned_file,
            "flags": info.flags,
            "worst_severity": info.worst_severity,
        }
        if info.suggestion is not None:  # a decision on a suggested run says so
            body["suggested"] = True
            body["candidate_set_digest"] = info.suggestion.get("candidate_set_digest")
        if requested is not None:
            body["requested_settings"] = requested.to_dict()
            body["requested_settings_digest"] = requested.digest()
        with self._lock():
            stale, reason = claims_mod.check_holder(self.paths, record_id, reviewer, self.settings.claim_idle_minutes)
            bodies = []
            if stale is not None:
                bodies.append(_takeover_body(record_id, reviewer, stale, reason))
            previous = self._standing_decision(record_id)
            if previous is not None:
                if previous.reviewer != reviewer and not override:
                    raise DecisionOverride(record_id, previous)
                body["overrides"] = {
                    "seq": previous.seq,
                    "hash": previous.hash or self._entry_hash(previous.seq),
                    "reviewer": previous.reviewer,
                    "decision": previous.decision,
                    "run": previous.run,
                }
            own = claims_mod.read_claim(self.paths, record_id)
            body["claim"] = own.to_dict() if own is not None and own.reviewer == reviewer else None
            runs_now = list_runs(self.paths, record_id)
            body["newest_run"] = runs_now[-1] if runs_now else run_id
            bodies.append(body)
            log_size = _size(self.paths.log)
            entries = log_mod.append(self.paths, bodies, repairer=reviewer)
            entry = entries[-1]
            index_mod.update(self.paths, [summary_from_files(self.paths, record_id, decision_summary(entry))], log_size)
            holder = claims_mod.read_claim(self.paths, record_id)
            if holder is not None and (holder.reviewer == reviewer or stale is not None):
                self.paths.claim_file(record_id).unlink(missing_ok=True)  # a decision ends the claim
        return entry

    def _standing_decision(self, record_id: str) -> LastDecision | None:
        """The record's newest decision if it still stands (no run added since); queue lock held."""
        stored = Index.load(self.paths).records.get(record_id)
        if not stored or not stored.get("last_decision"):
            return None
        summary = dict(stored)
        apply_runs(self.paths, summary)
        if base_state(summary) not in DECIDED_STATES:
            return None
        return LastDecision.from_summary(summary["last_decision"])

    def _entry_hash(self, seq: int) -> str | None:
        """Hash of log entry ``seq`` (indexes written before hashes were kept); queue lock held."""
        for entry in log_mod.read_log(self.paths.log).entries:
            if entry.seq == seq:
                return entry.hash
        return None

    # -------------------------------------------------------------------- runs
    def _settings_object(self, settings, source: str):
        from tracevet.cleaning import CleaningSettings

        if settings is None:
            return self.settings.cleaning_settings()
        if isinstance(settings, CleaningSettings):
            return settings
        if isinstance(settings, dict):
            return CleaningSettings.from_dict(settings, source=source)
        raise InputError(source, "settings must be CleaningSettings or a mapping")

    def add_run(
        self,
        record_id: str,
        settings=None,
        progress: Callable[[float], None] | None = None,
        reviewer: str | None = None,
    ) -> str:
        """Clean and assess a record again with ``settings``; return the new run id.

        ``settings``: ``CleaningSettings``, a settings dict, or None for the
        queue's defaults. The new run is added beside the earlier ones. If
        ``progress`` raises, the run is abandoned and nothing is written.
        With ``reviewer`` given, the run is refused (ClaimedByOther) while
        another reviewer holds the record, and the run records who asked.
        """
        from tracevet.assessment import assess
        from tracevet.cleaning import clean_with_report

        record_id = check_record_id(record_id)
        if reviewer is not None:
            reviewer = check_reviewer(reviewer)
            with self._lock():
                claims_mod.check_holder(self.paths, record_id, reviewer, self.settings.claim_idle_minutes)
        settings = self._settings_object(settings, "settings")
        original = self.load_original(record_id)
        cleaned, report = clean_with_report(original, settings, progress=progress)
        assessment = assess(original, cleaned, limits=self.settings.limits())
        return self.store_run(record_id, cleaned, assessment, report.settings, made_by=reviewer, report=report)

    def store_run(
        self,
        record_id: str,
        cleaned: Recording,
        assessment,
        settings,
        made_by: str | None = None,
        update_index: bool = True,
        batch_token: str | None = None,
        extra: dict | None = None,
        report=None,
    ) -> str:
        """Write an already computed run into the record (whole or not at all); return its id.

        ``settings`` are those applied (``report.settings`` of
        ``tracevet.cleaning.clean_with_report``); ``report`` adds what ``mains: auto`` found.
        With ``batch_token``, storing is idempotent: if a run of this record
        already carries the token (run.json ``batch``), its id is returned and
        nothing is written, so a retried task never leaves two runs.
        ``extra`` adds keys to run.json (worker, software versions).
        """
        record_id = check_record_id(record_id)
        if batch_token is not None:
            existing = run_with_token(self.paths, record_id, batch_token)
            if existing is not None:
                return existing
            extra = dict(extra or {}, batch=batch_token)
        folder = work_folder(self.paths, "run")
        try:
            meta = build_run(
                folder, record_id, cleaned, assessment, settings, made_by=made_by, extra=extra, report=report
            )
            run_id = commit_run(self.paths, record_id, folder, meta)
        except BaseException:
            _remove_tree(folder)
            raise
        if update_index:
            self.refresh_index([record_id])
        return run_id

    def refresh_index(self, record_ids: Iterable[str]) -> None:
        """Re-read the run fields of these records into the index."""
        with self._lock():
            index = Index.load(self.paths)
            for record_id in record_ids:
                summary = index.records.get(record_id)
                if summary is None:
                    summary = summary_from_files(self.paths, record_id)
                else:
                    apply_runs(self.paths, summary)
                index.put(summary)
            index.commit(self.paths)

    # ----------------------------------------------------------------- adding
    def _existing_checksums(self) -> dict[str, str]:
        return {
            str(s["original_sha256"]): r for r, s in self._index().records.items() if s.get("original_sha256")
        }

    def _read_input(self, path: Path, fs, kind, units) -> Recording:
        recording = read_recording(path, fs=fs, kind=kind, units=units)
        changes: dict[str, Any] = {}
        if kind is None and recording.kind == "other" and self.settings.default_kind != "other":
            changes["kind"] = self.settings.default_kind
        if units is None and recording.units is None and self.settings.default_units:
            changes["units"] = self.settings.default_units
        if changes:
            from dataclasses import replace

            recording = replace(recording, **changes)
        return recording

    def add_files(
        self,
        files: Sequence[str | os.PathLike],
        fs: float | None = None,
        kind: str | None = None,
        units: str | None = None,
        added_by: str | None = None,
        allow_duplicates: bool = False,
    ) -> list[str]:
        """Add raw recordings (to be cleaned by tracevet); return their new record ids.

        Every file is read and checked first; if any is refused, none is
        added (InputError naming the file). A file whose bytes are already
        in the queue is refused unless ``allow_duplicates``.
        """
        added_by = check_reviewer(added_by or default_reviewer(), "reviewer")
        known = {} if allow_duplicates else self._existing_checksums()
        staged: list[StagedRecord] = []
        try:
            for item in files:
                path = Path(item)
                recording = self._read_input(path, fs, kind, units)
                record = stage_original(self.paths, path, recording, added_by, origin="raw")
                staged.append(record)
                checksum = record.meta["original_sha256"]
                if checksum in known:
                    raise InputError(
                        str(path),
                        f"already in the queue as record {known[checksum]} (same bytes); use --allow-duplicates to "
                        "add it again",
                    )
                known[checksum] = f"(this command, {path.name})"
            return self._commit_records(staged, added_by)
        except BaseException:
            for record in staged:
                if record.folder.exists():
                    discard_staged(record)
            raise

    def add_pair(
        self,
        original: str | os.PathLike,
        cleaned: str | os.PathLike,
        fs: float | None = None,
        kind: str | None = None,
        units: str | None = None,
        added_by: str | None = None,
        allow_duplicates: bool = False,
    ) -> str:
        """Add a record cleaned elsewhere (its first run has origin ``external``); return its id."""
        from tracevet.assessment import assess

        added_by = check_reviewer(added_by or default_reviewer(), "reviewer")
        original_path_, cleaned_path_ = Path(original), Path(cleaned)
        raw = self._read_input(original_path_, fs, kind, units)
        # The cleaned file's own metadata (no queue defaults): a pair in different
        # units or of different kinds is refused, as 'tracevet assess' refuses it,
        # instead of being relabelled and flagged for a change it did not make.
        done = read_recording(
            cleaned_path_,
            fs=fs if fs is not None else (raw.fs if cleaned_path_.suffix.lower() == ".npy" else None),
            kind=kind,
            units=units,
        )
        if done.units and raw.units and done.units != raw.units:
            raise InputError(str(cleaned_path_), f"in {done.units}, the original in {raw.units}")
        if "other" not in (done.kind, raw.kind) and done.kind != raw.kind:
            raise InputError(str(cleaned_path_), f"is {done.kind}, the original {raw.kind}")
        done = replace(done, kind=raw.kind, units=raw.units)
        if done.samples.shape != raw.samples.shape:
            raise InputError(
                str(cleaned_path_),
                f"has {done.n_samples} samples x {done.n_channels} channels, the original {raw.n_samples} x "
                f"{raw.n_channels}",
            )
        if abs(done.fs - raw.fs) > 1e-6 * raw.fs:
            raise InputError(
                str(cleaned_path_), f"sampling rate {done.fs:g} Hz differs from the original's {raw.fs:g} Hz"
            )
        assessment = assess(raw, done, limits=self.settings.limits())
        known = {} if allow_duplicates else self._existing_checksums()
        record = stage_original(self.paths, original_path_, raw, added_by, origin="pair")
        try:
            if record.meta["original_sha256"] in known:
                raise InputError(
                    str(original_path_),
                    f"already in the queue as record {known[record.meta['original_sha256']]} (same bytes); use "
                    "--allow-duplicates to add it again",
                )
            run_folder = record.folder / "runs" / "run-001"
            meta = build_run(run_folder, "", None, assessment, cleaned_source=cleaned_path_, made_by=added_by)
            meta["run"] = "run-001"
            record.meta["cleaned_source_name"] = cleaned_path_.name
            record.meta["run_meta"] = meta
            return self._commit_records([record], added_by)[0]
        except BaseException:
            if record.folder.exists():
                discard_staged(record)
            raise

    def _commit_records(self, staged: list[StagedRecord], added_by: str) -> list[str]:
        ids: list[str] = []
        with self._lock():
            taken = CaseFoldedIds(list_record_ids(self.paths))
            bodies = []
            for record in staged:
                record_id = make_record_id(record.source_name, taken)
                taken.add_id(record_id)
                run_meta = record.meta.pop("run_meta", None)
                if run_meta is not None:
                    run_meta["record"] = record_id
                    write_run_meta(record.folder / "runs" / "run-001", run_meta)
                commit_staged(self.paths, record, record_id, sync=False)
                ids.append(record_id)
                body = {
                    "event": "add",
                    "record": record_id,
                    "reviewer": added_by,
                    "source_name": record.meta["source_name"],
                    "origin": record.meta["origin"],
                    "original_sha256": record.meta["original_sha256"],
                    "metadata": {
                        k: record.meta.get(k) for k in ("fs", "n_samples", "channels", "kind", "units", "duration_s")
                    },
                }
                if run_meta is not None:
                    body["cleaned_source_name"] = record.meta.get("cleaned_source_name")
                    body["cleaned_sha256"] = run_meta["files"].get(run_meta["cleaned"])
                bodies.append(body)
            fsync_dir(self.paths.records)  # every rename on disk before the log says the records exist
            log_size = _size(self.paths.log)
            log_mod.append(self.paths, bodies, repairer=added_by)
            index_mod.update(self.paths, [summary_from_files(self.paths, r) for r in ids], log_size)
        return ids

    # ------------------------------------------------------------ log upkeep
    def repair_log(self, reviewer: str) -> LogEntry | None:
        """Remove a torn last line of the log (keeping every complete entry); log the repair."""
        reviewer = check_reviewer(reviewer)
        with self._lock():
            return log_mod.repair(self.paths, reviewer)

    def verify(self, rebuild_index: bool = True) -> list:
        """Check the whole queue; return the problems found (empty when all is well).

        See :func:`tracevet.workqueue.verify.verify_queue`.
        """
        from tracevet.workqueue.verify import verify_queue

        return verify_queue(self, rebuild_index=rebuild_index)


def _size(path: Path) -> int:
    try:
        return path.stat().st_size
    except FileNotFoundError:
        return 0


def _takeover_body(record_id: str, reviewer: str, previous: Claim, reason: str | None) -> dict:
    return {
        "event": "takeover",
        "record": record_id,
        "reviewer": reviewer,
        "previous_claim": previous.to_dict(),
        "reason": reason,
        "note": f"claim taken over from {previous.reviewer}: {reason}",
    }


__all__ = [
    "ClaimedByOther",
    "DecisionOverride",
    "LastDecision",
    "Queue",
    "RecordSummary",
    "TracevetError",
    "default_reviewer",
    "resolve_reviewer",
]
