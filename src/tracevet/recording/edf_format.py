"""EDF and EDF+ recordings (European Data Format).

The format is defined by Kemp B, Värri A, Rosa AC, Nielsen KD, Gade J.
*A simple format for exchange of digitized polygraphic recordings.*
Electroencephalogr Clin Neurophysiol 1992;82:391-393, and extended to EDF+
by Kemp B, Olivan J. *European data format 'plus' (EDF+).* Clin Neurophysiol
2003;114:1755-1761.

A 256-byte ASCII header, then 256 bytes per signal (label, transducer,
physical dimension, physical min/max, digital min/max, prefiltering, samples
per data record, reserved), then data records of little-endian 16-bit
integers. Physical value = (digital - dmin) * (pmax - pmin) / (dmax - dmin) + pmin.

Reading: the ordinary signals that share the sampling rate of the first
ordinary signal are loaded; ``EDF Annotations`` signals are skipped; EDF+D
(discontinuous) files are refused because a gap cannot be represented in a
uniformly sampled recording. Writing: plain EDF (the 44-byte reserved field
left blank), with records of whole samples. EDF+ would require an ``EDF
Annotations`` signal in every file (Kemp & Olivan 2003); tracevet
has no annotations to store, and every EDF+ reader also reads plain EDF.
"""

from __future__ import annotations

import io
import math
from datetime import datetime
from pathlib import Path

import numpy as np

from tracevet.errors import InputError
from tracevet.recording.model import Recording

_FIELDS = (  # (name, width) of the per-signal header fields, in file order
    ("label", 16),
    ("transducer", 80),
    ("physical_dimension", 8),
    ("physical_min", 8),
    ("physical_max", 8),
    ("digital_min", 8),
    ("digital_max", 8),
    ("prefiltering", 80),
    ("samples_per_record", 8),
    ("reserved", 32),
)


def _ascii(raw: bytes, source: str, what: str) -> str:
    try:
        return raw.decode("ascii").strip()
    except UnicodeDecodeError:
        raise InputError(source, f"not a valid EDF file (non-ASCII {what})") from None


def _number(text: str, source: str, what: str, integer: bool = False) -> float:
    try:
        value = int(text) if integer else float(text)
    except ValueError:
        raise InputError(source, f"not a valid EDF file ({what} is {text[:20]!r})") from None
    if not math.isfinite(value):
        raise InputError(source, f"not a valid EDF file ({what} is {text[:20]!r})")
    return value


def read_edf(path: Path, fs: float | None = None) -> Recording:
    """Read an EDF or EDF+C file with physical units applied."""
    source = str(path)
    try:
        raw = path.read_bytes()
    except OSError as exc:
        raise InputError(source, f"cannot read file ({exc.strerror or exc})") from None
    if len(raw) < 256:
        raise InputError(source, "not a valid EDF file (shorter than its 256-byte header)")
    if raw[:8].strip() != b"0":
        raise InputError(source, "not a valid EDF file (version field is not '0')")
    start_date = _ascii(raw[168:176], source, "start date")
    start_time = _ascii(raw[176:184], source, "start time")
    header_bytes = int(_number(_ascii(raw[184:192], source, "header size"), source, "header size", True))
    reserved = _ascii(raw[192:236], source, "reserved field")
    n_records = int(_number(_ascii(raw[236:244], source, "record count"), source, "record count", True))
    record_s = _number(_ascii(raw[244:252], source, "record duration"), source, "record duration")
    n_signals = int(_number(_ascii(raw[252:256], source, "signal count"), source, "signal count", True))
    if reserved.startswith("EDF+D"):
        raise InputError(source, "EDF+D (discontinuous) files are not supported; export it as continuous EDF+C")
    if n_signals < 1:
        raise InputError(source, "EDF file holds no signals (signal count 0)")
    if header_bytes != 256 * (n_signals + 1) or len(raw) < header_bytes:
        raise InputError(source, "not a valid EDF file (header size does not match its signal count)")
    fields: dict[str, list[str]] = {}
    offset = 256
    for name, width in _FIELDS:
        values = []
        for _ in range(n_signals):
            values.append(_ascii(raw[offset : offset + width], source, name.replace("_", " ")))
            offset += width
        fields[name] = values
    spr = [int(_number(v, source, "samples per record", True)) for v in fields["samples_per_record"]]
    if any(s <= 0 for s in spr):
        raise InputError(source, "not a valid EDF file (a signal has no samples per record)")
    record_samples = sum(spr)
    available = (len(raw) - header_bytes) // (2 * record_samples)
    if n_records < 0:  # -1: unknown while recording
        n_records = available
    if n_records <= 0 or available < n_records:
        raise InputError(
            source, f"truncated EDF file: header promises {n_records} data records, file holds {available}"
        )
    if record_s <= 0:
        raise InputError(source, "EDF record duration is zero: no sampling rate")
    ordinary = [i for i, label in enumerate(fields["label"]) if label != "EDF Annotations"]
    if not ordinary:
        raise InputError(source, "EDF file holds only annotations, no signals")
    rate = spr[ordinary[0]] / record_s
    if fs is not None and abs(fs - rate) > 1e-3 * rate:
        raise InputError(source, f"EDF header gives {rate:g} Hz but --fs says {fs:g} Hz")
    chosen = [i for i in ordinary if spr[i] == spr[ordinary[0]]]
    data = np.frombuffer(raw, dtype="<i2", count=n_records * record_samples, offset=header_bytes)
    data = data.reshape(n_records, record_samples)
    starts = np.concatenate([[0], np.cumsum(spr)])
    columns = []
    for i in chosen:
        digital = data[:, starts[i] : starts[i + 1]].reshape(-1).astype(np.float64)
        pmin = _number(fields["physical_min"][i], source, "physical minimum")
        pmax = _number(fields["physical_max"][i], source, "physical maximum")
        dmin = _number(fields["digital_min"][i], source, "digital minimum")
        dmax = _number(fields["digital_max"][i], source, "digital maximum")
        if dmax == dmin or pmax == pmin:
            raise InputError(source, f"EDF signal {fields['label'][i]!r} has an empty physical or digital range")
        gain = (pmax - pmin) / (dmax - dmin)
        columns.append((digital - dmin) * gain + pmin)
    units = {fields["physical_dimension"][i] for i in chosen}
    labels = tuple(fields["label"][i] or f"ch{i + 1}" for i in chosen)
    kind = "ecg" if any(tag in label.upper() for label in labels for tag in ("ECG", "EKG")) else "other"
    start = None
    try:
        start = datetime.strptime(f"{start_date} {start_time}", "%d.%m.%y %H.%M.%S")
        if start.year < 1985:  # EDF's two-digit years: 85-99 are 1985-1999, the rest 2000-2084
            start = start.replace(year=start.year + 100)
    except ValueError:
        start = None
    skipped = [fields["label"][i] for i in ordinary if i not in chosen]
    return Recording(
        samples=np.column_stack(columns),
        fs=rate,
        channels=labels,
        units=units.pop() if len(units) == 1 else None,
        kind=kind,
        start_time=start,
        source=source,
        metadata={"skipped_channels": skipped} if skipped else {},
    )


def _field(value: str, width: int) -> bytes:
    # EDF header fields hold printable US-ASCII only (bytes 32..126): any other
    # character, control characters such as ESC included, becomes '?'.
    printable = "".join(c if " " <= c <= "~" else "?" for c in value)
    text = printable.encode("ascii")[:width]
    return text.ljust(width, b" ")


def _num_field(value: float, width: int = 8) -> bytes:
    for digits in range(10, -1, -1):
        text = f"{value:.{digits}f}".rstrip("0").rstrip(".") if digits else f"{value:.0f}"
        if len(text) <= width:
            return _field(text, width)
    raise ValueError(f"{value} does not fit in {width} characters")


def format_edf(recording: Recording) -> bytes:
    """Serialise as EDF with 16-bit samples scaled to each channel's range.

    Data records are whole numbers of samples. The record duration is chosen
    from 1, 2, 5, 10, 0.5, 0.25, 0.2, 0.1 s so that ``fs * duration`` is an
    integer and the signal fills whole records; otherwise the recording is
    refused rather than padded (padding would change its length).
    """
    n = recording.n_samples
    spr = None
    for duration in (1, 2, 5, 10, 0.5, 0.25, 0.2, 0.1):
        per_record = recording.fs * duration
        if abs(per_record - round(per_record)) < 1e-9 and round(per_record) > 0 and n % round(per_record) == 0:
            spr, record_s = int(round(per_record)), duration
            break
    if spr is None:
        raise InputError(
            recording.source,
            f"cannot write {n} samples at {recording.fs:g} Hz as whole EDF data records; write .npz or .csv instead",
        )
    n_records = n // spr
    n_sig = recording.n_channels
    start = recording.start_time or datetime(1985, 1, 1)
    head = io.BytesIO()
    head.write(_field("0", 8))
    head.write(_field("X X X X", 80))
    head.write(_field(f"Startdate {start.strftime('%d-%b-%Y').upper()} X X tracevet", 80))
    head.write(_field(start.strftime("%d.%m.%y"), 8))
    head.write(_field(start.strftime("%H.%M.%S"), 8))
    head.write(_field(str(256 * (n_sig + 1)), 8))
    head.write(_field("", 44))  # plain EDF: no "EDF+C", which needs an annotation signal
    head.write(_field(str(n_records), 8))
    head.write(_num_field(record_s))
    head.write(_field(str(n_sig), 4))
    samples = recording.samples.astype(np.float64)
    lows = samples.min(axis=0)
    highs = samples.max(axis=0)
    same = highs <= lows
    highs = np.where(same, lows + 1.0, highs)
    dmin, dmax = -32768, 32767
    pmins, pmaxs = [], []
    for low, high in zip(lows, highs):
        # The 8-character fields round the range; widen it so every sample fits.
        pmin_b, pmax_b = _num_field(low), _num_field(high)
        pmin, pmax = float(pmin_b), float(pmax_b)
        if pmin > low:
            pmin_b = _num_field(low - abs(low) * 1e-4 - 1e-6)
        if pmax < high:
            pmax_b = _num_field(high + abs(high) * 1e-4 + 1e-6)
        pmins.append(pmin_b)
        pmaxs.append(pmax_b)
    columns = {
        "label": [_field(name, 16) for name in recording.channels],
        "transducer": [_field("", 80)] * n_sig,
        "physical_dimension": [_field(recording.units or "", 8)] * n_sig,
        "physical_min": pmins,
        "physical_max": pmaxs,
        "digital_min": [_field(str(dmin), 8)] * n_sig,
        "digital_max": [_field(str(dmax), 8)] * n_sig,
        "prefiltering": [_field("", 80)] * n_sig,
        "samples_per_record": [_field(str(spr), 8)] * n_sig,
        "reserved": [_field("", 32)] * n_sig,
    }
    for name, _ in _FIELDS:
        for value in columns[name]:
            head.write(value)
    digital = np.empty((n, n_sig), dtype="<i2")
    for c in range(n_sig):
        pmin, pmax = float(pmins[c]), float(pmaxs[c])
        scaled = (samples[:, c] - pmin) * (dmax - dmin) / (pmax - pmin) + dmin
        digital[:, c] = np.clip(np.round(scaled), dmin, dmax)
    # records x channels x samples-per-record, channel-major inside a record
    body = digital.reshape(n_records, spr, n_sig).transpose(0, 2, 1)
    return head.getvalue() + np.ascontiguousarray(body).tobytes()
