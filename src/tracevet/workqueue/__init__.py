"""The work queue on disk: records, cleaning runs, claims and the decision log.

A queue is a folder (layout in :mod:`tracevet.workqueue.layout`). Everything
the command line and the review app do with it goes through :class:`Queue`:

Opening
    ``Queue.init(path, settings=None) -> Queue`` makes a new queue;
    ``Queue.open(path) -> Queue`` opens one (``InputError`` if the folder is
    not a queue). ``queue.settings`` is the parsed ``queue.yaml``
    (:class:`QueueSettings`: ``cleaning``, ``flag_limits``,
    ``default_kind``, ``default_units``, ``claim_idle_minutes``;
    ``cleaning_settings()`` and ``limits()`` give the objects the engine and
    the assessment take).

Reading (never reads data files unless named ``load_*``)
    ``queue.records() -> list[RecordSummary]`` from the index (id, state,
    source_name, kind, units, fs, n_channels, n_samples, duration_s,
    worst_severity, n_flags, holder, holder_stale, last_decision,
    current_run_id, n_runs, origin, added);
    ``queue.record(id) -> RecordSummary``; ``queue.record_meta(id) -> dict``;
    ``queue.runs(id) -> list[RunInfo]`` (run_id, created, origin, settings
    dict or None, settings_digest, worst_severity, n_flags, flags,
    cleaned_file, files, made_by);
    ``queue.load_original(id) -> Recording``;
    ``queue.load_run(id, run_id=None) -> (Recording, Assessment)``;
    ``queue.log_entries(record_id=None) -> list[LogEntry]``;
    ``queue.next_for_review(reviewer) -> str | None``;
    ``queue.claims() -> dict[str, Claim]``.

Claims
    ``queue.claim(id, reviewer) -> Claim`` (raises :class:`ClaimedByOther`,
    whose ``holder`` is the other reviewer's :class:`Claim`);
    ``queue.holder(id) -> Claim | None``;
    ``queue.touch_claim(id, reviewer) -> Claim``;
    ``queue.release(id, reviewer) -> bool``.

Changes
    ``queue.decide(id, decision, note, reviewer, run_id=None,
    requested_settings=None, override=False) -> LogEntry``
    (``accept``/``reject``/``rerun``; fsynced before it returns; ends the
    reviewer's claim; :class:`DecisionOverride` when another reviewer's
    decision stands and ``override`` is False);
    ``queue.add_run(id, settings=None, progress=None, reviewer=None) -> run_id``
    (clean and assess in this process; ``progress(fraction)`` raising cancels
    and leaves nothing behind);
    ``queue.add_files(files, fs=None, kind=None, units=None, added_by=None)
    -> list[str]``; ``queue.add_pair(original, cleaned, ...) -> str``;
    ``queue.repair_log(reviewer) -> LogEntry | None``;
    ``queue.verify() -> list[Problem]``.

Batch work
    :func:`tracevet.workqueue.batch.clean_waiting` and
    :func:`tracevet.workqueue.export.export_accepted`.

States (``RecordSummary.state``, a :class:`RecordState` from
:mod:`tracevet.workqueue.states`): ``to-clean`` (waiting to be cleaned),
``to-review`` (ready for review), ``in-review`` (a reviewer holds it),
``accepted``, ``rejected``, ``sent-back`` (sent back for a re-run).

The reviewer name, when none is given: :func:`default_reviewer`
(``$TRACEVET_REVIEWER``, else the login name, else ``uid-N``);
:func:`resolve_reviewer` applies it and checks the name (CLI and app alike).
"""

from tracevet.workqueue.claims import Claim, ClaimedByOther
from tracevet.workqueue.index import ACCEPTED, IN_REVIEW, REJECTED, SENT_BACK, TO_CLEAN, TO_REVIEW
from tracevet.workqueue.log import DECISIONS, LogEntry
from tracevet.workqueue.queue import (
    REVIEWER_ENV,
    DecisionOverride,
    LastDecision,
    Queue,
    RecordSummary,
    check_note,
    check_reviewer,
    default_reviewer,
    resolve_reviewer,
)
from tracevet.workqueue.runs import RunInfo
from tracevet.workqueue.states import DECIDED_STATES, REVIEW_STATES, STATES, RecordState
from tracevet.workqueue.settings import QueueSettings, new_settings
from tracevet.workqueue.verify import Problem

__all__ = [
    "ACCEPTED",
    "Claim",
    "ClaimedByOther",
    "DECIDED_STATES",
    "DECISIONS",
    "DecisionOverride",
    "IN_REVIEW",
    "LastDecision",
    "LogEntry",
    "Problem",
    "Queue",
    "QueueSettings",
    "REJECTED",
    "REVIEWER_ENV",
    "RecordState",
    "RecordSummary",
    "REVIEW_STATES",
    "RunInfo",
    "SENT_BACK",
    "STATES",
    "TO_CLEAN",
    "TO_REVIEW",
    "check_note",
    "check_reviewer",
    "default_reviewer",
    "resolve_reviewer",
    "new_settings",
]
