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

    def line(self, done: int, total: int) -> str:
        """The bar as text for ``done`` of ``total``."""
        fraction = 1.0 if total == 0 else min(1.0, done / total)
        filled = int(round(fraction * self.width))
        elapsed = time.monotonic() - self.started
        if 0 < done < total:
            tail = f"{_duration(elapsed / done * (total - done))} left"
        elif done >= total:
            tail = f"done in {_duration(elapsed)}"
        else:
            tail = ""
        return f"{self.label} [{'#' * filled}{'-' * (self.width - filled)}] {done}/{total} {fraction * 100:3.0f}%  {tail}".rstrip()

    def update(self, done: int, total: int) -> None:
        """Show progress ``done`` of ``total``."""
        text = self.line(done, total)
        if self.tty:
            self.stream.write("\r" + text + ("\n" if done >= total else ""))
            self.stream.flush()
            return
        tenth = 10 if total == 0 else int(10 * done / total)
        if tenth != self._last_tenth:
            self._last_tenth = tenth
            self.stream.write(text + "\n")
            self.stream.flush()

    def message(self, text: str) -> None:
        """Print a line without breaking the bar."""
        self.stream.write(("\r\x1b[K" if self.tty else "") + text + "\n")
        self.stream.flush()
