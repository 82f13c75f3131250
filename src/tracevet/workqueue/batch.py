"""``tracevet clean``: clean and assess every record that waits, on several processes or a cluster.

Records waiting are those ``to-clean`` (never cleaned) and ``sent-back``
(a reviewer asked for a re-run; the settings they asked for, if any, are
used, otherwise the queue's). Each record is cleaned by
:func:`tracevet.workqueue.tasks.clean_record` on a backend
(:mod:`tracevet.workqueue.backend`: this process, the local process pool by
default, or a Dask cluster), which sends back the cleaned samples and the
assessment. Only this process writes into the queue (one writer): it checks
each result (batch token, worker software versions, checksum of the original
the worker read, settings digest, shape) and stores it as a run, written
under ``.work/`` and renamed into place only when whole, so an interrupted
batch leaves either a complete run or nothing; running ``tracevet clean``
again carries on with the records still waiting. A run is stored at most
once per batch token (batch and record), so a retried task never leaves two
runs. Scratch folders of processes that died are swept first. Only one batch
runs on a queue at a time; the decision log is never written by a batch.
"""

from __future__ import annotations

import os
import time
import uuid
from dataclasses import dataclass
from typing import Callable, Iterator

from tracevet.errors import InputError
from tracevet.text import inert
from tracevet.workqueue.backend import InlineBackend, LocalPoolBackend, run_tasks
from tracevet.workqueue.ids import run_number
from tracevet.workqueue.index import SENT_BACK, TO_CLEAN
from tracevet.workqueue.locking import try_hold
from tracevet.workqueue.records import original_path, read_meta, sweep_work
from tracevet.workqueue.runs import list_runs
from tracevet.workqueue.tasks import RecordResult, RecordTask, clean_record, software_versions, version_difference

_FLUSH_SECONDS = 1.0


@dataclass(frozen=True)
class CleanOutcome:
    """What happened to one record in a batch: a new run, or an error."""

    record_id: str
    run_id: str | None = None
    worst_severity: str | None = None
    n_flags: int = 0
    error: str | None = None
    retries: int = 0
    worker: str | None = None


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


# Records in flight per worker, beyond the one being cleaned: enough to keep workers busy while
# the writer stores results, few enough that a large archive never sits in memory.
IN_FLIGHT_PER_WORKER = 2


def open_backend(workers: int = 2, cluster=None, partial: Callable[[str, float], None] | None = None):
    """The backend a batch runs on: a Dask cluster when ``cluster`` is given, else local.

    ``cluster`` is a :class:`tracevet.workqueue.cluster.ClusterSettings` (or
    None); ``workers`` is the local pool's size (1: this process).
    Raises InputError (one line) for a malformed address, an unreachable
    scheduler, or Dask not installed.
    """
    if cluster is not None:
        from tracevet.workqueue.cluster import DaskBackend

        return DaskBackend(cluster)
    if workers < 1:
        raise InputError("--workers", "must be at least 1")
    if workers == 1:
        return InlineBackend(partial)
    return LocalPoolBackend(workers, partial)


def _tasks(queue, todo: list[tuple[str, dict]], token: str, versions: dict, send_bytes: bool) -> Iterator[RecordTask]:
    """Build each record's task when the loop asks for it (bytes read then, not before)."""
    limits = dict(queue.settings.flag_limits)
    for record_id, settings in todo:
        meta = read_meta(queue.paths, record_id)
        path = original_path(queue.paths, record_id, meta)
        yield RecordTask(
            record_id=record_id,
            token=f"{token}/{record_id}",
            settings=settings,
            flag_limits=limits,
            original_name=path.name,
            original_sha256=str(meta.get("original_sha256")),
            read_fs=meta.get("read_fs"),
            kind=meta.get("kind"),
            units=meta.get("units"),
            versions=versions,
            path=None if send_bytes else str(path),
            data=path.read_bytes() if send_bytes else None,
        )


def check_result(task: RecordTask, result, versions: dict, expected_digest: str, meta: dict) -> str | None:
    """Why a worker's result for ``task`` cannot be stored, or None when it can."""
    if not isinstance(result, RecordResult):
        return "the worker sent back something that is not a record result"
    if result.record_id != task.record_id or result.token != task.token:
        return "the worker sent back the result of another task"
    if result.error:
        return result.error
    difference = version_difference(versions, result.versions or {})
    if difference is not None:
        return f"refused: result from a worker with other software ({difference})"
    if result.input_sha256 != task.original_sha256:
        return "refused: the worker cleaned bytes that do not match the original's checksum"
    if result.settings_digest != expected_digest:
        return "refused: the worker cleaned with other settings than those asked for"
    cleaned = result.cleaned
    samples = getattr(cleaned, "samples", None)
    if samples is None or samples.shape != (meta.get("n_samples"), meta.get("n_channels")):
        return "refused: the cleaned recording does not have the original's shape"
    if result.assessment is None or not hasattr(result.assessment, "save"):
        return "refused: the worker sent back no assessment"
    return None


def clean_waiting(
    queue,
    workers: int = 2,
    overrides: list[str] | None = None,
    progress: Callable[[float, int, CleanOutcome | None], None] | None = None,
    cluster=None,
    backend=None,
) -> list[CleanOutcome]:
    """Clean every waiting record; return one outcome per record.

    Parameters
    ----------
    queue : Queue
    workers : int
        Local worker processes (1 cleans in this process); unused with a cluster.
    overrides : list of str, optional
        ``key=value`` changes to the queue's cleaning settings (not applied to
        re-runs that asked for their own settings).
    progress : callable(done, total, outcome), optional
        Called with ``(0, total, None)`` first, with ``(done, total, outcome)``
        after every record (``outcome.retries``: extra attempts it took), and
        in between with a fractional ``done`` (records finished plus the parts
        of those being cleaned, local pool only) and ``outcome`` None.
    cluster : ClusterSettings, optional
        Run on this Dask cluster (see :mod:`tracevet.workqueue.cluster`).
    backend : optional
        An already opened backend (closed by the caller); overrides
        ``workers`` and ``cluster``.

    Raises
    ------
    InputError
        When another batch is running on this queue, the settings are
        invalid, or the cluster cannot be used (nothing written then).
    BackendLost
        When the scheduler is lost mid-batch; the runs already stored stay.
    """
    if workers < 1:
        raise InputError("--workers", "must be at least 1")
    lock_fd = try_hold(queue.paths.clean_lock)
    if lock_fd is None:
        raise InputError(str(queue.root), "another 'tracevet clean' is already running on this queue")
    own_backend = None
    try:
        sweep_work(queue.paths)
        base = queue.settings.cleaning_settings(overrides).to_dict()
        queue.settings.limits()  # a bad flag_limits section stops the batch here, once, not per record
        todo = [(record_id, requested or base) for record_id, requested in waiting(queue)]
        total = len(todo)
        outcomes: list[CleanOutcome] = []
        if total == 0:
            if progress:
                progress(0, 0, None)
            return outcomes
        pending_index: list[str] = []
        partial: dict[str, float] = {}  # record id -> fraction done, for records being cleaned
        last_flush = time.monotonic()

        def part(record_id: str, fraction: float) -> None:
            partial[record_id] = fraction
            if progress:
                progress(len(outcomes) + sum(partial.values()), total, None)

        if backend is None:
            own_backend = backend = open_backend(min(workers, total), cluster, part)
        if progress:
            progress(0, total, None)
        versions = software_versions()
        token = uuid.uuid4().hex
        remote = bool(getattr(backend, "remote", False))
        send_bytes = remote and not getattr(backend, "shared_filesystem", False)
        slots = int(getattr(backend, "slots", None) or min(workers, total))
        digests = _digests(todo)

        def flush(force: bool = False) -> None:
            nonlocal last_flush
            if pending_index and (force or time.monotonic() - last_flush > _FLUSH_SECONDS):
                queue.refresh_index(pending_index)
                pending_index.clear()
                last_flush = time.monotonic()

        def on_result(task: RecordTask, result, error: str | None, retries: int) -> None:
            partial.pop(task.record_id, None)
            worker = _worker_text(result)
            outcome = _store(queue, task, result, error, versions, digests[task.record_id], worker, retries)
            outcomes.append(outcome)
            if outcome.run_id:
                pending_index.append(outcome.record_id)
            flush()
            if progress:
                progress(len(outcomes) + sum(partial.values()), total, outcome)

        try:
            run_tasks(
                backend,
                clean_record,
                _tasks(queue, todo, token, versions, send_bytes),
                on_result,
                max_in_flight=slots * IN_FLIGHT_PER_WORKER if slots > 1 else 1,
                on_wait=flush,
            )
        finally:
            flush(force=True)
        return outcomes
    finally:
        try:
            if own_backend is not None:
                own_backend.close()
        finally:
            os.close(lock_fd)


def _digests(todo: list[tuple[str, dict]]) -> dict[str, str]:
    from tracevet.cleaning import CleaningSettings

    return {r: CleaningSettings.from_dict(s, source=f"{r}: settings").digest() for r, s in todo}


def _worker_text(result) -> str | None:
    worker = getattr(result, "worker", None) or {}
    return worker.get("address") or (f"{worker.get('host')}:{worker.get('pid')}" if worker else None)


def _store(
    queue, task: RecordTask, result, error: str | None, versions: dict, digest: str, worker, retries: int
) -> CleanOutcome:
    """Check a worker's result and store it as a run (this process is the queue's only writer)."""
    from tracevet.cleaning import CleaningSettings
    from tracevet.errors import TracevetError

    if error is not None:
        return CleanOutcome(task.record_id, error=error, retries=retries, worker=worker)
    try:
        meta = read_meta(queue.paths, task.record_id)
        problem = check_result(task, result, versions, digest, meta)
        if problem is not None:
            return CleanOutcome(task.record_id, error=problem, retries=retries, worker=worker)
        # The run records the settings the worker applied (mains auto resolved on the record).
        applied = getattr(result, "applied_settings", None) or task.settings
        settings = CleaningSettings.from_dict(applied, source=f"{task.record_id}: settings")
        extra = {"worker": result.worker, "software": result.versions, "worker_seconds": round(result.seconds, 3)}
        if getattr(result, "mains_detection", None):
            extra["mains_detection"] = result.mains_detection
        run_id = queue.store_run(
            task.record_id,
            result.cleaned,
            result.assessment,
            settings,
            update_index=False,
            batch_token=task.token,
            extra=extra,
        )
        assessment = result.assessment
        severity, n_flags = assessment.worst_severity, len(assessment.flags)
        return CleanOutcome(task.record_id, run_id, severity, n_flags, retries=retries, worker=worker)
    except TracevetError as exc:
        return CleanOutcome(task.record_id, error=exc.one_line(), retries=retries, worker=worker)
    except OSError as exc:
        problem = f"could not store the run ({inert(exc, 160)})"
        return CleanOutcome(task.record_id, error=problem, retries=retries, worker=worker)


def clean_one(root: str, record_id: str, settings: dict) -> CleanOutcome:
    """Clean, assess and store one record of the queue at ``root`` in this process.

    For scripts that fill a queue from several processes of their own (the
    queue benchmark); ``tracevet clean`` uses :func:`clean_waiting`.
    """
    from tracevet.workqueue.queue import Queue

    queue = Queue.open(root)
    versions = software_versions()
    [task] = _tasks(queue, [(record_id, settings)], uuid.uuid4().hex, versions, send_bytes=False)
    try:
        result, error = clean_record(task), None
    except Exception as exc:  # reported like a failed task of a batch
        from tracevet.workqueue.backend import describe_failure

        result, error = None, describe_failure(exc)
    digest = _digests([(record_id, settings)])[record_id]
    return _store(queue, task, result, error, versions, digest, _worker_text(result), 0)
