"""Small display helpers shared by the screens: inert text, severities, numbers.

Everything that came from a file or a person (record names, channel names,
metadata, notes, reviewer and host names) goes through :func:`inert_text`,
which returns a ``rich.text.Text`` built from the string with every control
character made visible (:func:`tracevet.text.inert`). A ``Text`` object is
never parsed for markup, so ``[bold]`` stays the six characters it is.
"""

from __future__ import annotations

import math

from rich.style import Style
from rich.text import Text

from tracevet.app.palette import COLOUR, Palette
from tracevet.text import inert


# Severity styles of the active palette (tracevet.app.palette; the app picks
# colour or monochrome at start). Every severity also has a word and a symbol,
# so nothing depends on colour alone.
SEVERITY_STYLE: dict[str, Style] = dict(COLOUR.severity)
SEVERITY_WORD = {"fail": "FAIL", "warn": "warn", "ok": "ok", "none": "-"}
SEVERITY_SYMBOL = {"fail": "✖", "warn": "▲", "ok": "✓", "none": "·"}
SEVERITY_RANK = {"none": 0, "ok": 0, "warn": 1, "fail": 2}


def use_palette(palette: Palette) -> None:
    """Make ``palette``'s severity styles the ones every screen draws with."""
    SEVERITY_STYLE.clear()
    SEVERITY_STYLE.update(palette.severity)


def inert_text(value: object, max_len: int | None = None, style: str | Style = "") -> Text:
    """Return ``value`` as plain, inert rich Text (no markup, control characters made visible)."""
    if value is None:
        return Text("-", style=style)
    return Text(inert(value, max_len), style=style, no_wrap=True, overflow="ellipsis")


def severity_key(severity: str | None) -> str:
    """Normalise a severity (``fail``, ``warn``, or none/empty/ok) to a key of the tables above."""
    if severity in ("fail", "warn"):
        return str(severity)
    if severity in ("ok", "pass"):
        return "ok"
    return "none"


def severity_text(severity: str | None, count: int | None = None, word: bool = True) -> Text:
    """Symbol (and word) for a severity, coloured, e.g. ``✖ FAIL 3``."""
    key = severity_key(severity)
    parts = [SEVERITY_SYMBOL[key]]
    if word:
        parts.append(SEVERITY_WORD[key])
    if count is not None and key in ("fail", "warn"):
        parts.append(str(count))
    return Text(" ".join(parts), style=SEVERITY_STYLE[key], no_wrap=True)


def format_duration(seconds: float | None) -> str:
    """``42.0s``, ``12m05s`` or ``24h00m``: short, fixed-style durations for tables."""
    if seconds is None or not math.isfinite(float(seconds)):
        return "-"
    seconds = float(seconds)
    if seconds < 60:
        return f"{seconds:.1f}s"
    if seconds < 3600:
        m, s = divmod(int(round(seconds)), 60)
        return f"{m}m{s:02d}s"
    h, rem = divmod(int(round(seconds)), 3600)
    return f"{h}h{rem // 60:02d}m"


def format_number(value) -> str:
    """A measured value or limit, compactly (``-18.2``, ``0.0412``, ``1.2e+03``); text passes through inert."""
    if value is None:
        return "-"
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, (int,)):
        return str(value)
    if isinstance(value, float):
        if not math.isfinite(value):
            return str(value)
        if value.is_integer() and abs(value) < 1e9:
            return str(int(value))
        magnitude = abs(value)
        if 1e-3 <= magnitude < 1e5:
            text = f"{value:.4g}"
            if float(text) == round(value) and not value.is_integer():
                text = f"{value:.6f}".rstrip("0")  # e.g. a correlation of 0.999994 must not read 1
            return text
        return f"{value:.3e}"
    return inert(value, 40)
