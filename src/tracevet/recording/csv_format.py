"""CSV recordings: a header row of channel names, optional first column ``time``.

Optional comment lines before the header carry metadata, one ``# key: value``
per line (``fs``, ``units``, ``kind``, ``start_time``); tracevet writes them and
reads them back. The sampling rate comes, in order of precedence, from the
``time`` column, from ``--fs``, or from a ``# fs:`` line; when two of them are
given they must agree within 0.1 %.
"""

from __future__ import annotations

import io
import re
from datetime import datetime
from pathlib import Path

import numpy as np

from tracevet.errors import InputError
from tracevet.recording.model import Recording

_META_LINE = re.compile(r"^#\s*([A-Za-z_]+)\s*:\s*(.*?)\s*$")
_MAX_HEADER_BYTES = 1 << 20


def _split_header(text_head: str) -> tuple[dict, list[str], int]:
    """Return (metadata, header fields, number of lines before the data)."""
    meta: dict[str, str] = {}
    lines = text_head.splitlines()
    for index, line in enumerate(lines):
        stripped = line.strip()
        if not stripped:
            continue
        if stripped.startswith("#"):
            match = _META_LINE.match(stripped)
            if match:
                meta[match.group(1).lower()] = match.group(2)
            continue
        return meta, [field.strip().strip('"') for field in line.split(",")], index + 1
    return meta, [], len(lines)


def _uniform_rate(times: np.ndarray, source: str) -> float:
    """Infer the sampling rate from a time column and check its spacing."""
    if times.size < 2:
        raise InputError(source, "need at least two rows to infer the sampling rate from the time column")
    steps = np.diff(times)
    if not (steps > 0).all():
        row = int(np.argmax(steps <= 0)) + 2
        raise InputError(source, f"time column does not increase at data row {row}")
    # Least-squares line through (index, time): rounding of printed times averages out.
    index = np.arange(times.size, dtype=np.float64)
    index_c = index - index.mean()
    period = float(np.dot(index_c, times - times.mean()) / np.dot(index_c, index_c))
    intercept = times.mean() - period * index.mean()
    # Allow rounding of printed times: every time within a quarter sample period of the line.
    deviation = np.abs(times - (intercept + period * index))
    worst = int(np.argmax(deviation))
    if deviation[worst] > 0.25 * period:
        raise InputError(
            source,
            f"time column is not uniformly spaced (data row {worst + 1} is {deviation[worst]:.6g} s off a uniform "
            "grid)",
        )
    return 1.0 / period


def read_csv(path: Path, fs: float | None = None) -> Recording:
    """Read a CSV recording (see module docstring for the format)."""
    source = str(path)
    try:
        raw = path.read_bytes()
    except OSError as exc:
        raise InputError(source, f"cannot read file ({exc.strerror or exc})") from None
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError:
        raise InputError(source, "not a UTF-8 text file") from None
    meta, header, skip = _split_header(text[:_MAX_HEADER_BYTES])
    if not header or header == [""]:
        raise InputError(source, "empty file: expected a header row of channel names")
    if any(not name for name in header):
        raise InputError(source, "header row has an empty column name")
    body = "\n".join(text.splitlines()[skip:])
    if not body.strip():
        raise InputError(source, "header only: no data rows")
    try:
        data = np.loadtxt(io.StringIO(body), delimiter=",", dtype=np.float64, ndmin=2, comments="#")
    except ValueError as exc:
        message = _file_line_message(str(exc), skip)
        raise InputError(source, f"malformed data: {message}") from None
    if data.shape[0] == 0:
        raise InputError(source, "header only: no data rows")
    if data.shape[1] != len(header):
        raise InputError(source, f"header has {len(header)} columns but data rows have {data.shape[1]}")
    if not np.isfinite(data).all():
        row, col = np.argwhere(~np.isfinite(data))[0]
        raise InputError(source, f"non-finite value (NaN or inf) at line {int(row) + skip + 1}, column {header[col]!r}")
    names = header
    rate_from_meta = float(meta["fs"]) if "fs" in meta and _is_number(meta["fs"]) else None
    if names[0].lower() in {"time", "time_s", "t"}:
        inferred = _uniform_rate(data[:, 0], source)
        for other, label in ((fs, "--fs"), (rate_from_meta, "the '# fs:' line")):
            if other is not None and abs(other - inferred) > 1e-3 * inferred:
                raise InputError(source, f"time column gives {inferred:.6g} Hz but {label} says {other:g} Hz")
        rate = float(np.round(inferred, 6))
        data, names = data[:, 1:], names[1:]
        if not names:
            raise InputError(source, "only a time column, no signal channels")
    else:
        given = fs if fs is not None else rate_from_meta
        if given is None:
            raise InputError(source, "no time column and no sampling rate: pass --fs HZ")
        rate = given
    start = None
    if meta.get("start_time"):
        try:
            start = datetime.fromisoformat(meta["start_time"])
        except ValueError:
            raise InputError(source, f"start_time {meta['start_time'][:40]!r} is not an ISO 8601 time") from None
    return Recording(
        samples=data,
        fs=rate,
        channels=tuple(names),
        units=meta.get("units") or None,
        kind=(meta.get("kind") or "other").lower(),
        start_time=start,
        source=source,
    )


def _file_line_message(numpy_message: str, skip: int) -> str:
    """Reword a ``numpy.loadtxt`` error to name the line of the file.

    numpy counts data rows from 0 in conversion errors ("could not convert
    ... at row 1, column 2") and from 1 in column-count errors ("the number of
    columns changed from 2 to 1 at row 2"); ``skip`` lines precede the data.
    Its advice about ``usecols`` (an argument of numpy, not of tracevet) is dropped.
    """
    message = numpy_message.splitlines()[0] if numpy_message else "unreadable data"
    message = message.split("; use `usecols`")[0].rstrip(".")
    base = skip + 1 if "could not convert" in message else skip
    return re.sub(r"at row (\d+)", lambda m: f"at line {int(m.group(1)) + base}", message)


def _is_number(text: str) -> bool:
    try:
        float(text)
    except ValueError:
        return False
    return True


def format_csv(recording: Recording) -> bytes:
    """Serialise a recording as CSV with metadata comments and a time column."""
    out = io.StringIO()
    out.write(f"# fs: {recording.fs!r}\n")
    if recording.units:
        out.write(f"# units: {recording.units}\n")
    out.write(f"# kind: {recording.kind}\n")
    if recording.start_time:
        out.write(f"# start_time: {recording.start_time.isoformat()}\n")
    for name in recording.channels:
        if "," in name or "\n" in name or "\r" in name:
            raise InputError(recording.source, f"channel name {name[:30]!r} cannot be written to CSV")
    out.write(",".join(["time", *recording.channels]) + "\n")
    times = np.arange(recording.n_samples, dtype=np.float64) / recording.fs
    table = np.column_stack([times, recording.samples.astype(np.float64)])
    # 10 significant digits: exact for float32 data, sub-nanosecond for times.
    np.savetxt(out, table, delimiter=",", fmt="%.10g")
    return out.getvalue().encode("utf-8")
