"""``tracevet clean``: clean and assess every record that waits, on several processes.

Records waiting are those ``to-clean`` (never cleaned) and ``sent-back``
(a reviewer asked for a re-run; the settings they asked for, if any, are
used, otherwise the queue's). Each record is cleaned in a worker process
(``concurrent.futures.ProcessPoolExecutor``), its run written under
``.work/`` and renamed into place only when whole, so an interrupted batch
leaves either a complete run or nothing; running ``tracevet clean`` again
carries on with the records still waiting. Scratch folders of processes
that died are swept first. Only one batch runs on a queue at a time.
"""

from __future__ import annotations

import os
import time
from concurrent.futures import FIRST_COMPLETED, Future, ProcessPoolExecutor, wait
from dataclasses import dataclass
from typing import Callable

from tracevet.errors import InputError, TracevetError
from tracevet.text import inert
from tracevet.workqueue.ids import run_number
from tracevet.workqueue.index import SENT_BACK, TO_CLEAN
from tracevet.workqueue.locking import try_hold
from tracevet.workqueue.records import sweep_work
from tracevet.workqueue.runs import list_runs

_FLUSH_SECONDS = 1.0


@dataclass(frozen=True)
class CleanOutcome:
    """What happened to one record in a batch: a new run, or an error."""

    record_id: str
    run_id: str | None = None
    worst_severity: str | None = None
    n_flags: int = 0
    error: str | None = None


def waiting(queue) -> list[tuple[str, dict | None]]:
    """``(record id, requested settings or None)`` for every record waiting to be cleaned.

    A record whose index entry is stale (a run finished but the index was
    not updated, after a crash) is refreshed instead of being cleaned again.
    """
    todo: list[tuple[str, dict | None]] = []
    stale: list[str] = []
    for item in queue.records():
        if item.state == TO_CLEAN:
            if list_runs(queue.paths, item.id):
                stale.append(item.id)
            else:
                todo.append((item.id, None))
        elif item.state == SENT_BACK:  # a held record shows as in-review and is left alone
            runs = list_runs(queue.paths, item.id)
            newest_then = item.last_decision.get("newest_run")
            if runs and newest_then and run_number(runs[-1]) > run_number(newest_then):
                stale.append(item.id)
            else:
                todo.append((item.id, item.last_decision.get("requested_settings")))
    if stale:
        queue.refresh_index(stale)
    return todo


def clean_one(root: str, record_id: str, settings: dict) -> CleanOutcome:
    """Clean and assess one record of the queue at ``root`` (runs in a worker process)."""
    from tracevet.assessment import assess
    from tracevet.cleaning import CleaningSettings, clean
    from tracevet.workqueue.queue import Queue

    try:
        queue = Queue.open(root)
        chosen = CleaningSettings.from_dict(settings, source=f"{record_id}: settings")
        original = queue.load_original(record_id)
        cleaned = clean(original, chosen)
        assessment = assess(original, cleaned, limits=queue.settings.limits())
        run_id = queue.store_run(record_id, cleaned, assessment, chosen, update_index=False)
        return CleanOutcome(record_id, run_id, assessment.worst_severity, len(assessment.flags))
    except TracevetError as exc:
        return CleanOutcome(record_id, error=exc.one_line())
    except MemoryError:
        return CleanOutcome(record_id, error="not enough memory to clean this record")
    except Exception as exc:  # one bad record must not stop the batch; reported per record
        return CleanOutcome(record_id, error=f"internal error ({type(exc).__name__}: {inert(exc, 160)})")


def clean_waiting(
    queue,
    workers: int = 2,
    overrides: list[str] | None = None,
    progress: Callable[[int, int, CleanOutcome | None], None] | None = None,
) -> list[CleanOutcome]:
    """Clean every waiting record; return one outcome per record.

    Parameters
    ----------
    queue : Queue
    workers : int
        Worker processes (1 cleans in this process).
    overrides : list of str, optional
        ``key=value`` changes to the queue's cleaning settings (not applied to
        re-runs that asked for their own settings).
    progress : callable(done, total, outcome), optional
        Called once with ``(0, total, None)`` and after every record.

    Raises
    ------
    InputError
        When another batch is running on this queue, or the settings are invalid.
    """
    if workers < 1:
        raise InputError("--workers", "must be at least 1")
    lock_fd = try_hold(queue.paths.clean_lock)
    if lock_fd is None:
        raise InputError(str(queue.root), "another 'tracevet clean' is already running on this queue")

    try:
        sweep_work(queue.paths)
        base = queue.settings.cleaning_settings(overrides).to_dict()
        todo = [(record_id, requested or base) for record_id, requested in waiting(queue)]
        total = len(todo)
        if progress:
            progress(0, total, None)
        outcomes: list[CleanOutcome] = []
        if total == 0:
            return outcomes
        pending_index: list[str] = []
        last_flush = time.monotonic()

        def finished(outcome: CleanOutcome) -> None:
            nonlocal last_flush
            outcomes.append(outcome)
            if outcome.run_id:
                pending_index.append(outcome.record_id)
            if pending_index and time.monotonic() - last_flush > _FLUSH_SECONDS:
                queue.refresh_index(pending_index)
                pending_index.clear()
                last_flush = time.monotonic()
            if progress:
                progress(len(outcomes), total, outcome)

        try:
            if workers == 1 or total == 1:
                for record_id, settings in todo:
                    finished(clean_one(str(queue.root), record_id, settings))
            else:
                with ProcessPoolExecutor(max_workers=min(workers, total)) as pool:
                    futures: set[Future] = {pool.submit(clean_one, str(queue.root), r, s) for r, s in todo}
                    try:
                        while futures:
                            done, futures = wait(futures, return_when=FIRST_COMPLETED)
                            for future in done:
                                finished(future.result())
                    except BaseException:
                        for future in futures:
                            future.cancel()
                        raise
        finally:
            if pending_index:
                queue.refresh_index(pending_index)
        return outcomes
    finally:
        os.close(lock_fd)
