"""Where a batch's per-record tasks run, and the one loop that drives them.

A backend runs picklable tasks through a module-level function and hands
back their results; :func:`run_tasks` is the loop every batch uses, whatever
the backend:

- :class:`InlineBackend`: in this process, one task after another (``--workers 1``);
- :class:`LocalPoolBackend`: ``concurrent.futures.ProcessPoolExecutor`` on this
  machine (the default; no service, no extra dependency);
- ``tracevet.workqueue.cluster.DaskBackend``: a Dask distributed scheduler
  (``--cluster ADDRESS``; needs ``pip install 'tracevet[cluster]'``; that module
  is imported only when a cluster is asked for).

The loop keeps at most ``max_in_flight`` tasks submitted (tasks are built
lazily from an iterator, so the originals of a 10,000-record archive are
never all in memory), waits for any to finish, passes each result (or the
error that ended it, after the backend's own retries) to ``on_result`` in
this process, and refills. Only ``on_result`` touches the queue: workers
never write into it.

Plugging in another kind of per-record work (for example suggestions):
write a module-level function ``work(task) -> result`` whose task and result
pickle (plain data, numpy arrays, dataclasses), build an iterator of tasks,
and call ``run_tasks(backend, work, tasks, on_result, max_in_flight)`` with
the backend :func:`tracevet.workqueue.batch.open_backend` gives; check and
store each result in ``on_result``. :mod:`tracevet.workqueue.batch` holds
the pieces both kinds of work use (``batch_lock``, ``BatchProgress``,
``record_task``, ``provenance_problem``, ``shape_problem``; results derive
from :class:`tracevet.workqueue.tasks.WorkerResult`): see
``batch.clean_waiting`` and ``suggested.suggest_flagged``.
"""

from __future__ import annotations

import multiprocessing
import queue as queue_module
from concurrent.futures import FIRST_COMPLETED, Future, ProcessPoolExecutor, wait
from concurrent.futures.process import BrokenProcessPool
from typing import Any, Callable, Iterable, Iterator

from tracevet.errors import TracevetError
from tracevet.text import inert
from tracevet.workqueue import tasks as tasks_mod


class BackendLost(TracevetError):
    """The backend can no longer run tasks (scheduler gone, process pool broken); one line."""


def describe_failure(exc: BaseException) -> str:
    """One line for a task that ended with an exception."""
    if isinstance(exc, TracevetError):
        return exc.one_line()
    text = str(exc).splitlines()[0] if str(exc) else ""
    return f"{type(exc).__name__}: {inert(text, 160)}" if text else type(exc).__name__


class InlineBackend:
    """Runs each task in this process when it is submitted (no parallelism)."""

    name = "this process"

    def __init__(self, partial: Callable[[str, float], None] | None = None):
        self._partial = partial

    def submit(self, function: Callable, task: Any) -> Future:
        """Run ``function(task)`` now; return a finished future."""
        future: Future = Future()
        tasks_mod.set_progress_sink(self._partial)
        try:
            future.set_result(function(task))
        except (KeyboardInterrupt, SystemExit):
            raise
        except BaseException as exc:
            future.set_exception(exc)
        finally:
            tasks_mod.set_progress_sink(None)
        return future

    def wait(self, handles: set, timeout: float) -> set:
        """Every handle is already done."""
        return set(handles)

    def result(self, handle: Future) -> Any:
        """The task's result (raises the task's exception)."""
        return handle.result()

    def retries(self, handles) -> dict:
        """No retries in this process."""
        return {}

    def close(self) -> None:
        """Nothing to release."""


def _init_pool_worker(channel) -> None:
    def send(record_id: str, fraction: float) -> None:
        try:
            channel.put_nowait((record_id, fraction))
        except Exception:  # progress is a nicety
            pass

    tasks_mod.set_progress_sink(send)


class LocalPoolBackend:
    """``ProcessPoolExecutor`` on this machine; progress within records comes back on a channel."""

    name = "local process pool"

    def __init__(self, workers: int, partial: Callable[[str, float], None] | None = None):
        context = multiprocessing.get_context()
        self._channel = context.Queue()
        self._partial = partial
        self._pool = ProcessPoolExecutor(
            max_workers=workers, mp_context=context, initializer=_init_pool_worker, initargs=(self._channel,)
        )

    def submit(self, function: Callable, task: Any) -> Future:
        """Send ``function(task)`` to a worker process."""
        try:
            return self._pool.submit(function, task)
        except BrokenProcessPool:
            raise BackendLost("a worker process of the local pool ended unexpectedly") from None

    def _drain(self) -> None:
        while True:
            try:
                record_id, fraction = self._channel.get_nowait()
            except queue_module.Empty:
                return
            except (OSError, ValueError, EOFError):
                return
            if self._partial is not None:
                self._partial(record_id, fraction)

    def wait(self, handles: set, timeout: float) -> set:
        """Wait until one handle is done or ``timeout`` passes; return those done."""
        done, _ = wait(handles, timeout=timeout, return_when=FIRST_COMPLETED)
        self._drain()
        return done

    def result(self, handle: Future) -> Any:
        """The task's result (raises the task's exception; BackendLost if the pool broke)."""
        try:
            return handle.result()
        except BrokenProcessPool:
            raise BackendLost("a worker process of the local pool ended unexpectedly") from None

    def retries(self, handles) -> dict:
        """The local pool does not retry."""
        return {}

    def close(self) -> None:
        """Stop the pool (tasks not started are cancelled)."""
        self._pool.shutdown(wait=True, cancel_futures=True)
        self._channel.close()


def run_tasks(
    backend,
    function: Callable,
    tasks: Iterable,
    on_result: Callable[[Any, Any, str | None, int], None],
    max_in_flight: int,
    on_wait: Callable[[], None] | None = None,
    keep: Callable[[Any], Any] | None = None,
) -> int:
    """Run ``function(task)`` for every task on ``backend``; return the number of retries seen.

    Parameters
    ----------
    backend
        :class:`InlineBackend`, :class:`LocalPoolBackend` or ``DaskBackend``.
    function : callable
        Module-level function of one task (it must pickle by reference).
    tasks : iterable
        Tasks, drawn lazily: at most ``max_in_flight`` are built and submitted
        before earlier ones finish (backpressure).
    on_result : callable(task, result, error, retries)
        Called in this process for each task as it finishes: ``result`` is
        the function's return value, or None with ``error`` (one line) when
        the task failed after the backend's retries; ``retries`` is how many
        extra attempts the backend made for it.
    max_in_flight : int
    on_wait : callable, optional
        Called after every wait (about four times a second), e.g. to flush.
    keep : callable, optional
        ``keep(task)`` is what the loop holds for ``on_result`` once the task
        is submitted (e.g. the task without the original's bytes, so they
        are not held here while the worker cleans).

    Raises
    ------
    BackendLost
        When the backend can no longer run tasks; results already handed to
        ``on_result`` stay handled.
    """
    source: Iterator = iter(tasks)
    in_flight: dict = {}
    retried = 0

    def fill() -> None:
        while len(in_flight) < max(1, max_in_flight):
            task = next(source, None)
            if task is None:
                return
            handle = backend.submit(function, task)
            in_flight[handle] = keep(task) if keep is not None else task
            del task

    fill()
    while in_flight:
        done = backend.wait(set(in_flight), timeout=0.25)
        counts = backend.retries(done) if done else {}
        for handle in done:
            task = in_flight.pop(handle)
            try:
                result, error = backend.result(handle), None
            except BackendLost:
                raise
            except Exception as exc:  # the task failed after the backend's retries; reported per record
                result, error = None, describe_failure(exc)
            extra = int(counts.get(handle, 0))
            retried += extra
            on_result(task, result, error, extra)
        if on_wait is not None:
            on_wait()
        fill()
    return retried
