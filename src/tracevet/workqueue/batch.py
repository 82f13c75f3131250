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

import multiprocessing
import os
import queue as queue_module
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


# Set in each worker process: where to send (record id, fraction) while a record is cleaned.
_PROGRESS_QUEUE = None
_CLEANING_SHARE = 0.8  # share of a record's progress given to cleaning (the rest: assessment, writing)


def _init_worker(progress_queue) -> None:
    global _PROGRESS_QUEUE
    _PROGRESS_QUEUE = progress_queue


def _reporter(record_id: str, sink: Callable[[str, float], None] | None) -> Callable[[float], None] | None:
    """A progress callback for the engine that forwards at most every 0.2 s."""
    if sink is None:
        return None
    last = [0.0]

    def report(fraction: float) -> None:
        now = time.monotonic()
        if now - last[0] >= 0.2:
            last[0] = now
            sink(record_id, _CLEANING_SHARE * float(fraction))

    return report


def _queue_sink(record_id: str, fraction: float) -> None:
    try:
        _PROGRESS_QUEUE.put_nowait((record_id, fraction))
    except Exception:  # progress is a nicety; never fail a record over it
        pass


def clean_one(
    root: str, record_id: str, settings: dict, sink: Callable[[str, float], None] | None = None
) -> CleanOutcome:
    """Clean and assess one record of the queue at ``root`` (runs in a worker process).

    ``sink(record_id, fraction)`` receives progress within the record; in a
    worker process started by :func:`clean_waiting` it defaults to the
    batch's progress channel.
    """
    from tracevet.assessment import assess
    from tracevet.cleaning import CleaningSettings, clean
    from tracevet.workqueue.queue import Queue

    if sink is None and _PROGRESS_QUEUE is not None:
        sink = _queue_sink
    try:
        queue = Queue.open(root)
        chosen = CleaningSettings.from_dict(settings, source=f"{record_id}: settings")
        original = queue.load_original(record_id)
        cleaned = clean(original, chosen, progress=_reporter(record_id, sink))
        assessment = assess(original, cleaned, limits=queue.settings.limits())
        run_id = queue.store_run(record_id, cleaned, assessment, chosen, update_index=False)
        return CleanOutcome(record_id, run_id, assessment.worst_severity, len(assessment.flags))
    except TracevetError as exc:
        return CleanOutcome(record_id, error=exc.one_line())
    except MemoryError:
        return CleanOutcome(record_id, error="not enough memory to clean this record")
    except Exception as exc:  # one bad record must not stop the batch; reported per record
        return CleanOutcome(record_id, error=f"internal error ({type(exc).__name__}: {inert(exc, 160)})")


def _drain(channel, part: Callable[[str, float], None]) -> None:
    """Pass on every progress message waiting in ``channel``."""
    while True:
        try:
            record_id, fraction = channel.get_nowait()
        except queue_module.Empty:
            return
        except (OSError, ValueError, EOFError):
            return
        part(record_id, fraction)


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
        Called with ``(0, total, None)`` first, with ``(done, total, outcome)``
        after every record, and in between with a fractional ``done``
        (records finished plus the parts of those being cleaned) and
        ``outcome`` None.

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
        queue.settings.limits()  # a bad flag_limits section stops the batch here, once, not per record
        todo = [(record_id, requested or base) for record_id, requested in waiting(queue)]
        total = len(todo)
        if progress:
            progress(0, total, None)
        outcomes: list[CleanOutcome] = []
        if total == 0:
            return outcomes
        pending_index: list[str] = []
        partial: dict[str, float] = {}  # record id -> fraction done, for records being cleaned
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
                progress(len(outcomes) + sum(partial.values()), total, outcome)

        def part(record_id: str, fraction: float) -> None:
            partial[record_id] = fraction
            if progress:
                progress(len(outcomes) + sum(partial.values()), total, None)

        try:
            if workers == 1 or total == 1:
                for record_id, settings in todo:
                    outcome = clean_one(str(queue.root), record_id, settings, sink=part)
                    partial.pop(record_id, None)
                    finished(outcome)
            else:
                context = multiprocessing.get_context()
                channel = context.Queue()
                with ProcessPoolExecutor(
                    max_workers=min(workers, total), mp_context=context, initializer=_init_worker, initargs=(channel,)
                ) as pool:
                    futures: dict[Future, str] = {pool.submit(clean_one, str(queue.root), r, s): r for r, s in todo}
                    waiting_on = set(futures)
                    try:
                        while waiting_on:
                            done, waiting_on = wait(waiting_on, timeout=0.25, return_when=FIRST_COMPLETED)
                            _drain(channel, part)
                            for future in done:
                                partial.pop(futures[future], None)
                                finished(future.result())
                    except BaseException:
                        for future in waiting_on:
                            future.cancel()
                        raise
                channel.close()
        finally:
            if pending_index:
                queue.refresh_index(pending_index)
        return outcomes
    finally:
        os.close(lock_fd)
