"""Runs made with suggested settings: ``tracevet clean QUEUE --suggest``.

For each record ready for review whose newest run has flags (and that no one
holds), :func:`suggest_record` searches the candidate settings
(:func:`tracevet.suggestion.suggest`: starting from the queue's settings, the
newest run's settings evaluated alongside, windows on its flagged stretches).
When the suggestion's settings differ from the newest run's and its flags are
no more severe, the suggestion's run is added beside the others, marked in
its ``run.json`` as ``suggested`` (the candidate set's digest, how many
candidates, where searched, the estimated noise removed, the reason). The
earlier runs stay; the reviewer decides, and the decision log records, for a
decision on a suggested run, ``suggested: true`` and the candidate set's
digest.

The per-record work is a picklable task run by a batch backend
(:mod:`tracevet.workqueue.backend`: this process, the local process pool, or
a Dask cluster), like a cleaning (:func:`tracevet.workqueue.tasks.clean_record`):
workers never write into the queue, this process checks each result and
stores it.
"""

from __future__ import annotations

import time
import uuid
from dataclasses import dataclass
from typing import Any, Callable

from tracevet.errors import TracevetError
from tracevet.workqueue.backend import run_tasks
from tracevet.workqueue.batch import (
    BatchProgress,
    backend_traits,
    batch_lock,
    open_backend,
    provenance_problem,
    record_task,
    shape_problem,
    store_failure,
    worker_extra,
)
from tracevet.workqueue.index import TO_REVIEW
from tracevet.workqueue.records import read_meta
from tracevet.workqueue.tasks import RecordTask, WorkerResult, progress_reporter, read_original, software_versions


@dataclass(frozen=True)
class SuggestOutcome:
    """What the suggestion did for one record: a new run, a reason to skip, or an error."""

    record_id: str
    run_id: str | None = None
    worst_severity: str | None = None
    n_flags: int = 0
    skipped: str | None = None
    error: str | None = None


@dataclass(frozen=True)
class SuggestTask:
    """One record's suggestion: how to read its original (``record``, whose ``settings`` are the
    queue's, where the search starts) and its newest run (settings, flags, flagged stretches)."""

    record: RecordTask
    newest_run: str
    newest_settings: dict | None
    newest_flags: tuple
    stretches_s: tuple
    threads: int = 1


@dataclass
class SuggestResult(WorkerResult):
    """What a worker sends back: the suggestion's cleaned record and assessment, or why not
    (with :class:`tracevet.workqueue.tasks.WorkerResult`'s fields)."""

    cleaned: Any = None
    assessment: Any = None
    settings: dict | None = None
    report: Any = None
    summary: dict | None = None
    skipped: str | None = None


def wants_suggestion(item) -> bool:
    """True for a record ready for review whose newest run has flags and no live claim by anyone."""
    if item.state != TO_REVIEW or not item.n_flags or item.current_run_id is None:
        return False
    return item.holder is None or bool(item.holder_stale)


def severity_counts(flags) -> tuple[bool, bool, int, int]:
    """(any fail, any warn, fails, warns) of flags given as dicts or Flag objects; smaller is better."""

    def severity(f):
        return f.get("severity") if isinstance(f, dict) else getattr(f, "severity", None)

    fails = sum(1 for f in flags if severity(f) == "fail")
    warns = sum(1 for f in flags if severity(f) == "warn")
    return (fails > 0, warns > 0, fails, warns)


def suggest_record(task: SuggestTask) -> SuggestResult:
    """Search suggested settings for one record; a pure function of the task (writes nothing into the queue).

    ``skipped`` says why no run should be added (no beats, the newest run's
    settings are already the best, no candidate does better than it).
    """
    from tracevet.assessment import limits_from_mapping
    from tracevet.cleaning import CleaningSettings
    from tracevet.suggestion import NO_BEATS, NoBeats, suggest

    record = task.record
    started = time.monotonic()
    result = SuggestResult.on_this_worker(record)
    if result.error:
        return result
    report = progress_reporter(record.record_id, share=1.0, final=True)
    progress = (lambda fraction, _message: report(fraction)) if report is not None else None

    try:
        original, digest = read_original(record)
        result.input_sha256 = digest
        if original is None:
            result.error = "the original read on the worker does not match its checksum"
            return result
        base = CleaningSettings.from_dict(record.settings, source=f"{record.record_id}: settings")
        current = CleaningSettings.from_dict(task.newest_settings) if task.newest_settings else None
        limits = limits_from_mapping(record.flag_limits, "flag_limits") if record.flag_limits else None
        try:
            found = suggest(
                original, base=base, current=current, limits=limits, flagged_stretches_s=task.stretches_s,
                progress=progress, threads=task.threads,
            )
        except NoBeats:
            result.skipped = NO_BEATS
            return result
        best = found.report.settings  # as applied (mains: auto resolved), as every run records them
        if current is not None and current.digest() in (best.digest(), found.best.settings.digest()):
            result.skipped = f"the settings of {task.newest_run} are already the best candidate"
        elif severity_counts(found.best.flags) > severity_counts(task.newest_flags):
            result.skipped = f"no candidate did better than {task.newest_run} ({found.best.flags_text()})"
        else:
            result.cleaned, result.assessment, result.report = found.cleaned, found.assessment, found.report
            result.settings, result.summary = best.to_dict(), found.summary()
    except TracevetError as exc:
        result.error = exc.one_line()
    except MemoryError:
        result.error = "not enough memory to suggest settings for this record"
    result.seconds = time.monotonic() - started
    return result


def _tasks(queue, todo, token: str, versions: dict, send_bytes: bool, threads: int):
    from tracevet.suggestion import flagged_stretches
    from tracevet.workqueue.runs import load_assessment

    base = queue.settings.cleaning_settings().to_dict()
    limits = dict(queue.settings.flag_limits)
    for record_id in todo:
        meta = read_meta(queue.paths, record_id)
        newest = queue.runs(record_id)[-1]
        try:
            assessment = load_assessment(queue.paths, record_id, newest.run_id)
            stretches = flagged_stretches(assessment, meta.get("duration_s") or 0.0)
        except TracevetError:
            stretches = []
        record = record_task(queue, record_id, token, base, limits, versions, send_bytes, meta)
        yield SuggestTask(record, newest.run_id, newest.settings, tuple(newest.flags), tuple(stretches), threads)


def _store(queue, task: SuggestTask, result, error: str | None, versions: dict) -> SuggestOutcome:
    """Check a worker's result and store the suggested run (this process is the queue's only writer)."""
    from tracevet.cleaning import CleaningSettings

    record_id = task.record.record_id
    if error is not None:
        return SuggestOutcome(record_id, error=error)
    if not isinstance(result, SuggestResult) or result.token != task.record.token:
        return SuggestOutcome(record_id, error="the worker sent back the result of another task")
    if result.error:
        return SuggestOutcome(record_id, error=result.error)
    if result.skipped:
        return SuggestOutcome(record_id, skipped=result.skipped)
    problem = provenance_problem(result, task.record, versions, verb="used")
    if problem is not None:
        return SuggestOutcome(record_id, error=problem)
    try:
        problem = shape_problem(result.cleaned, read_meta(queue.paths, record_id))
        if problem is not None:
            return SuggestOutcome(record_id, error=problem)
        runs = queue.runs(record_id)
        if runs and runs[-1].run_id != task.newest_run:
            return SuggestOutcome(record_id, skipped=f"a newer run ({runs[-1].run_id}) appeared meanwhile")
        settings = CleaningSettings.from_dict(result.settings or {}, source=f"{record_id}: suggested settings")
        extra = {"suggested": result.summary, **worker_extra(result)}
        run_id = queue.store_run(
            record_id, result.cleaned, result.assessment, settings, update_index=False,
            batch_token=task.record.token, extra=extra, report=result.report,
        )
        return SuggestOutcome(record_id, run_id, result.assessment.worst_severity, len(result.assessment.flags))
    except (TracevetError, OSError) as exc:
        return SuggestOutcome(record_id, error=store_failure(exc))


def suggest_flagged(
    queue,
    workers: int = 2,
    progress: Callable[[float, int, SuggestOutcome | None], None] | None = None,
    cluster=None,
) -> list[SuggestOutcome]:
    """Add a suggested run for every record that :func:`wants_suggestion`; return the outcomes.

    Runs on the backend :func:`tracevet.workqueue.batch.open_backend` gives
    (``workers`` local processes, or ``cluster``). ``progress(done, total,
    outcome)`` as in :func:`tracevet.workqueue.batch.clean_waiting`.

    Raises
    ------
    InputError
        When a ``tracevet clean`` is running on this queue.
    """
    with batch_lock(queue, workers):
        backend = None
        try:
            todo = [item.id for item in queue.records() if wants_suggestion(item)]
            total = len(todo)
            tally = BatchProgress(progress, total)
            tally.report()
            if total == 0:
                return tally.outcomes
            backend = open_backend(min(workers, total), cluster, tally.part)
            remote, send_bytes, slots = backend_traits(backend, workers, total)
            threads = 2 if slots == 1 and not remote else 1  # in this process: both cores for one search
            versions = software_versions()
            token = "suggest-" + uuid.uuid4().hex

            def on_result(task: SuggestTask, result, error: str | None, retries: int) -> None:
                outcome = _store(queue, task, result, error, versions)
                tally.finish(task.record.record_id, outcome)
                if outcome.run_id:
                    queue.refresh_index([outcome.record_id])
                tally.report(outcome)

            run_tasks(
                backend,
                suggest_record,
                _tasks(queue, todo, token, versions, send_bytes, threads),
                on_result,
                max_in_flight=max(1, slots),
            )
            return tally.outcomes
        finally:
            if backend is not None:
                backend.close()
