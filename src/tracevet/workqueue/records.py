"""The record store: one folder per record, holding the original byte for byte.

``records/RECORD/record.json`` says where the record came from (the name
as given, kept verbatim and only displayed inert), when and by whom it was
added, the original's file name, size and SHA-256, and its metadata (rate,
channels, kind, units, duration). The original is copied unchanged and
made read-only (mode 0444), so its checksum is that of the file that was
added. A record folder is assembled under ``.work/`` and renamed into
``records/`` only when complete.
"""

from __future__ import annotations

import json
import os
import shutil
import socket
import uuid
from contextlib import suppress
from dataclasses import dataclass
from pathlib import Path

from tracevet.errors import InputError
from tracevet.recording import Recording, read_recording
from tracevet.recording.atomic import fsync_dir
from tracevet.workqueue.checksums import sha256_file
from tracevet.workqueue.claims import process_alive
from tracevet.workqueue.layout import RECORD_META, RUNS_DIR, QueuePaths
from tracevet.workqueue.settings import utc_now_text

READ_ONLY = 0o444


@dataclass
class StagedRecord:
    """A record folder assembled under ``.work/``, not yet in the queue."""

    folder: Path
    source_name: str
    meta: dict


def work_folder(paths: QueuePaths, purpose: str) -> Path:
    """A fresh scratch folder under ``.work/`` named after host, process and purpose."""
    paths.work.mkdir(exist_ok=True)
    folder = paths.work / f"{socket.gethostname()}-{os.getpid()}-{purpose}-{uuid.uuid4().hex[:8]}"
    folder.mkdir()
    return folder


def sweep_work(paths: QueuePaths) -> int:
    """Remove scratch folders left by processes of this host that have ended.

    Returns how many were removed. Folders of live processes or of other
    hosts are left alone.
    """
    removed = 0
    try:
        names = os.listdir(paths.work)
    except FileNotFoundError:
        return 0
    host = socket.gethostname()
    for name in names:
        # host names may contain '-': the pid is the part right after the host name
        if not name.startswith(host + "-"):
            continue
        rest = name[len(host) + 1 :].split("-")
        if not rest or not rest[0].isdigit():
            continue
        if process_alive(int(rest[0]), None):
            continue
        _remove_tree(paths.work / name)
        removed += 1
    return removed


def _remove_tree(folder: Path) -> None:
    """Remove a folder tree, including read-only files in it."""
    def make_writable(function, path, _info):
        with suppress(OSError):
            os.chmod(path, 0o700 if os.path.isdir(path) else 0o600)
            function(path)

    shutil.rmtree(folder, onerror=make_writable)


def copy_verified(source: Path, target: Path) -> str:
    """Copy ``source`` to ``target`` byte for byte, fsync, and return the SHA-256.

    The checksum is computed on the source before and on the copy after;
    if they differ (the file changed while it was copied) InputError is raised.
    """
    before = sha256_file(source)
    with open(source, "rb") as src, open(target, "wb") as dst:
        shutil.copyfileobj(src, dst, 1 << 20)
        dst.flush()
        os.fsync(dst.fileno())
    after = sha256_file(target)
    if before != after:
        raise InputError(str(source), "file changed while it was being copied into the queue; try again")
    return after


def describe_recording(recording: Recording) -> dict:
    """The metadata of a recording as stored in ``record.json``."""
    meta = recording.describe()
    meta["n_channels"] = recording.n_channels
    return meta


def stage_original(
    paths: QueuePaths,
    source: Path,
    recording: Recording,
    added_by: str,
    origin: str,
) -> StagedRecord:
    """Copy an already-read original into a new scratch record folder.

    ``recording`` is what :func:`read_recording` made of ``source`` with
    the options given; its metadata go into ``record.json`` (written when
    the record gets its id, see :func:`commit_staged`).
    """
    folder = work_folder(paths, "add")
    suffix = source.suffix.lower()
    original_name = f"original{suffix}"
    target = folder / original_name
    checksum = copy_verified(source, target)
    os.chmod(target, READ_ONLY)
    (folder / RUNS_DIR).mkdir()
    meta = {
        "id": None,
        "source_name": source.name,
        "source_path": str(source),
        "added": utc_now_text(),
        "added_by": added_by,
        "host": socket.gethostname(),
        "origin": origin,
        "original": original_name,
        "original_bytes": target.stat().st_size,
        "original_sha256": checksum,
        "read_fs": recording.fs if suffix == ".npy" else None,
    }
    meta.update(describe_recording(recording))
    return StagedRecord(folder, source.name, meta)


def write_durable(path: Path, data, mode: int | None = None) -> None:
    """Write a new file inside a scratch folder and fsync it.

    ``data`` is the bytes, or a callable that writes them into the open
    binary file (so a long recording is streamed, not held twice in memory).
    No temporary name is needed there: the whole folder becomes visible at
    once when it is renamed into place, after every file in it is on disk.
    """
    fd = os.open(str(path), os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o666)
    with os.fdopen(fd, "wb") as handle:
        if callable(data):
            data(handle)
        else:
            handle.write(data)
        handle.flush()
        os.fsync(handle.fileno())
    if mode is not None:
        os.chmod(path, mode)


def commit_staged(paths: QueuePaths, staged: StagedRecord, record_id: str, sync: bool = True) -> None:
    """Give a staged record its id and rename it into ``records/``; caller holds the lock.

    With ``sync`` false the caller fsyncs ``records/`` once after a batch of renames.
    """
    staged.meta["id"] = record_id
    write_durable(staged.folder / RECORD_META, (json.dumps(staged.meta, indent=2) + "\n").encode("ascii"))
    paths.records.mkdir(exist_ok=True)
    os.rename(staged.folder, paths.record_dir(record_id))
    if sync:
        fsync_dir(paths.records)


def discard_staged(staged: StagedRecord) -> None:
    """Remove a staged record that will not be added."""
    _remove_tree(staged.folder)


def read_metadata(paths: QueuePaths, path: Path, what: str, missing: InputError) -> dict:
    """A metadata file of the queue holding one JSON object (``what``: ``record``, ``run``).

    Raises ``missing`` when the file does not exist, and an InputError naming
    the file when it cannot be read or holds something else.
    """
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise missing from None
    except (OSError, ValueError) as exc:
        raise InputError(paths.relative(path), f"damaged {what} metadata ({str(exc)[:80]})") from None
    if not isinstance(data, dict):
        raise InputError(paths.relative(path), f"damaged {what} metadata (not a JSON object)")
    return data


def read_meta(paths: QueuePaths, record_id: str) -> dict:
    """``record.json`` of a record; InputError if the record does not exist or is damaged."""
    missing = InputError(record_id, "no such record in this queue (see 'tracevet status')")
    return read_metadata(paths, paths.record_meta(record_id), "record", missing)


def list_record_ids(paths: QueuePaths) -> list[str]:
    """Ids of the record folders present (sorted)."""
    from tracevet.workqueue.ids import is_record_id

    try:
        names = os.listdir(paths.records)
    except FileNotFoundError:
        return []
    return sorted(n for n in names if is_record_id(n))


def original_path(paths: QueuePaths, record_id: str, meta: dict) -> Path:
    """Path of the original file of a record."""
    name = str(meta.get("original", ""))
    if not name.startswith("original.") or "/" in name or "\\" in name:
        raise InputError(paths.relative(paths.record_meta(record_id)), "damaged record metadata (bad original name)")
    return paths.record_dir(record_id) / name


def load_original(paths: QueuePaths, record_id: str, meta: dict | None = None) -> Recording:
    """Read the original recording of a record, with the metadata it was added with."""
    meta = meta or read_meta(paths, record_id)
    path = original_path(paths, record_id, meta)
    return read_recording(path, fs=meta.get("read_fs"), kind=meta.get("kind"), units=meta.get("units"))
