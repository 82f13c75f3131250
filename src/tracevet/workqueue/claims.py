"""Claims: who is reviewing which record right now.

A claim is a small JSON file ``claims/RECORD.json`` naming the reviewer,
host, process (id and start time), when the claim began and the last
activity. Claims are written and removed only while the queue lock is
held, each write atomic (temporary file, rename), so two reviewers
can never both hold a record.

A claim belongs to a reviewer name: the same reviewer in a second
terminal (or the command line) shares it. Another reviewer may take it
over only when the holder is gone (same host and the process no longer
exists) or has been idle for longer than ``claim_idle_minutes``; the
take-over is written to the decision log by the caller.
"""

from __future__ import annotations

import contextlib
import json
import os
import socket
from dataclasses import asdict, dataclass
from datetime import datetime, timezone
from pathlib import Path

from tracevet.errors import TracevetError
from tracevet.text import inert
from tracevet.workqueue.layout import QueuePaths
from tracevet.workqueue.settings import utc_now_text


def _parse_time(text: str) -> datetime | None:
    try:
        value = datetime.fromisoformat(str(text).replace("Z", "+00:00"))
    except ValueError:
        return None
    return value if value.tzinfo else value.replace(tzinfo=timezone.utc)


def process_start(pid: int) -> str | None:
    """Start time of process ``pid`` in clock ticks since boot (Linux ``/proc``), or None.

    Stored with a claim so that a process id reused after the holder died
    is not mistaken for the holder.
    """
    try:
        text = Path(f"/proc/{int(pid)}/stat").read_text()
    except (OSError, ValueError):
        return None
    fields = text[text.rfind(")") + 2 :].split()
    return fields[19] if len(fields) > 19 else None


def process_alive(pid: int, start: str | None) -> bool:
    """True when process ``pid`` exists on this host (and, if known, started at ``start``)."""
    if pid <= 0:
        return False
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        pass
    except OverflowError:
        return False
    if start is not None:
        current = process_start(pid)
        if current is not None and current != start:
            return False
    return True


@dataclass(frozen=True)
class Claim:
    """One record's claim.

    Attributes
    ----------
    record, reviewer, host : str
    pid : int
        The process that holds the claim (an app, or a command line run).
    pid_start : str or None
        That process's start time (Linux), to detect a reused process id.
    since, last_activity : str
        UTC times (ISO 8601) of claiming and of the latest activity.
    """

    record: str
    reviewer: str
    host: str
    pid: int
    pid_start: str | None
    since: str
    last_activity: str

    def to_dict(self) -> dict:
        """Plain dict, as stored in the claim file and the log."""
        return asdict(self)

    @classmethod
    def from_dict(cls, data: dict) -> "Claim":
        """Build from a stored dict (raises ValueError if malformed)."""
        try:
            return cls(
                record=str(data["record"]),
                reviewer=str(data["reviewer"]),
                host=str(data["host"]),
                pid=int(data["pid"]),
                pid_start=None if data.get("pid_start") is None else str(data["pid_start"]),
                since=str(data["since"]),
                last_activity=str(data["last_activity"]),
            )
        except (KeyError, TypeError, ValueError) as exc:
            raise ValueError(f"malformed claim ({exc})") from None

    def idle_seconds(self, now: datetime | None = None) -> float:
        """Seconds since the last activity (infinite if the time is unreadable)."""
        last = _parse_time(self.last_activity)
        if last is None:
            return float("inf")
        now = now or datetime.now(timezone.utc)
        return max(0.0, (now - last).total_seconds())

    def holder_gone(self) -> bool:
        """True when the holder ran on this host and its process no longer exists.

        A claim made from the command line (``tracevet claim``) has no
        process (``pid`` 0) and lapses only by idle time.
        """
        if self.pid <= 0:
            return False
        return self.host == socket.gethostname() and not process_alive(self.pid, self.pid_start)

    def takeover_reason(self, idle_minutes: float) -> str | None:
        """Why another reviewer may take this claim over, or None if it is live."""
        if self.holder_gone():
            return f"holder's process {self.pid} on {inert(self.host, 60)} has ended"
        idle = self.idle_seconds()
        if idle > idle_minutes * 60:
            if idle == float("inf"):
                return "its last activity time is unreadable"
            return f"idle for {idle / 60:.0f} min (limit {idle_minutes:g} min)"
        return None

    def describe(self) -> str:
        """One inert line: who holds it, where and since when."""
        idle = self.idle_seconds()
        if idle == float("inf"):
            idle_text = "at an unreadable time"
        else:
            idle_text = "just now" if idle < 60 else f"{idle / 60:.0f} min ago"
        process = f"process {self.pid}" if self.pid > 0 else "command line"
        # The claim file may have been edited by hand: every stored field is shown inert.
        return (
            f"{inert(self.reviewer, 60)} on {inert(self.host, 60)} ({process}) "
            f"since {inert(self.since[:19].replace('T', ' '))} UTC, last active {idle_text}"
        )


class ClaimedByOther(TracevetError):
    """The record is held by another reviewer; ``holder`` is their :class:`Claim`."""

    def __init__(self, record: str, holder: Claim):
        self.record = record
        self.holder = holder
        super().__init__(f"record {record} is being reviewed by {holder.describe()}")


def read_claim(paths: QueuePaths, record_id: str) -> Claim | None:
    """The claim on ``record_id``, or None (an unreadable claim file counts as none)."""
    try:
        data = json.loads(paths.claim_file(record_id).read_text(encoding="utf-8"))
        return Claim.from_dict(data)
    except (OSError, ValueError, TypeError):
        return None


def all_claims(paths: QueuePaths) -> dict[str, Claim]:
    """Every readable claim, by record id."""
    claims: dict[str, Claim] = {}
    try:
        names = os.listdir(paths.claims)
    except FileNotFoundError:
        return claims
    for name in names:
        if name.endswith(".json") and not name.startswith("."):
            claim = read_claim(paths, name[:-5])
            if claim is not None:
                claims[claim.record] = claim
    return claims


def _write(paths: QueuePaths, claim: Claim) -> None:
    """Write a claim file: temporary file then rename (no fsync: a claim lost
    in a power cut is harmless, it is simply taken again)."""
    paths.claims.mkdir(exist_ok=True)
    target = paths.claim_file(claim.record)
    temporary = target.with_name(f".{target.name}.{os.getpid()}.tmp")
    temporary.write_text(json.dumps(claim.to_dict()) + "\n", encoding="utf-8")
    os.replace(temporary, target)


def take(
    paths: QueuePaths, record_id: str, reviewer: str, idle_minutes: float, bind_process: bool = True
) -> tuple[Claim, Claim | None, str | None]:
    """Claim ``record_id`` for ``reviewer``; the caller holds the queue lock.

    With ``bind_process`` false (a claim made from the command line) the
    claim is not tied to this short-lived process and lapses only by idle
    time.

    Returns ``(claim, previous, reason)`` where ``previous`` is another
    reviewer's claim that was taken over (with the reason), else None.

    Raises
    ------
    ClaimedByOther
        When another reviewer holds a live claim.
    """
    now = utc_now_text()
    current = read_claim(paths, record_id)
    previous, reason = None, None
    since = now
    if current is not None:
        if current.reviewer == reviewer:
            since = current.since
        else:
            reason = current.takeover_reason(idle_minutes)
            if reason is None:
                raise ClaimedByOther(record_id, current)
            previous = current
    pid = os.getpid() if bind_process else 0
    claim = Claim(record_id, reviewer, socket.gethostname(), pid, process_start(pid) if pid else None, since, now)
    _write(paths, claim)
    return claim, previous, reason


def check_holder(
    paths: QueuePaths, record_id: str, reviewer: str, idle_minutes: float
) -> tuple[Claim | None, str | None]:
    """Raise ClaimedByOther if another reviewer holds a live claim on ``record_id``.

    Returns ``(stale_claim, reason)`` when another reviewer's claim may be
    taken over, else ``(None, None)``.
    """
    current = read_claim(paths, record_id)
    if current is None or current.reviewer == reviewer:
        return None, None
    reason = current.takeover_reason(idle_minutes)
    if reason is None:
        raise ClaimedByOther(record_id, current)
    return current, reason


def release(paths: QueuePaths, record_id: str, reviewer: str) -> bool:
    """Remove ``reviewer``'s claim on ``record_id``; True if there was one.

    Raises ClaimedByOther when another reviewer holds it (a claim is never
    released by someone else; it can only be taken over).
    """
    current = read_claim(paths, record_id)
    if current is None:
        with contextlib.suppress(FileNotFoundError):
            paths.claim_file(record_id).unlink()  # unreadable leftovers
        return False
    if current.reviewer != reviewer:
        raise ClaimedByOther(record_id, current)
    paths.claim_file(record_id).unlink()
    return True
