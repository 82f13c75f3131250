"""Character plots of a recording: original, cleaned, removed; averaged beats.

Everything here returns rich ``Text`` lines (drawn with braille cells by
:mod:`tracevet.app.braille`, coloured by the palette or plain) plus the
numbers the app prints beside them; nothing imports Textual. The traces are
first reduced with :mod:`tracevet.app.envelope`, so the cost of a plot
depends on its width in columns, not on the length of the record or of the
window, and it stays around a millisecond (see ``benchmarks/bench_redraw.py``).

Layout conventions shared by every plot here:

* the y tick labels have a fixed width (:data:`Y_LABEL_WIDTH`), so stacked
  plots have their canvases in the same columns and share one time axis;
* braille markers give two plot pixels per column, so a window is reduced
  to ``2 * canvas_columns`` bins;
* the original and cleaned plots share one y range (so flattened peaks
  show), while the removed component gets its own range, printed in its
  label together with its size relative to the original.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
from rich.style import Style
from rich.text import Text

from tracevet.app.braille import render_series
from tracevet.app.envelope import MinMaxPyramid
from tracevet.app.palette import COLOUR

Y_LABEL_WIDTH = 8
# The canvas starts right after the tick labels; each label ends with a blank.
CANVAS_OFFSET = Y_LABEL_WIDTH

# Trace colours: one owner, tracevet.app.palette (chosen to stay apart from the
# severity colours on 16-colour terminals too); the grey is for tick labels.
TRACE_COLOURS = COLOUR.trace
TICK_STYLE = Style(color="rgb(138,138,138)")


@dataclass
class TracePyramids:
    """Min/max pyramids of the three traces of one channel.

    Attributes
    ----------
    fs : float
        Sampling rate in Hz.
    original, cleaned, removed : MinMaxPyramid
        ``removed`` is ``original - cleaned`` (float32).
    """

    fs: float
    original: MinMaxPyramid
    cleaned: MinMaxPyramid
    removed: MinMaxPyramid

    @classmethod
    def from_arrays(cls, original, cleaned, fs: float) -> "TracePyramids":
        """Build the pyramids of one channel; ``removed = original - cleaned``."""
        # views, not copies, of float32 channels (a column of a multi-channel record is strided)
        original = np.asarray(original, dtype=np.float32)
        cleaned = np.asarray(cleaned, dtype=np.float32)
        if original.shape != cleaned.shape:
            raise ValueError(f"original {original.shape} and cleaned {cleaned.shape} differ in shape")
        return cls(float(fs), MinMaxPyramid(original), MinMaxPyramid(cleaned), MinMaxPyramid(original - cleaned))

    @property
    def duration_s(self) -> float:
        """Duration of the traces in seconds."""
        return len(self.original) / self.fs


SEVERITY_CODES = {"warn": 1, "fail": 2}
_SEVERITY_NAMES = ("", "warn", "fail")


@dataclass(frozen=True)
class Regions:
    """Flagged stretches of time, as sorted arrays (a 24-hour record may hold 100 000).

    Attributes
    ----------
    start_s, end_s : numpy.ndarray
        Start and end of every region in seconds (float64), sorted by start.
    code : numpy.ndarray
        Severity per region: 1 warn, 2 fail (int8).
    """

    start_s: np.ndarray
    end_s: np.ndarray
    code: np.ndarray

    @classmethod
    def from_items(cls, items) -> "Regions":
        """Build from ``(start_s, end_s, severity)`` items (severity ``warn`` or ``fail``)."""
        items = sorted(items, key=lambda item: float(item[0]))
        return cls(
            np.array([float(i[0]) for i in items], dtype=np.float64),
            np.array([float(i[1]) for i in items], dtype=np.float64),
            np.array([SEVERITY_CODES.get(str(i[2]), 1) for i in items], dtype=np.int8),
        )

    def __len__(self) -> int:
        return int(self.start_s.size)

    def next_start(self, after_s: float, backwards: bool = False) -> float | None:
        """Start of the first region beginning after ``after_s`` (or the last one before it)."""
        if backwards:
            index = int(np.searchsorted(self.start_s, after_s - 1e-9, side="left")) - 1
            return float(self.start_s[index]) if index >= 0 else None
        index = int(np.searchsorted(self.start_s, after_s + 1e-9, side="right"))
        return float(self.start_s[index]) if index < self.start_s.size else None


    def next_index(self, after_s: float, backwards: bool = False) -> int | None:
        """Index of the first region starting after ``after_s`` (or the last one starting before it)."""
        if backwards:
            index = int(np.searchsorted(self.start_s, after_s - 1e-6, side="left")) - 1
            return index if index >= 0 else None
        index = int(np.searchsorted(self.start_s, after_s + 1e-6, side="right"))
        return index if index < self.start_s.size else None

    def overlapping(self, start_s: float, end_s: float) -> int | None:
        """Index of the region covering most of ``[start_s, end_s]``, or None when none overlaps it."""
        overlap = np.minimum(self.end_s, end_s) - np.maximum(self.start_s, start_s)
        if overlap.size == 0 or float(overlap.max()) <= 0:
            return None
        return int(np.argmax(overlap))


NO_REGIONS = Regions(np.zeros(0), np.zeros(0), np.zeros(0, dtype=np.int8))


@dataclass(frozen=True)
class PlotText:
    """One rendered plot and the numbers printed beside it.

    ``lines`` are the rows as rich Text (label column, then the canvas);
    ``text`` is the same without styles, one row per line.
    """

    name: str
    lines: tuple[Text, ...]
    y_low: float
    y_high: float

    @property
    def text(self) -> str:
        """The plot as plain text."""
        return "\n".join(line.plain for line in self.lines)


@dataclass(frozen=True)
class TracePlots:
    """The three stacked plots of a window, plus labels."""

    start_s: float
    end_s: float
    plots: tuple[PlotText, ...]
    removed_ratio: float  # peak-to-peak of removed / peak-to-peak of original, in the window
    flag_strip: tuple[str, ...] = field(default_factory=tuple)  # per canvas column: "", "warn", "fail"
    canvas_columns: int = 0


def canvas_columns(width: int) -> int:
    """Number of canvas columns of a plot ``width`` columns wide."""
    return max(int(width) - CANVAS_OFFSET, 4)


def format_clock(seconds: float, span_s: float | None = None, longest_s: float | None = None) -> str:
    """Format a time in seconds as ``s``, ``m:ss`` or ``h:mm:ss`` with sensible decimals.

    ``span_s`` (the width of the window shown) decides how many decimals are
    needed to tell neighbouring ticks apart; ``longest_s`` (the latest time
    printed beside this one) makes every label of one line take the same
    form. The value is rounded before it is split into minutes and seconds,
    so 299.99 s with one decimal reads ``5:00.0``, never ``4:60.0``.
    """
    span = abs(span_s) if span_s else abs(seconds)
    decimals = 2 if span < 2 else 1 if span < 60 else 0
    longest = max(abs(seconds), abs(longest_s or 0.0))
    sign = "-" if seconds < 0 else ""
    scale = 10**decimals
    whole, fraction = divmod(int(round(abs(seconds) * scale)), scale)
    digits = f".{fraction:0{decimals}d}" if decimals else ""
    if round(longest * scale) < 60 * scale and (span_s is None or span_s < 60):
        return f"{sign}{whole}{digits}s"
    h, rem = divmod(whole, 3600)
    m, sec = divmod(rem, 60)
    tail = f"{sec:02d}{digits}"
    long_view = (span_s is not None and span_s >= 3600) or round(longest) >= 3600
    return f"{sign}{h}:{m:02d}:{tail}" if h or long_view else f"{sign}{m}:{tail}"


def format_stretch(start_s: float, end_s: float, longest_s: float) -> str:
    """A flagged stretch in tenths of a second, in the form the record's length calls for (``14.0s-15.0s``)."""
    return f"{format_clock(start_s, 10.0, longest_s)}-{format_clock(end_s, 10.0, longest_s)}"


def format_window(start_s: float, end_s: float) -> str:
    """``start-end`` of a window, both in one form (``55.0s-1:05.0`` never happens)."""
    span = end_s - start_s
    return f"{format_clock(start_s, span, end_s)}-{format_clock(end_s, span, end_s)}"


def format_value(value: float, width: int = Y_LABEL_WIDTH - 1) -> str:
    """Format an amplitude compactly: 4 significant digits when they fit in ``width`` characters.

    Falls back to fewer digits, then to exponent form, so a tick label never
    exceeds ``width`` (fixed-width labels keep stacked plots aligned).
    """
    if value == 0 or not math.isfinite(value):
        return f"{value:g}"[:width]
    magnitude = abs(value)
    candidates = []
    if 1e-3 <= magnitude < 1e6:
        digits = max(0, 3 - int(math.floor(math.log10(magnitude))))
        candidates += [f"{value:.{d}f}" for d in range(min(digits, 4), -1, -1)]
    candidates += [f"{value:.{d}e}".replace("e+0", "e+").replace("e-0", "e-") for d in (2, 1, 0)]
    for text in candidates:
        if len(text) <= width and float(text) != 0:
            return text
    return candidates[-1][:width]


def nice_ticks(low: float, high: float, max_ticks: int) -> np.ndarray:
    """Round tick positions (1, 2, 5 x 10^k steps) inside ``[low, high]``.

    Common practice for axis labelling (the "nice numbers" rule of thumb).
    """
    span = high - low
    if span <= 0 or max_ticks < 1:
        return np.array([low])
    raw = span / max_ticks
    power = 10 ** math.floor(math.log10(raw))
    step = next(m * power for m in (1, 2, 5, 10) if m * power >= raw)
    if span > 90:  # minutes and hours read better on clock-friendly steps
        for clock_step in (10, 15, 20, 30, 60, 120, 300, 600, 900, 1800, 3600, 7200, 10800, 21600):
            if clock_step >= raw:
                step = clock_step
                break
    first = math.ceil(low / step) * step
    return np.arange(first, high + step * 1e-9, step)


def _y_range(low: float, high: float) -> tuple[float, float]:
    if not (math.isfinite(low) and math.isfinite(high)):
        return -1.0, 1.0
    if high - low < 1e-12:
        pad = max(abs(high), 1.0) * 0.05
        return low - pad, high + pad
    return low, high


def _padded(label: str) -> str:
    return label[-(Y_LABEL_WIDTH - 1) :].rjust(Y_LABEL_WIDTH - 1) + " "


def _trace_style(name: str, colour: bool) -> Style | None:
    if not colour:
        return None
    red, green, blue = TRACE_COLOURS[name]
    return Style(color=f"rgb({red},{green},{blue})")


def _label(text: str, colour: bool) -> Text:
    return Text(_padded(text), style=TICK_STYLE if colour else "", no_wrap=True)


def _tick_row(x_low: float, x_high: float, ticks, columns: int, colour: bool) -> Text:
    """The time-axis row: tick labels left-aligned at their column, none overlapping."""
    row = [" "] * columns
    span = (x_high - x_low) or 1.0
    free_from = 0
    positions, labels = ticks
    for position, label in zip(positions, labels):
        column = int(round((float(position) - x_low) / span * (columns - 1)))
        if column < free_from or column + len(label) > columns:
            continue
        row[column : column + len(label)] = list(label)
        free_from = column + len(label) + 1
    line = Text(" " * CANVAS_OFFSET, no_wrap=True)
    line.append("".join(row), style=TICK_STYLE if colour else "")
    return line


def _render_plot(
    name: str,
    series,
    x_low: float,
    x_high: float,
    y_low: float,
    y_high: float,
    columns: int,
    height: int,
    x_ticks,
    colour: bool,
    verticals: tuple[float, ...] = (),
) -> PlotText:
    """One plot: ``height`` rows (the last one holds the time ticks when ``x_ticks`` is given)."""
    canvas_rows = max(height - (1 if x_ticks is not None else 0), 1)
    marks = Style(color="rgb({},{},{})".format(*COLOUR.marks)) if colour else Style(dim=True)
    canvas = render_series(series, x_low, x_high, y_low, y_high, columns, canvas_rows, verticals, marks)
    lines = []
    for index, row in enumerate(canvas):
        if index == 0:
            label = _label(format_value(y_high), colour)
        elif index == canvas_rows - 1:
            label = _label(format_value(y_low), colour)
        else:
            label = Text(" " * CANVAS_OFFSET, no_wrap=True)
        lines.append(label + row)
    if x_ticks is not None:
        lines.append(_tick_row(x_low, x_high, x_ticks, columns, colour))
    return PlotText(name, tuple(lines), y_low, y_high)


def render_trace_plots(
    traces: TracePyramids,
    start_s: float,
    span_s: float,
    width: int,
    heights: tuple[int, int, int],
    colour: bool = True,
    regions: Regions = NO_REGIONS,
    only_original: bool = False,
) -> TracePlots:
    """Render original, cleaned and removed for one time window.

    Parameters
    ----------
    traces : TracePyramids
        The channel to draw.
    start_s, span_s : float
        Window start and width in seconds (clipped to the record).
    width : int
        Plot width in terminal columns (tick labels included).
    heights : (int, int, int)
        Rows of each plot; the last one also carries the time tick labels
        (one row of it).
    colour : bool
        False gives plain text (for ``NO_COLOR`` terminals).
    regions : Regions
        Flagged stretches, turned into a per-column flag strip.
    only_original : bool
        Draw the original alone over all the rows (a record without a cleaned run).

    Returns
    -------
    TracePlots
    """
    fs = traces.fs
    n = len(traces.original)
    span_n = max(int(round(span_s * fs)), 2)
    start_n = int(round(start_s * fs))
    start_n = min(max(start_n, 0), max(n - span_n, 0))
    stop_n = min(start_n + span_n, n)
    x_low, x_high = start_n / fs, max(stop_n - 1, start_n + 1) / fs
    columns = canvas_columns(width)
    bins = 2 * columns
    envs = {
        name: getattr(traces, name).reduce(start_n, stop_n, bins) for name in ("original", "cleaned", "removed")
    }
    shared_low = float(min(envs["original"].bin_min.min(), envs["cleaned"].bin_min.min()))
    shared_high = float(max(envs["original"].bin_max.max(), envs["cleaned"].bin_max.max()))
    shared = _y_range(shared_low, shared_high)
    removed = _y_range(float(envs["removed"].bin_min.min()), float(envs["removed"].bin_max.max()))
    orig_ptp = float(envs["original"].bin_max.max() - envs["original"].bin_min.min())
    removed_ptp = float(envs["removed"].bin_max.max() - envs["removed"].bin_min.min())
    ratio = removed_ptp / orig_ptp if orig_ptp > 0 else 0.0

    tick_pos = nice_ticks(x_low, x_high, max(1, columns // 12))
    tick_labels = [format_clock(t, x_high - x_low, x_high) for t in tick_pos]
    plots = []
    if only_original:  # no cleaned run yet: the original alone, over the whole height
        env = envs["original"]
        y_low, y_high = _y_range(float(env.bin_min.min()), float(env.bin_max.max()))
        series = [(env.times(fs), env.values, _trace_style("original", colour), False)]
        plot = _render_plot("original", series, x_low, x_high, y_low, y_high, columns, sum(heights),
                            (tick_pos, tick_labels), colour)
        return TracePlots(x_low, x_high, (plot,), 0.0, flag_strip(regions, x_low, x_high, columns), columns)
    for index, name in enumerate(("original", "cleaned", "removed")):
        env = envs[name]
        y_low, y_high = removed if name == "removed" else shared
        last = index == 2
        series = [(env.times(fs), env.values, _trace_style(name, colour), False)]
        ticks = (tick_pos, tick_labels) if last else None
        plots.append(_render_plot(name, series, x_low, x_high, y_low, y_high, columns, heights[index], ticks, colour))
    strip = flag_strip(regions, x_low, x_high, columns)
    return TracePlots(x_low, x_high, tuple(plots), ratio, strip, columns)


def flag_strip(regions: Regions, x_low: float, x_high: float, columns: int) -> tuple[str, ...]:
    """Per canvas column, the worst severity (``""``, ``warn``, ``fail``) of the regions it overlaps.

    Vectorised: each severity level marks its columns with a difference array
    (+1 at a region's first column, -1 after its last) and a cumulative sum.
    """
    span = x_high - x_low
    if span <= 0 or len(regions) == 0:
        return ("",) * columns
    inside = (regions.end_s >= x_low) & (regions.start_s <= x_high)
    scale = (columns - 1) / span
    first = np.floor((np.maximum(regions.start_s[inside], x_low) - x_low) * scale).astype(np.int64)
    last = np.ceil((np.minimum(regions.end_s[inside], x_high) - x_low) * scale).astype(np.int64)
    first = np.clip(first, 0, columns - 1)
    last = np.clip(last, first, columns - 1)
    codes = regions.code[inside]
    worst = np.zeros(columns, dtype=np.int8)
    for level in (1, 2):
        chosen = codes == level
        marks = np.zeros(columns + 1, dtype=np.int64)
        np.add.at(marks, first[chosen], 1)
        np.add.at(marks, last[chosen] + 1, -1)
        worst[np.cumsum(marks[:-1]) > 0] = level
    return tuple(_SEVERITY_NAMES[c] for c in worst)


def render_beat_overlay(
    time_s,
    original_template,
    cleaned_template,
    width: int,
    heights: tuple[int, int],
    colour: bool = True,
    marks_s: tuple[float, ...] = (),
    mark_names: tuple[str, ...] = (),
) -> tuple[PlotText, PlotText]:
    """Render the averaged beat: original and cleaned templates overlaid, and their difference.

    Parameters
    ----------
    time_s : array_like
        Time of each template sample relative to the R peak, in seconds.
    original_template, cleaned_template : array_like
        The averaged beats (same length as ``time_s``).
    width : int
        Plot width in columns.
    heights : (int, int)
        Rows of the overlay plot and of the difference plot (the latter
        also carries the time ticks, in milliseconds).
    colour : bool
        False gives plain text; the cleaned template is then drawn with dots
        so the two stay distinguishable without colour.
    marks_s, mark_names : tuple
        Times (s, relative to R) marked by dotted vertical lines, and their
        names written on the time axis in place of nearby ticks (the J point
        and the ST reading point).

    Returns
    -------
    (PlotText, PlotText)
        The overlay and the difference (original minus cleaned template).
    """
    t = np.asarray(time_s, dtype=np.float64)
    orig = np.asarray(original_template, dtype=np.float32)
    clean = np.asarray(cleaned_template, dtype=np.float32)
    diff = orig - clean
    columns = canvas_columns(width)
    if t.size > 4 * columns:  # templates are short; thin only if the plot is tiny
        from tracevet.app.envelope import reduce_window

        def thin(y):
            env = reduce_window(y, 0, y.size, 2 * columns)
            return t[env.positions], env.values

    else:

        def thin(y):
            return t, y

    low, high = _y_range(float(min(orig.min(), clean.min())), float(max(orig.max(), clean.max())))
    d_low, d_high = _y_range(float(diff.min()), float(diff.max()))
    x_low, x_high = float(t[0]), float(t[-1])
    ms = nice_ticks(x_low * 1000, x_high * 1000, max(1, columns // 10))
    ticks = (ms / 1000.0, [f"{m:g}ms" for m in ms])
    marks = tuple(float(m) for m in marks_s)
    if marks:
        labels = list(ticks[1])
        positions = list(ticks[0])
        for name, position in zip(mark_names, marks):  # the marks' names take the place of nearby ticks
            keep = [abs(p - position) * 1000 > 30 for p in positions]
            positions = [p for p, k in zip(positions, keep) if k] + [position]
            labels = [label for label, k in zip(labels, keep) if k] + [name]
        order = np.argsort(positions)
        ticks = (np.array([positions[i] for i in order], dtype=np.float64), [labels[i] for i in order])
    overlay_series = [
        (*thin(orig), _trace_style("original", colour), False),
        (*thin(clean), _trace_style("cleaned", colour), not colour),
    ]
    overlay = _render_plot("beat", overlay_series, x_low, x_high, low, high, columns, heights[0], None, colour, marks)
    difference = _render_plot(
        "beat difference",
        [(*thin(diff), _trace_style("removed", colour), False)],
        x_low, x_high, d_low, d_high, columns, heights[1], ticks, colour, marks,
    )
    return overlay, difference
