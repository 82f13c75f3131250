"""The decision log: append-only JSON lines joined by a SHA-256 hash chain.

Each line of ``decisions.jsonl`` is one entry in canonical JSON (see
:mod:`tracevet.workqueue.checksums`). Every entry carries ``seq`` (1, 2,
3... equal to its line number), ``prev`` (the ``hash`` of the entry before
it; 64 zeros for the first) and ``hash``, the SHA-256 of the canonical JSON
of the entry without ``hash``. Changing any character of a past entry
breaks its hash; removing an entry breaks the next entry's ``prev`` and
``seq``; cutting entries off the end is caught by ``decisions.head``,
which holds the count and hash of the newest entry. This is the classic
hash-chained audit log (Haber & Stornetta, "How to time-stamp a digital
document", J. Cryptology 3:99-111, 1991; Schneier & Kelsey, "Secure audit
logs to support computer forensics", ACM TISSEC 2(2):159-176, 1999).

Appends are made while the queue lock is held: the new lines go out in a
single ``write`` on a descriptor opened with ``O_APPEND``, then ``fsync``,
and only then does the call return. A last line without its newline (a
writer died mid-write) is a *torn tail*: readers skip it and report it;
the next append, or :func:`repair`, moves its bytes to a side file
(``decisions.torn-TIME``), cuts the log back to its last complete entry and
records a ``repair`` entry naming what was removed.
"""

from __future__ import annotations

import json
import math
import os
import socket
from dataclasses import dataclass
from pathlib import Path
from typing import Iterable

from tracevet import __version__
from tracevet.recording.atomic import fsync_dir, write_text_atomic
from tracevet.workqueue.checksums import canonical_json, sha256_bytes, sha256_json
from tracevet.workqueue.layout import FILE_MODE, QueuePaths
from tracevet.workqueue.settings import utc_now_text

GENESIS = "0" * 64
EVENTS = ("add", "decision", "takeover", "repair")
DECISIONS = ("accept", "reject", "rerun")
_TAIL_CHUNK = 1 << 16


@dataclass(frozen=True)
class LogEntry:
    """One entry of the decision log.

    Attributes
    ----------
    line : int
        1-based line number in ``decisions.jsonl``.
    data : dict
        The entry exactly as stored (including ``hash``).
    """

    line: int
    data: dict

    def get(self, key: str, default=None):
        """A field of the entry, or ``default``."""
        return self.data.get(key, default)

    @property
    def seq(self) -> int:
        """Position in the chain (1-based)."""
        return int(self.data.get("seq", 0))

    @property
    def event(self) -> str:
        """``add``, ``decision``, ``takeover`` or ``repair``."""
        return str(self.data.get("event", ""))

    @property
    def time(self) -> str:
        """UTC time of the entry (ISO 8601)."""
        return str(self.data.get("time", ""))

    @property
    def record(self) -> str | None:
        """The record the entry is about (None for ``repair``)."""
        return self.data.get("record")

    @property
    def run(self) -> str | None:
        """The run a decision signs off."""
        return self.data.get("run")

    @property
    def decision(self) -> str | None:
        """``accept``, ``reject`` or ``rerun`` for decision entries."""
        return self.data.get("decision")

    @property
    def note(self) -> str:
        """The reviewer's note, as typed (display it inert)."""
        return str(self.data.get("note") or "")

    @property
    def reviewer(self) -> str:
        """Who made the entry (display it inert)."""
        return str(self.data.get("reviewer") or "")

    @property
    def hash(self) -> str:
        """The entry's hash (hex SHA-256)."""
        return str(self.data.get("hash", ""))


@dataclass(frozen=True)
class TornTail:
    """A last line without its newline, left by an interrupted write."""

    line: int
    offset: int
    size: int


@dataclass(frozen=True)
class LogContents:
    """Everything read from the log file.

    ``entries`` are the lines that parsed as JSON objects; ``bad_lines``
    the complete lines that did not (line number, problem); ``torn`` the
    torn tail, if any.
    """

    entries: list[LogEntry]
    bad_lines: list[tuple[int, str]]
    torn: TornTail | None
    size: int


def entry_hash(data: dict) -> str:
    """SHA-256 of the canonical JSON of ``data`` without its ``hash`` field."""
    return sha256_json({k: v for k, v in data.items() if k != "hash"})


def jsonable(value):
    """``value`` made JSON-safe: numpy scalars and arrays to Python, NaN/inf to None."""
    if isinstance(value, dict):
        return {str(k): jsonable(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [jsonable(v) for v in value]
    if hasattr(value, "tolist") and not isinstance(value, (str, bytes)):
        return jsonable(value.tolist())
    if isinstance(value, float) and not math.isfinite(value):
        return None
    if isinstance(value, (str, int, float, bool)) or value is None:
        return value
    return str(value)


def read_log(path: Path) -> LogContents:
    """Read every line of the log; never raises for damaged content."""
    try:
        data = path.read_bytes()
    except FileNotFoundError:
        return LogContents([], [], None, 0)
    entries: list[LogEntry] = []
    bad: list[tuple[int, str]] = []
    torn = None
    lines = data.split(b"\n")
    complete, last = lines[:-1], lines[-1]
    for number, raw in enumerate(complete, start=1):
        try:
            parsed = json.loads(raw.decode("utf-8"))
        except (UnicodeDecodeError, ValueError) as exc:
            bad.append((number, f"not a JSON line ({str(exc)[:60]})"))
            continue
        if not isinstance(parsed, dict):
            bad.append((number, "not a JSON object"))
            continue
        entries.append(LogEntry(number, parsed))
    if last:
        torn = TornTail(line=len(complete) + 1, offset=len(data) - len(last), size=len(last))
    return LogContents(entries, bad, torn, len(data))


def _tail(fd: int) -> tuple[dict | None, int, int]:
    """Last complete entry, end offset of the complete part, file size."""
    size = os.fstat(fd).st_size
    if size == 0:
        return None, 0, 0
    buffer = b""
    position = size
    complete_end = None
    while position > 0:
        step = min(_TAIL_CHUNK, position)
        position -= step
        buffer = os.pread(fd, step, position) + buffer
        if complete_end is None:
            cut = buffer.rfind(b"\n")
            if cut < 0:
                continue
            complete_end = position + cut + 1
        start_in_buffer = complete_end - position - 1  # index of the newline ending the last complete line
        begin = buffer.rfind(b"\n", 0, start_in_buffer)
        if begin >= 0 or position == 0:
            line = buffer[begin + 1 : start_in_buffer]
            try:
                parsed = json.loads(line.decode("utf-8"))
            except (UnicodeDecodeError, ValueError):
                parsed = None
            return (parsed if isinstance(parsed, dict) else None), complete_end, size
    return None, 0, size


def _write_all(fd: int, data: bytes) -> None:
    view = memoryview(data)
    while view:
        written = os.write(fd, view)
        view = view[written:]


def identity() -> dict:
    """Host, process id and tracevet version stamped on every entry."""
    return {"host": socket.gethostname(), "pid": os.getpid(), "tracevet_version": __version__}


def append(paths: QueuePaths, bodies: Iterable[dict], repairer: str = "tracevet") -> list[LogEntry]:
    """Append entries to the log; the caller must hold the queue lock.

    Each body is completed with ``seq``, ``time`` (unless given), host,
    pid, version, ``prev`` and ``hash``. A torn tail is repaired first
    (see module notes), with a ``repair`` entry made by ``repairer``. The
    data are fsynced before this returns; then ``decisions.head`` is
    rewritten atomically.

    Returns
    -------
    list of LogEntry
        The entries as written.
    """
    bodies = list(bodies)
    created = not paths.log.exists()
    fd = os.open(str(paths.log), os.O_RDWR | os.O_APPEND | os.O_CREAT, 0o666)
    try:
        last, complete_end, size = _tail(fd)
        written: list[LogEntry] = []
        prev = last["hash"] if last and isinstance(last.get("hash"), str) else GENESIS
        if last and isinstance(last.get("seq"), int):
            seq = line = last["seq"]  # in an intact log the sequence number is the line number
        else:
            seq = line = _count_lines(fd, complete_end)
        if complete_end < size:
            torn_bytes = os.pread(fd, size - complete_end, complete_end)
            saved = _save_torn(paths, torn_bytes)
            os.ftruncate(fd, complete_end)
            os.fsync(fd)
            bodies.insert(0, {
                "event": "repair",
                "reviewer": repairer,
                "note": (
                    f"removed a torn last line ({len(torn_bytes)} bytes, line {line + 1}) left by an interrupted write"
                ),
                "removed_bytes": len(torn_bytes),
                "removed_sha256": sha256_bytes(torn_bytes),
                "saved_as": saved,
            })
        chunks = []
        for body in bodies:
            seq += 1
            line += 1
            entry = {"seq": seq, "time": body.get("time") or utc_now_text()}
            entry.update(jsonable({k: v for k, v in body.items() if k not in ("seq", "prev", "hash")}))
            for key, value in identity().items():
                entry.setdefault(key, value)
            entry["prev"] = prev
            entry["hash"] = entry_hash(entry)
            prev = entry["hash"]
            chunks.append(canonical_json(entry) + b"\n")
            written.append(LogEntry(line, entry))
        if chunks:
            _write_all(fd, b"".join(chunks))
            os.fsync(fd)
    finally:
        os.close(fd)
    if created:
        fsync_dir(paths.root)
    if written:
        _write_head(paths, written[-1])
    return written


def _write_head(paths: QueuePaths, entry: LogEntry) -> None:
    """Rewrite ``decisions.head`` (temporary file, rename).

    Not fsynced, to keep the time the queue lock is held short: after a
    power cut the head may lag the log by the last entries, which
    :func:`chain_problems` accepts; it never runs ahead of the log, because
    the log is fsynced before the head is written.
    """
    temporary = paths.head.with_name(f".{paths.head.name}.{os.getpid()}.tmp")
    data = json.dumps({"entries": entry.seq, "hash": entry.hash, "line": entry.line}) + "\n"
    fd = os.open(str(temporary), os.O_WRONLY | os.O_CREAT | os.O_TRUNC, 0o666)
    try:
        _write_all(fd, data.encode("ascii"))
    finally:
        os.close(fd)
    os.replace(temporary, paths.head)


def _count_lines(fd: int, end: int) -> int:
    """Number of newlines in the first ``end`` bytes (about 10 ms per 20 MB)."""
    count = 0
    position = 0
    while position < end:
        chunk = os.pread(fd, min(1 << 20, end - position), position)
        if not chunk:
            break
        count += chunk.count(b"\n")
        position += len(chunk)
    return count


def _save_torn(paths: QueuePaths, data: bytes) -> str:
    name = f"decisions.torn-{utc_now_text().replace(':', '').replace('.', '-')}"
    target = paths.root / name
    write_text_atomic(target, data.decode("utf-8", errors="backslashreplace"), mode=FILE_MODE)
    return name


def repair(paths: QueuePaths, reviewer: str) -> LogEntry | None:
    """Remove a torn tail (keeping every complete entry) and log the repair.

    The caller must hold the queue lock. Returns the ``repair`` entry, or
    None when the log had no torn tail.
    """
    contents = read_log(paths.log)
    if contents.torn is None:
        return None
    return append(paths, [], repairer=reviewer)[0]


def read_head(paths: QueuePaths) -> dict | None:
    """The head anchor (``entries``, ``hash``, ``line``) or None if absent or unreadable."""
    try:
        data = json.loads(paths.head.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None
    return data if isinstance(data, dict) else None


def chain_problems(contents: LogContents, head: dict | None) -> list[tuple[int | None, str | None, str]]:
    """Check the hash chain; return (line, record, problem) for each fault found.

    Checks, for every entry: canonical form of the line is not checked
    here (see :func:`line_problems`); ``hash`` recomputed; ``prev`` equals
    the hash of the entry before; ``seq`` follows on. Then the head anchor.
    """
    problems: list[tuple[int | None, str | None, str]] = []
    for number, problem in contents.bad_lines:
        problems.append((number, None, problem))
    prev = GENESIS
    expected_seq = 1
    for entry in contents.entries:
        data = entry.data
        record = data.get("record") if isinstance(data.get("record"), str) else None
        stored = data.get("hash")
        try:
            actual = entry_hash(data)
        except ValueError:
            actual = None
        if stored != actual:
            problems.append(
                (entry.line, record, "entry was changed after it was written (its hash does not match its contents)")
            )
        if data.get("prev") != prev:
            problems.append(
                (
                    entry.line,
                    record,
                    "entry does not follow the one before it (prev hash differs): an entry before it was removed or "
                    "changed",
                )
            )
        if data.get("seq") != expected_seq:
            problems.append(
                (
                    entry.line,
                    record,
                    f"sequence number is {str(data.get('seq'))[:12]}, expected {expected_seq}: entries were removed "
                    "or reordered",
                )
            )
        prev = stored if isinstance(stored, str) else ""
        seq = data.get("seq")
        expected_seq = (seq if isinstance(seq, int) else expected_seq) + 1
        if data.get("event") not in EVENTS:
            problems.append((entry.line, record, f"unknown event {str(data.get('event'))[:20]!r}"))
    if contents.torn is not None:
        problems.append(
            (
                contents.torn.line,
                None,
                f"torn last line ({contents.torn.size} bytes) from an interrupted write; 'tracevet log QUEUE "
                "--repair' removes it and keeps every complete entry",
            )
        )
    if head is not None:
        count = head.get("entries")
        by_seq = {e.data.get("seq"): e for e in contents.entries}
        if isinstance(count, int) and count > len(contents.entries):
            problems.append(
                (
                    None,
                    None,
                    f"decisions.head says the log had {count} entries but it has {len(contents.entries)}: entries "
                    "were cut off the end",
                )
            )
        elif isinstance(count, int) and count in by_seq and by_seq[count].data.get("hash") != head.get("hash"):
            problems.append((by_seq[count].line, None, "entry differs from the one recorded in decisions.head"))
    elif contents.entries:
        problems.append(
            (None, None, "decisions.head is missing or unreadable: cannot tell whether entries were cut off the end")
        )
    return problems


def line_problems(path: Path) -> list[tuple[int, str]]:
    """Lines that are valid JSON but not in the canonical form tracevet writes."""
    problems = []
    try:
        data = path.read_bytes()
    except FileNotFoundError:
        return []
    for number, raw in enumerate(data.split(b"\n")[:-1], start=1):
        try:
            parsed = json.loads(raw.decode("utf-8"))
        except (UnicodeDecodeError, ValueError):
            continue
        try:
            canonical = canonical_json(parsed)
        except ValueError:
            canonical = b""
        if canonical != raw:
            problems.append((number, "line was edited (it is no longer in the exact form tracevet wrote)"))
    return problems

