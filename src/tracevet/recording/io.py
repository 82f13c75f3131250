"""Read and write recordings by file extension."""

from __future__ import annotations

import os
from dataclasses import replace
from pathlib import Path
from typing import Any

from tracevet.errors import InputError
from tracevet.recording.atomic import write_atomic
from tracevet.recording.csv_format import format_csv, read_csv
from tracevet.recording.edf_format import format_edf, read_edf
from tracevet.recording.model import KINDS, Recording, normalise_units
from tracevet.recording.numpy_format import format_npy, format_npz, read_npy, read_npz, write_npy, write_npz

_READERS = {".csv": read_csv, ".npy": read_npy, ".npz": read_npz, ".edf": read_edf}
_WRITERS = {".csv": format_csv, ".npy": format_npy, ".npz": format_npz, ".edf": format_edf}
# Formats written straight into the (temporary) file, without the whole file in memory first.
_STREAM_WRITERS = {".npy": write_npy, ".npz": write_npz}
SUPPORTED_READ = tuple(sorted(_READERS))
SUPPORTED_WRITE = tuple(sorted(_WRITERS))


def _suffix(path: Path, table: dict, verb: str) -> str:
    suffix = path.suffix.lower()
    if suffix not in table:
        raise InputError(
            str(path), f"cannot {verb} '{suffix or 'no extension'}' files (supported: {', '.join(sorted(table))})"
        )
    return suffix


def read_recording(
    path: str | os.PathLike,
    fs: float | None = None,
    kind: str | None = None,
    units: str | None = None,
) -> Recording:
    """Read a recording from ``.csv``, ``.npy``, ``.npz`` or ``.edf``.

    Parameters
    ----------
    path : path-like
        The file; its extension selects the format.
    fs : float, optional
        Sampling rate in Hz. Required for ``.npy``; for other formats it must
        agree with the rate the file carries.
    kind, units : str, optional
        Override the kind (``ecg``, ``mcg``, ``other``) and units the file carries.

    Raises
    ------
    InputError
        With a one-line message naming the file and the problem.
    """
    path = Path(path)
    suffix = _suffix(path, _READERS, "read")
    if fs is not None and (not isinstance(fs, (int, float)) or not fs > 0 or fs != fs or fs == float("inf")):
        raise InputError("--fs", f"sampling rate must be a positive number, got {fs!r}")
    if not path.exists():
        raise InputError(str(path), "no such file")
    if path.is_dir():
        raise InputError(str(path), "is a folder, not a recording file")
    recording = _READERS[suffix](path, fs)
    changes: dict[str, Any] = {}
    if kind is not None:
        if kind not in KINDS:
            raise InputError("--kind", f"must be one of {', '.join(KINDS)}, got {kind!r}")
        changes["kind"] = kind
    if units is not None:
        changes["units"] = normalise_units(units, "--units")
    return replace(recording, **changes) if changes else recording


def format_recording(recording: Recording, suffix: str) -> bytes:
    """Serialise ``recording`` in the format named by ``suffix`` (e.g. ``.npz``)."""
    suffix = suffix.lower()
    if suffix not in _WRITERS:
        raise InputError(suffix, f"cannot write this format (supported: {', '.join(SUPPORTED_WRITE)})")
    return _WRITERS[suffix](recording)


def write_recording(recording: Recording, path: str | os.PathLike) -> None:
    """Write ``recording`` atomically in the format of ``path``'s extension.

    ``.npy`` and ``.npz`` are written straight into a temporary file beside
    ``path`` (no second copy of a long record in memory); ``.csv`` and
    ``.edf`` are produced in memory first, so an error (for example a channel
    name CSV cannot hold) is raised before any file exists. In every case the
    temporary file is renamed over ``path`` only when complete, and removed if
    anything fails, so ``path`` is either the whole new file or untouched.
    """
    path = Path(path)
    suffix = _suffix(path, _WRITERS, "write")
    if path.is_dir():
        raise InputError(str(path), "is a folder, not a file name")
    if not path.parent.exists():
        raise InputError(str(path), "its folder does not exist")
    try:
        if suffix in _STREAM_WRITERS:
            write_atomic(path, lambda handle: _STREAM_WRITERS[suffix](recording, handle))
            return
        data = format_recording(recording, suffix)
        write_atomic(path, lambda handle: handle.write(data))
    except OSError as exc:
        raise InputError(str(path), f"cannot write ({exc.strerror or exc})") from None
