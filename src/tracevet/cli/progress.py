"""A plain textual progress bar on stderr, fine on a terminal and in a log file."""

from __future__ import annotations

import sys
import time
from typing import TextIO


def _duration(seconds: float) -> str:
    seconds = max(0, int(round(seconds)))
    if seconds < 60:
        return f"{seconds}s"
    if seconds < 3600:
        return f"{seconds // 60}m{seconds % 60:02d}s"
    return f"{seconds // 3600}h{(seconds % 3600) // 60:02d}m"


class ProgressBar:
    """``label [#######-------]  12/40  30%  1m05s left``.

    On a terminal the line is redrawn in place (carriage return); otherwise a
    new line is written at each tenth of the work and at the end, so logs
    stay short.
    """

    def __init__(self, label: str, stream: TextIO | None = None, width: int = 30):
        self.label = label
        self.stream = stream or sys.stderr
        self.width = width
        self.started = time.monotonic()
        self.tty = bool(getattr(self.stream, "isatty", lambda: False)())
        self._last_tenth = -1
        self._last_draw = 0.0

    def rate_text(self, records: int, retries: int = 0) -> str:
        """``12.5 records/min`` for ``records`` finished since the bar began, and the retries so far."""
        elapsed = time.monotonic() - self.started
        text = f"{60.0 * records / elapsed:.1f} records/min" if records and elapsed > 0 else ""
        if retries:
            text += f"{'  ' if text else ''}{retries} retr{'y' if retries == 1 else 'ies'}"
        return text

    def line(self, done: float, total: int, note: str = "") -> str:
        """The bar as text for ``done`` (may be fractional) of ``total``, with an optional note."""
        fraction = 1.0 if total == 0 else min(1.0, done / total)
        filled = int(round(fraction * self.width))
        elapsed = time.monotonic() - self.started
        if 0 < done < total:
            tail = f"{_duration(elapsed / done * (total - done))} left"
        elif done >= total:
            tail = f"done in {_duration(elapsed)}"
        else:
            tail = ""
        bar = "#" * filled + "-" * (self.width - filled)
        note = f"  {note}" if note else ""
        return f"{self.label} [{bar}] {int(done)}/{total} {fraction * 100:3.0f}%{note}  {tail}".rstrip()

    def update(self, done: float, total: int, note: str = "") -> None:
        """Show progress ``done`` of ``total`` (at most ten redraws a second on a terminal)."""
        if self.tty:
            now = time.monotonic()
            if done < total and now - self._last_draw < 0.1:
                return
            self._last_draw = now
            self.stream.write("\r\x1b[K" + self.line(done, total, note) + ("\n" if done >= total else ""))
            self.stream.flush()
            return
        tenth = 10 if total == 0 else int(10 * done / total)
        if tenth != self._last_tenth:
            self._last_tenth = tenth
            self.stream.write(self.line(done, total, note) + "\n")
            self.stream.flush()

    def message(self, text: str) -> None:
        """Print a line without breaking the bar."""
        self.stream.write(("\r\x1b[K" if self.tty else "") + text + "\n")
        self.stream.flush()
