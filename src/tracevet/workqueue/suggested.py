"""Runs made with suggested settings: ``tracevet clean QUEUE --suggest``.

For each record whose newest run has flags, :func:`suggest_one` searches the
candidate settings (:func:`tracevet.suggestion.suggest`, starting from the
queue's settings, the newest run's settings evaluated alongside, windows on
its flagged stretches) and, when the suggestion differs from the newest run's
settings and has no more severe flags than it, adds the suggestion's run
beside the others, marked ``suggested`` in its ``run.json`` (with the digest
of the candidate set). The earlier runs stay; the reviewer decides, and the
decision log records, for a decision on a suggested run, that it was
suggested and the candidate set's digest.

:func:`suggest_one` is a per-record task with the same shape as
:func:`tracevet.workqueue.batch.clean_one` (queue root, record id, progress
sink) so that a batch backend can run it like a cleaning.
"""

from __future__ import annotations

import time
from dataclasses import dataclass
from typing import Callable

from tracevet.errors import TracevetError
from tracevet.text import inert
from tracevet.workqueue.index import TO_REVIEW


@dataclass(frozen=True)
class SuggestOutcome:
    """What the suggestion did for one record: a new run, a reason to skip, or an error."""

    record_id: str
    run_id: str | None = None
    worst_severity: str | None = None
    n_flags: int = 0
    skipped: str | None = None
    error: str | None = None


def wants_suggestion(item) -> bool:
    """True for a record ready for review whose newest run has flags and no live claim by anyone."""
    if item.state != TO_REVIEW or not item.n_flags or item.current_run_id is None:
        return False
    return item.holder is None or bool(item.holder_stale)


def _severity_counts(flags) -> tuple[bool, bool, int, int]:
    fails = sum(1 for f in flags if (f.get("severity") if isinstance(f, dict) else f.severity) == "fail")
    warns = sum(1 for f in flags if (f.get("severity") if isinstance(f, dict) else f.severity) == "warn")
    return (fails > 0, warns > 0, fails, warns)


def suggest_one(
    root: str, record_id: str, sink: Callable[[str, float], None] | None = None, threads: int = 1, cancel=None
) -> SuggestOutcome:
    """Suggest settings for one record of the queue at ``root`` and add the run (see the module text).

    ``sink(record_id, fraction)`` receives progress. Never raises for one
    record's trouble: the outcome carries the error.
    """
    from tracevet.cleaning import CleaningSettings
    from tracevet.suggestion import NO_BEATS, NoBeats, flagged_stretches, suggest
    from tracevet.workqueue.queue import Queue
    from tracevet.workqueue.runs import load_assessment

    last = [0.0]

    def progress(fraction: float, _message: str) -> None:
        now = time.monotonic()
        if sink is not None and (now - last[0] >= 0.2 or fraction >= 1.0):
            last[0] = now
            sink(record_id, float(fraction))

    try:
        queue = Queue.open(root)
        runs = queue.runs(record_id)
        if not runs:
            return SuggestOutcome(record_id, skipped="not cleaned yet")
        newest = runs[-1]
        if newest.suggestion is not None:
            return SuggestOutcome(record_id, skipped=f"{newest.run_id} is already a suggested run")
        if not newest.n_flags:
            return SuggestOutcome(record_id, skipped=f"{newest.run_id} has no flags")
        current = CleaningSettings.from_dict(newest.settings) if newest.settings else None
        original = queue.load_original(record_id)
        try:
            stretches = flagged_stretches(load_assessment(queue.paths, record_id, newest.run_id), original.duration_s)
        except TracevetError:
            stretches = []
        try:
            result = suggest(
                original,
                base=queue.settings.cleaning_settings(),
                current=current,
                limits=queue.settings.limits(),
                flagged_stretches_s=stretches,
                progress=progress,
                cancel=cancel,
                threads=threads,
            )
        except NoBeats:
            return SuggestOutcome(record_id, skipped=NO_BEATS)
        if newest.settings_digest == result.best.settings.digest():
            return SuggestOutcome(record_id, skipped=f"the settings of {newest.run_id} are already the best candidate")
        if _severity_counts(result.best.flags) > _severity_counts(newest.flags):
            return SuggestOutcome(
                record_id, skipped=f"no candidate did better than {newest.run_id} ({result.best.flags_text()})"
            )
        run_id = queue.store_run(
            record_id, result.cleaned, result.assessment, result.best.settings, update_index=False,
            suggestion=result.summary(),
        )
        return SuggestOutcome(record_id, run_id, result.assessment.worst_severity, len(result.assessment.flags))
    except TracevetError as exc:
        return SuggestOutcome(record_id, error=exc.one_line())
    except MemoryError:
        return SuggestOutcome(record_id, error="not enough memory to suggest settings for this record")
    except Exception as exc:  # one bad record must not stop the batch; reported per record
        return SuggestOutcome(record_id, error=f"internal error ({type(exc).__name__}: {inert(exc, 160)})")


def suggest_flagged(
    queue,
    workers: int = 2,
    progress: Callable[[float, int, SuggestOutcome | None], None] | None = None,
) -> list[SuggestOutcome]:
    """Run :func:`suggest_one` for every record that :func:`wants_suggestion`; return the outcomes.

    Records are taken one after another, each search using ``workers``
    threads. ``progress(done, total, outcome)`` as in
    :func:`tracevet.workqueue.batch.clean_waiting`. The index is refreshed
    for every record that got a run.
    """
    todo = [item.id for item in queue.records() if wants_suggestion(item)]
    total = len(todo)
    if progress:
        progress(0, total, None)
    outcomes: list[SuggestOutcome] = []
    for record_id in todo:
        def part(rid: str, fraction: float) -> None:
            if progress:
                progress(len(outcomes) + fraction, total, None)

        outcome = suggest_one(str(queue.root), record_id, sink=part, threads=workers)
        outcomes.append(outcome)
        if outcome.run_id:
            queue.refresh_index([record_id])
        if progress:
            progress(len(outcomes), total, outcome)
    return outcomes
