"""Line plots drawn with Unicode braille cells, straight from numpy into rich Text.

A terminal cell holds one braille pattern (U+2800-U+28FF): two columns by
four rows of dots, so a canvas of ``C`` columns and ``R`` rows is a grid of
``2C x 4R`` dots. Dot numbering follows the Unicode Standard (Braille
Patterns block): dots 1, 2, 3, 7 down the left column and 4, 5, 6, 8 down
the right one, bit ``n - 1`` for dot ``n``.

A trace arrives already reduced to a few points per dot column (the min/max
envelope of :mod:`tracevet.app.envelope`), so each dot column is lit from
the lowest to the highest point that falls in it, extended to the last
point of the column before so the line stays connected (the usual way of
drawing a dense signal as a line: common practice in waveform displays).
Everything is vectorised; a plot costs well under a millisecond whatever
the record length, which is what keeps the review app's redraws fast.
"""

from __future__ import annotations

import numpy as np
from rich.style import Style
from rich.text import Text

BRAILLE_BASE = 0x2800
# Bit of each dot, indexed [row within the cell (0-3), column within the cell (0-1)].
DOT_BITS = np.array([[0x01, 0x08], [0x02, 0x10], [0x04, 0x20], [0x40, 0x80]], dtype=np.int32)


def dot_columns(x, y, x_low: float, x_high: float, y_low: float, y_high: float, width: int, height: int):
    """Per dot column, the lowest and highest dot row the line passes through (-1 where it does not).

    ``x`` must be sorted. Rows count from the top (row 0 is ``y_high``).
    Columns with no point between two points are filled by linear
    interpolation, so a zoomed-in line has no gaps.
    """
    x = np.asarray(x, dtype=np.float64)
    y = np.asarray(y, dtype=np.float64)
    lo = np.full(width, -1, dtype=np.int64)
    hi = np.full(width, -1, dtype=np.int64)
    if x.size == 0 or width < 1 or height < 1:
        return lo, hi
    x_span = (x_high - x_low) or 1.0
    y_span = (y_high - y_low) or 1.0
    px = np.clip(np.round((x - x_low) / x_span * (width - 1)), 0, width - 1).astype(np.int64)
    py = np.clip(np.round((y_high - y) / y_span * (height - 1)), 0, height - 1).astype(np.int64)
    inside = (x >= x_low - 1e-12 * abs(x_span)) & (x <= x_high + 1e-12 * abs(x_span))
    columns, first = np.unique(px[inside], return_index=True)
    if columns.size == 0:
        return lo, hi
    py_in = py[inside]
    lo[columns] = np.minimum.reduceat(py_in, first)
    hi[columns] = np.maximum.reduceat(py_in, first)
    last = np.append(first[1:], py_in.size) - 1
    last_row = py_in[last]
    # empty columns between points: the interpolated row
    empty = np.setdiff1d(np.arange(columns[0], columns[-1] + 1), columns)
    if empty.size:
        rows = np.round(np.interp(empty, columns, last_row.astype(np.float64))).astype(np.int64)
        lo[empty] = rows
        hi[empty] = rows
    # connect each column to the end of the one before
    drawn = np.flatnonzero(lo >= 0)
    tail = hi.copy()
    tail[columns] = last_row
    previous = tail[drawn[:-1]]
    lo[drawn[1:]] = np.minimum(lo[drawn[1:]], previous)
    hi[drawn[1:]] = np.maximum(hi[drawn[1:]], previous)
    return lo, hi


def dot_grid(lo: np.ndarray, hi: np.ndarray, height: int) -> np.ndarray:
    """Boolean ``height x width`` dot grid lit between ``lo`` and ``hi`` in every column."""
    rows = np.arange(height)[:, None]
    return (rows >= lo[None, :]) & (rows <= hi[None, :]) & (lo[None, :] >= 0)


def cells(grid: np.ndarray) -> np.ndarray:
    """Braille code points (``rows x columns``) of a dot grid whose shape is a multiple of 4 x 2."""
    height, width = grid.shape
    blocks = grid.reshape(height // 4, 4, width // 2, 2).astype(np.int32)
    return BRAILLE_BASE + np.einsum("rpcq,pq->rc", blocks, DOT_BITS)


def canvas_text(codes: np.ndarray, owner: np.ndarray, styles: list[Style | None]) -> list[Text]:
    """One rich Text per canvas row; ``owner`` gives the series index styling each cell (-1 for blank)."""
    lines = []
    blank = chr(BRAILLE_BASE)
    for row_codes, row_owner in zip(codes, owner):
        chars = "".join(map(chr, row_codes.tolist()))
        text = Text(chars.replace(blank, " "), no_wrap=True)
        only = styles[0] if len(styles) == 1 else None
        if only is not None:
            text.stylize(only)
        elif any(s is not None for s in styles):
            # one span per run of cells drawn by the same series; blank cells join the run before them
            filled = np.maximum.accumulate(np.where(row_owner >= 0, np.arange(row_owner.size), 0))
            row_owner = row_owner[filled]
            change = np.flatnonzero(np.diff(row_owner)) + 1
            starts = np.concatenate(([0], change))
            ends = np.concatenate((change, [row_owner.size]))
            for start, end in zip(starts.tolist(), ends.tolist()):
                index = int(row_owner[start])
                style = styles[index] if index >= 0 else None
                if style is not None:
                    text.stylize(style, start, end)
        lines.append(text)
    return lines


def render_series(
    series: list[tuple[np.ndarray, np.ndarray, Style | None, bool]],
    x_low: float,
    x_high: float,
    y_low: float,
    y_high: float,
    columns: int,
    rows: int,
    verticals: tuple[float, ...] = (),
    vertical_style: Style | None = None,
) -> list[Text]:
    """Draw line series on one braille canvas of ``columns x rows`` cells.

    ``series`` holds ``(x, y, style, dotted)``; a later series draws over an
    earlier one where they share a cell (the cell takes its style). A dotted
    series lights every other dot column only (told apart without colour).
    ``verticals`` are x positions marked by a dotted vertical line.
    """
    width, height = 2 * columns, 4 * rows
    union = np.zeros((height, width), dtype=bool)
    owner = np.full((rows, columns), -1, dtype=np.int64)
    styles: list[Style | None] = []
    for index, (x, y, style, dotted) in enumerate(series):
        lo, hi = dot_columns(x, y, x_low, x_high, y_low, y_high, width, height)
        grid = dot_grid(lo, hi, height)
        if dotted:
            grid[:, 1::2] = False
            grid[1::2, :] = False
        union |= grid
        owner[grid.reshape(rows, 4, columns, 2).any(axis=(1, 3))] = index
        styles.append(style)
    if verticals:
        span = (x_high - x_low) or 1.0
        marks = np.zeros((height, width), dtype=bool)
        for position in verticals:
            column = int(round((position - x_low) / span * (width - 1)))
            if 0 <= column < width:
                marks[::3, column] = True
        marks &= ~union
        mark_cells = marks.reshape(rows, 4, columns, 2).any(axis=(1, 3)) & (owner < 0)
        union |= marks
        owner[mark_cells] = len(styles)
        styles.append(vertical_style)
    return canvas_text(cells(union), owner, styles)
