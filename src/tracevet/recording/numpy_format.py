"""NumPy recordings: ``.npy`` (samples only) and ``.npz`` (samples and metadata).

``.npz`` holds the array ``signal`` (1-D, or 2-D samples x channels) and the
scalar ``fs``; optionally ``channels`` (strings), ``units``, ``kind`` and
``start_time`` (ISO 8601 string). Files are always opened with
``allow_pickle=False``: an object array is refused, never unpickled.
"""

from __future__ import annotations

import io
import zipfile
from typing import Any
from datetime import datetime
from pathlib import Path

import numpy as np

from tracevet.errors import InputError
from tracevet.recording.model import Recording


def _as_signal(array: np.ndarray, source: str) -> np.ndarray:
    if array.dtype.kind not in "iuf":
        raise InputError(source, f"signal must be numeric, got dtype {array.dtype}")
    if array.ndim not in (1, 2):
        raise InputError(source, f"signal must be 1-D or 2-D (samples x channels), got {array.ndim}-D")
    if array.ndim == 2 and array.shape[1] > array.shape[0]:
        raise InputError(
            source,
            f"signal has shape {array.shape}: more channels than samples; expected samples x channels (transpose it)",
        )
    return array


def _default_names(count: int) -> tuple[str, ...]:
    return tuple(f"ch{i + 1}" for i in range(count))


def _check_magic(path: Path, magic: bytes, what: str) -> None:
    """Refuse a file that does not start with ``magic`` before numpy guesses it is a pickle."""
    try:
        with open(path, "rb") as handle:
            start = handle.read(len(magic))
    except OSError as exc:
        raise InputError(str(path), f"cannot read file ({exc.strerror or exc})") from None
    if not start:
        raise InputError(str(path), f"empty file, not a {what}")
    if start != magic:
        raise InputError(str(path), f"not a {what}: it does not start like one")


def read_npy(path: Path, fs: float | None) -> Recording:
    """Read a ``.npy`` recording; the sampling rate must come from ``fs``."""
    source = str(path)
    if fs is None:
        raise InputError(source, ".npy files carry no sampling rate: pass --fs HZ")
    _check_magic(path, b"\x93NUMPY", "NumPy .npy file")
    try:
        array = np.load(path, allow_pickle=False)
    except (OSError, ValueError, EOFError, MemoryError) as exc:  # MemoryError: a header declaring a huge shape
        raise InputError(source, f"not a readable .npy file ({_short(exc)})") from None
    array = _as_signal(array, source)
    count = 1 if array.ndim == 1 else array.shape[1]
    return Recording(samples=array, fs=fs, channels=_default_names(count), source=source)


def _scalar_text(archive, key: str, source: str) -> str | None:
    if key not in archive.files:
        return None
    value = archive[key]
    if value.dtype.kind not in "US" or value.size != 1:
        raise InputError(source, f"array {key!r} must be a single string")
    return str(value.reshape(()))


def read_npz(path: Path, fs: float | None) -> Recording:
    """Read a ``.npz`` recording (arrays ``signal`` and ``fs``, optional metadata)."""
    source = str(path)
    _check_magic(path, b"PK", "NumPy .npz file (zip archive)")
    try:
        archive = np.load(path, allow_pickle=False)
    except (OSError, ValueError, EOFError, zipfile.BadZipFile) as exc:
        raise InputError(source, f"not a readable .npz file ({_short(exc)})") from None
    with archive:
        try:
            if "signal" not in archive.files:
                raise InputError(source, f"no array 'signal' (has: {', '.join(sorted(archive.files)) or 'none'})")
            signal = _as_signal(archive["signal"], source)
            rate = fs
            if "fs" in archive.files:
                stored = archive["fs"]
                if stored.size != 1 or stored.dtype.kind not in "iuf":
                    raise InputError(source, "array 'fs' must be a single number")
                stored_rate = float(stored.reshape(()))
                if fs is not None and abs(fs - stored_rate) > 1e-3 * stored_rate:
                    raise InputError(source, f"file says fs = {stored_rate:g} Hz but --fs says {fs:g} Hz")
                rate = stored_rate
            if rate is None:
                raise InputError(source, "no array 'fs' and no --fs given")
            count = 1 if signal.ndim == 1 else signal.shape[1]
            names = _default_names(count)
            if "channels" in archive.files:
                stored_names = archive["channels"]
                if stored_names.dtype.kind not in "US":
                    raise InputError(source, "array 'channels' must hold strings")
                names = tuple(str(n) for n in np.atleast_1d(stored_names))
            start_text = _scalar_text(archive, "start_time", source)
            start = None
            if start_text:
                try:
                    start = datetime.fromisoformat(start_text)
                except ValueError:
                    raise InputError(source, f"start_time {start_text[:40]!r} is not an ISO 8601 time") from None
            return Recording(
                samples=signal,
                fs=rate,
                channels=names,
                units=_scalar_text(archive, "units", source),
                kind=(_scalar_text(archive, "kind", source) or "other").lower(),
                start_time=start,
                source=source,
            )
        except (ValueError, zipfile.BadZipFile, EOFError, OSError, MemoryError) as exc:
            raise InputError(source, f"damaged .npz file ({_short(exc)})") from None


def write_npy(recording: Recording, handle) -> None:
    """Write the samples as ``.npy`` to an open binary file (1-D for a single channel)."""
    samples = recording.samples[:, 0] if recording.n_channels == 1 else recording.samples
    np.save(handle, np.ascontiguousarray(samples), allow_pickle=False)


def write_npz(recording: Recording, handle) -> None:
    """Write samples and metadata as ``.npz`` to an open, seekable binary file."""
    arrays: dict[str, Any] = {
        "signal": recording.samples[:, 0] if recording.n_channels == 1 else recording.samples,
        "fs": np.float64(recording.fs),
        "channels": np.array(recording.channels, dtype=str),
        "kind": np.array(recording.kind),
    }
    if recording.units:
        arrays["units"] = np.array(recording.units)
    if recording.start_time:
        arrays["start_time"] = np.array(recording.start_time.isoformat())
    np.savez(handle, **arrays)


def format_npy(recording: Recording) -> bytes:
    """Serialise the samples as ``.npy`` bytes (see :func:`write_npy`)."""
    buffer = io.BytesIO()
    write_npy(recording, buffer)
    return buffer.getvalue()


def format_npz(recording: Recording) -> bytes:
    """Serialise samples and metadata as ``.npz`` bytes (see :func:`write_npz`)."""
    buffer = io.BytesIO()
    write_npz(recording, buffer)
    return buffer.getvalue()


def _short(exc: BaseException) -> str:
    text = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
    return text[:120]
