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
from contextlib import contextmanager
from dataclasses import dataclass, replace
from typing import Callable, Iterator

import numpy as np

from tracevet.errors import InputError, TracevetError
from tracevet.text import inert
from tracevet.workqueue.backend import BackendLost, InlineBackend, LocalPoolBackend, run_tasks
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


def record_task(
    queue,
    record_id: str,
    token: str,
    settings: dict,
    limits: dict,
    versions: dict,
    send_bytes: bool,
    meta: dict | None = None,
) -> RecordTask:
    """The task that lets a worker read one record's original: its bytes when ``send_bytes``, else its path.

    ``token`` is the batch's (the task's is ``TOKEN/RECORD``), ``settings`` the
    cleaning settings asked for, ``limits`` the queue's flag limits,
    ``versions`` this process's :func:`software_versions` and ``meta`` the
    record's metadata when already read.
    """
    meta = read_meta(queue.paths, record_id) if meta is None else meta
    path = original_path(queue.paths, record_id, meta)
    return RecordTask(
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
        data=np.frombuffer(path.read_bytes(), dtype=np.uint8) if send_bytes else None,
    )


def _tasks(queue, todo: list[tuple[str, dict]], token: str, versions: dict, send_bytes: bool) -> Iterator[RecordTask]:
    """Build each record's task when the loop asks for it (bytes read then, not before)."""
    limits = dict(queue.settings.flag_limits)
    for record_id, settings in todo:
        yield record_task(queue, record_id, token, settings, limits, versions, send_bytes)


def provenance_problem(result, task: RecordTask, versions: dict, verb: str = "cleaned") -> str | None:
    """Why a worker's result cannot be taken as made from ``task``'s original by this software, or None.

    Checks the worker's software versions against ``versions`` and the
    checksum of the bytes it read against the original's; ``verb`` says what
    the worker did with those bytes, in the refusal.
    """
    difference = version_difference(versions, result.versions or {})
    if difference is not None:
        return f"refused: result from a worker with other software ({difference})"
    if result.input_sha256 != task.original_sha256:
        return f"refused: the worker {verb} bytes that do not match the original's checksum"
    return None


def shape_problem(cleaned, meta: dict) -> str | None:
    """A refusal when the cleaned recording does not have the original's shape (from its ``meta``), else None."""
    samples = getattr(cleaned, "samples", None)
    if samples is None or samples.shape != (meta.get("n_samples"), meta.get("n_channels")):
        return "refused: the cleaned recording does not have the original's shape"
    return None


def check_result(task: RecordTask, result, versions: dict, expected_digest: str, meta: dict) -> str | None:
    """Why a worker's result for ``task`` cannot be stored, or None when it can."""
    if not isinstance(result, RecordResult):
        return "the worker sent back something that is not a record result"
    if result.record_id != task.record_id or result.token != task.token:
        return "the worker sent back the result of another task"
    if result.error:
        return result.error
    problem = provenance_problem(result, task, versions)
    if problem is not None:
        return problem
    if result.settings_digest != expected_digest:
        return "refused: the worker cleaned with other settings than those asked for"
    problem = shape_problem(result.cleaned, meta)
    if problem is not None:
        return problem
    if result.assessment is None or not hasattr(result.assessment, "save"):
        return "refused: the worker sent back no assessment"
    return None


def worker_extra(result) -> dict:
    """What a stored run records of the worker that made it: identity, software, seconds."""
    return {"worker": result.worker, "software": result.versions, "worker_seconds": round(result.seconds, 3)}


def store_failure(exc: TracevetError | OSError) -> str:
    """One line for a run that could not be stored (bad data met while storing, or the disk)."""
    if isinstance(exc, TracevetError):
        return exc.one_line()
    return f"could not store the run ({inert(exc, 160)})"


@contextmanager
def batch_lock(queue, workers: int) -> Iterator[None]:
    """Hold the queue's batch lock for the ``with`` block: one batch (cleaning or suggesting) at a time.

    Raises InputError, before anything is done, for fewer than one worker
    or when another batch runs on this queue.
    """
    if workers < 1:
        raise InputError("--workers", "must be at least 1")
    lock_fd = try_hold(queue.paths.clean_lock)
    if lock_fd is None:
        raise InputError(str(queue.root), "another 'tracevet clean' is already running on this queue")
    try:
        yield
    finally:
        os.close(lock_fd)


class BatchProgress:
    """A batch's outcomes so far and the parts done of the records in flight.

    Reports ``progress(done, total, outcome)`` as :func:`clean_waiting`
    describes it: ``done`` counts finished records plus the fractions of
    those being cleaned.
    """

    def __init__(self, progress: Callable | None, total: int):
        self.progress = progress
        self.total = total
        self.outcomes: list = []
        self.partial: dict[str, float] = {}  # record id -> fraction done, for records in flight

    def part(self, record_id: str, fraction: float) -> None:
        """A record in flight is ``fraction`` done (the backend's ``partial`` callback)."""
        self.partial[record_id] = fraction
        self.report()

    def finish(self, record_id: str, outcome) -> None:
        """A record is done with ``outcome`` (reported by the next :meth:`report`)."""
        self.partial.pop(record_id, None)
        self.outcomes.append(outcome)

    def report(self, outcome=None) -> None:
        """Call ``progress`` (if any) with where the batch stands."""
        if self.progress:
            self.progress(len(self.outcomes) + sum(self.partial.values()), self.total, outcome)


def backend_traits(backend, workers: int, total: int) -> tuple[bool, bool, int]:
    """``(remote, send_bytes, slots)`` of a backend: whether tasks leave this machine, whether they
    carry the originals' bytes (remote without a shared filesystem), and how many run at once."""
    remote = bool(getattr(backend, "remote", False))
    send_bytes = remote and not getattr(backend, "shared_filesystem", False)
    slots = int(getattr(backend, "slots", None) or min(workers, total))
    return remote, send_bytes, slots


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
    with batch_lock(queue, workers):
        own_backend = None
        try:
            sweep_work(queue.paths)
            base = queue.settings.cleaning_settings(overrides).to_dict()
            queue.settings.limits()  # a bad flag_limits section stops the batch here, once, not per record
            todo = [(record_id, requested or base) for record_id, requested in waiting(queue)]
            total = len(todo)
            tally = BatchProgress(progress, total)
            if total == 0:
                tally.report()
                return tally.outcomes
            if backend is None:
                own_backend = backend = open_backend(min(workers, total), cluster, tally.part)
            tally.report()
            versions = software_versions()
            token = uuid.uuid4().hex
            _remote, send_bytes, slots = backend_traits(backend, workers, total)
            digests = _digests(todo)
            pending_index: list[str] = []
            last_flush = time.monotonic()

            def flush(force: bool = False) -> None:
                nonlocal last_flush
                if pending_index and (force or time.monotonic() - last_flush > _FLUSH_SECONDS):
                    queue.refresh_index(pending_index)
                    pending_index.clear()
                    last_flush = time.monotonic()

            def on_result(task: RecordTask, result, error: str | None, retries: int) -> None:
                worker = _worker_text(result)
                outcome = _store(queue, task, result, error, versions, digests[task.record_id], worker, retries)
                tally.finish(task.record_id, outcome)
                if outcome.run_id:
                    pending_index.append(outcome.record_id)
                flush()
                tally.report(outcome)

            try:
                run_tasks(
                    backend,
                    clean_record,
                    _tasks(queue, todo, token, versions, send_bytes),
                    on_result,
                    max_in_flight=slots * IN_FLIGHT_PER_WORKER if slots > 1 else 1,
                    on_wait=flush,
                    keep=lambda task: replace(task, data=None),
                )
            except BackendLost as exc:
                stored = sum(1 for o in tally.outcomes if o.run_id)
                raise BackendLost(
                    f"{exc.one_line()}; the {stored} run(s) stored before stay, run 'tracevet clean' again to carry on"
                ) from None
            finally:
                flush(force=True)
            return tally.outcomes
        finally:
            if own_backend is not None:
                own_backend.close()


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
        extra = worker_extra(result)
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
    except (TracevetError, OSError) as exc:
        return CleanOutcome(task.record_id, error=store_failure(exc), retries=retries, worker=worker)


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
