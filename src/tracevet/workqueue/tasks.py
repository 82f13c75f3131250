"""Per-record work of a batch, as a pure function that can run anywhere.

:func:`clean_record` takes a :class:`RecordTask` (everything needed to clean
one record: the original's bytes or a path to it, its checksum, the settings,
the flag limits, the client's software versions) and returns a
:class:`RecordResult` (the cleaned recording as the engine returned it, the
assessment, the worker's identity and software versions). It never writes
into the queue: only the process running ``tracevet clean`` does (see
:mod:`tracevet.workqueue.batch`), so the same function serves an in-process
batch, the local process pool and a Dask cluster
(:mod:`tracevet.workqueue.backend`).

This module imports nothing of Dask; it only asks ``distributed`` who the
worker is when ``distributed`` is already loaded (that is, on a Dask worker).
"""

from __future__ import annotations

import hashlib
import os
import platform
import shutil
import socket
import sys
import tempfile
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable

from tracevet.errors import TracevetError
from tracevet.text import inert

# Share of a record's progress given to cleaning (the rest: assessment and storing).
CLEANING_SHARE = 0.8

# Set in a local worker process (or in this process for a serial batch): where progress within a
# record goes, as sink(record_id, fraction). None on Dask workers: there progress is per record.
_SINK: Callable[[str, float], None] | None = None


def set_progress_sink(sink: Callable[[str, float], None] | None) -> None:
    """Send progress within each record cleaned in this process to ``sink(record_id, fraction)``."""
    global _SINK
    _SINK = sink


def software_versions() -> dict:
    """Versions of the software that decides a run's contents: tracevet and what its engine uses.

    Python is given as major.minor. A worker whose versions differ from the
    client's is refused (:func:`clean_record` and the client both check).
    """
    import numpy
    import pywt
    import scipy
    import yaml

    import tracevet

    return {
        "tracevet": tracevet.__version__,
        "python": ".".join(platform.python_version_tuple()[:2]),
        "numpy": numpy.__version__,
        "scipy": scipy.__version__,
        "PyWavelets": pywt.__version__,
        "PyYAML": yaml.__version__,
    }


def version_difference(mine: dict, theirs: dict) -> str | None:
    """A short text naming the first differing versions, or None when they agree."""
    for name in sorted(set(mine) | set(theirs)):
        if mine.get(name) != theirs.get(name):
            return f"{name} {inert(theirs.get(name), 30)} on the worker, {inert(mine.get(name), 30)} here"
    return None


def worker_identity() -> dict:
    """Who runs this task: host, process id and, on a Dask worker, its address and name."""
    identity = {"host": socket.gethostname(), "pid": os.getpid()}
    if "distributed" in sys.modules:  # never import Dask here; only ask it when it is already loaded
        try:
            worker = sys.modules["distributed"].get_worker()
            identity["address"] = str(worker.address)
            identity["name"] = str(worker.name)
        except (ValueError, AttributeError):
            pass
    return identity


@dataclass(frozen=True)
class RecordTask:
    """Everything a worker needs to clean and assess one record.

    Attributes
    ----------
    record_id : str
    token : str
        Batch token of this record (``BATCH/RECORD``): the single writer
        stores at most one run per token, so a retried task never leaves
        two runs.
    settings : dict
        Full cleaning settings (``CleaningSettings.to_dict()``).
    flag_limits : dict
        The queue's flag limits as written in ``queue.yaml`` ({} for the defaults).
    original_name : str
        ``original.EXT``; the extension selects the reader.
    original_sha256 : str
        Checksum of the original recorded when it was added; the worker
        checks the bytes it cleans against it.
    read_fs, kind, units
        How the original is read (as ``load_original`` reads it).
    versions : dict
        The client's :func:`software_versions`; a worker with others refuses the task.
    path : str or None
        Where the original is, on a filesystem the worker shares with the client.
    data : numpy.ndarray of uint8, bytes, or None
        The original's bytes (when no filesystem is shared); as a uint8 array
        they pickle out of band (protocol 5), so sending a task copies no bytes.
    """

    record_id: str
    token: str
    settings: dict
    flag_limits: dict
    original_name: str
    original_sha256: str
    read_fs: float | None
    kind: str | None
    units: str | None
    versions: dict
    path: str | None = None
    data: Any = None


@dataclass
class WorkerResult:
    """What a worker sends back for one record's task, whatever the work (cleaning, suggesting).

    Attributes
    ----------
    record_id, token : str
        As in the task.
    input_sha256 : str or None
        SHA-256 of the original bytes the worker read.
    worker : dict
        :func:`worker_identity`.
    versions : dict
        :func:`software_versions` of the worker.
    seconds : float
        Time spent on the worker.
    error : str or None
        One line when the work could not be done (bad data, refused worker).
    """

    record_id: str
    token: str
    input_sha256: str | None = None
    worker: dict = field(default_factory=dict)
    versions: dict = field(default_factory=dict)
    seconds: float = 0.0
    error: str | None = None

    @classmethod
    def on_this_worker(cls, task: RecordTask):
        """A result for ``task`` made here; ``error`` is set when this worker runs other software than the client."""
        result = cls(task.record_id, task.token, worker=worker_identity(), versions=software_versions())
        difference = version_difference(task.versions, result.versions)
        if difference is not None:
            who = inert(result.worker.get("address") or result.worker["host"], 60)
            result.error = f"refused: worker {who} runs other software ({difference})"
        return result


@dataclass
class RecordResult(WorkerResult):
    """What a worker sends back for one record it cleaned (with :class:`WorkerResult`'s fields).

    Attributes
    ----------
    cleaned : Recording or None
        The engine's output as it returned it (samples and metadata).
    assessment : Assessment or None
    settings_digest : str or None
        Digest of the settings the worker was asked to clean with (the task's).
    applied_settings : dict or None
        The settings it applied (``mains: auto`` resolved on the record); the run records these.
    mains_detection : dict or None
        What ``mains: auto`` found (``MainsDetection.to_dict()`` plus ``applied``).
    """

    cleaned: object = None
    assessment: object = None
    settings_digest: str | None = None
    applied_settings: dict | None = None
    mains_detection: dict | None = None


def progress_reporter(
    record_id: str, share: float = CLEANING_SHARE, final: bool = False
) -> Callable[[float], None] | None:
    """A progress callback ``report(fraction)`` for work on one record; None when no sink is set.

    It forwards ``share * fraction`` to the sink (:func:`set_progress_sink`)
    at most every 0.2 s, and with ``final`` always the last call (fraction 1).
    """
    sink = _SINK
    if sink is None:
        return None
    last = [0.0]

    def report(fraction: float) -> None:
        now = time.monotonic()
        if now - last[0] >= 0.2 or (final and fraction >= 1.0):
            last[0] = now
            try:
                sink(record_id, share * float(fraction))
            except Exception:  # progress is a nicety; never fail a record over it
                pass

    return report


def _scratch_dir(size: int) -> str | None:
    """``/dev/shm`` when it exists and has room for ``size`` bytes twice over, else None (the default)."""
    try:
        if os.access("/dev/shm", os.W_OK) and shutil.disk_usage("/dev/shm").free > 2 * size:
            return "/dev/shm"
    except OSError:
        pass
    return None


def read_original(task: RecordTask):
    """(Recording, SHA-256 of the bytes read) from the task's bytes or path; the Recording is None
    when the bytes do not match the original's checksum."""
    from tracevet.recording import read_recording

    if task.data is not None:
        digest = hashlib.sha256(task.data).hexdigest()
        if digest != task.original_sha256:
            return None, digest
        # The readers take a file name (the extension picks the format): a temporary file, in memory
        # (/dev/shm) when there is room, as creating and removing files on a busy disk costs more
        # than cleaning a short record.
        suffix = Path(task.original_name).suffix
        with tempfile.NamedTemporaryFile(prefix="tracevet-", suffix=suffix, dir=_scratch_dir(len(task.data))) as handle:
            handle.write(memoryview(task.data))
            handle.flush()
            recording = read_recording(handle.name, fs=task.read_fs, kind=task.kind, units=task.units)
        return recording, digest
    from tracevet.workqueue.checksums import sha256_file

    path = Path(str(task.path))
    digest = sha256_file(path)
    if digest != task.original_sha256:
        return None, digest
    return read_recording(path, fs=task.read_fs, kind=task.kind, units=task.units), digest


def clean_record(task: RecordTask) -> RecordResult:
    """Clean and assess one record; a pure function of the task (writes nothing into the queue).

    Returns a :class:`RecordResult` carrying the engine's cleaned recording
    and the assessment, or ``error`` (one line) for data that cannot be
    cleaned, an original whose bytes do not match their checksum, or a
    worker whose software versions differ from the client's (refused before
    any work). Unexpected exceptions (a shared filesystem that failed to
    read, an internal error) propagate, so the backend can retry the task.

    Other kinds of per-record work plug into the same batch loop the same
    way: a module-level function taking one picklable task and returning one
    picklable result, handed to :func:`tracevet.workqueue.backend.run_tasks`.
    """
    from tracevet.assessment import assess, limits_from_mapping
    from tracevet.cleaning import CleaningSettings, clean_with_report

    started = time.monotonic()
    result = RecordResult.on_this_worker(task)
    if result.error:
        return result
    try:
        original, digest = read_original(task)
        result.input_sha256 = digest
        if original is None:
            result.error = (
                "the original read on the worker does not match its checksum (changed, or not the queue's file)"
            )
            return result
        settings = CleaningSettings.from_dict(task.settings, source=f"{task.record_id}: settings")
        limits = limits_from_mapping(task.flag_limits, "flag_limits") if task.flag_limits else None
        result.cleaned, report = clean_with_report(original, settings, progress=progress_reporter(task.record_id))
        result.assessment = assess(original, result.cleaned, limits=limits)
        result.settings_digest = settings.digest()
        result.applied_settings = report.settings.to_dict()
        if report.mains is not None:
            result.mains_detection = dict(report.mains.to_dict(), applied=report.settings.mains)
    except TracevetError as exc:
        result.cleaned = None
        result.error = exc.one_line()
    except MemoryError:
        result.cleaned = None
        result.error = "not enough memory to clean this record"
    result.seconds = time.monotonic() - started
    return result
