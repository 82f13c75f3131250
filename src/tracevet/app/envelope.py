"""Min/max envelope reduction of long traces for character plots.

A terminal column can show a handful of points at most, while a 24-hour
record at 250 Hz holds 21.6 million samples per channel. Thinning by taking
every k-th sample (decimation without care) drops narrow peaks, so R peaks
would flicker in and out as the reviewer zooms. Instead each plot bin keeps
its minimum *and* its maximum, at the sample positions where they occur:
the drawn trace then spans every sample of the bin, and every sample that is
the extreme of its bin (an R peak, a spike) is drawn at its exact value and
time.

To make building a window cost O(columns) whatever the record length, a
:class:`MinMaxPyramid` is computed once per trace: level ``k`` holds, for
every block of ``factor**k`` consecutive samples, the block's minimum and
maximum (float32) and their sample positions (int64). A window is reduced by
choosing the coarsest level whose blocks are no longer than one bin, so each
bin covers at most ``factor + 1`` blocks.

This is the min/max envelope used for drawing dense signals (common
practice in waveform viewers and oscilloscope displays); no published
reference is claimed beyond that. Pure numpy, no user-interface import.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

DEFAULT_FACTOR = 16


@dataclass(frozen=True)
class Envelope:
    """A reduced trace ready to plot.

    Attributes
    ----------
    positions : numpy.ndarray
        Sample indices (int64), strictly increasing.
    values : numpy.ndarray
        Sample values (float32) at ``positions``.
    bin_edges : numpy.ndarray
        Sample index where each bin starts, plus the end of the last bin
        (int64, length ``n_bins + 1``). Every sample ``i`` with
        ``bin_edges[0] <= i < bin_edges[-1]`` belongs to exactly one bin.
    bin_min, bin_max : numpy.ndarray
        Exact minimum and maximum of the samples in each bin (float32).
    """

    positions: np.ndarray
    values: np.ndarray
    bin_edges: np.ndarray
    bin_min: np.ndarray
    bin_max: np.ndarray

    def times(self, fs: float) -> np.ndarray:
        """Return the time in seconds of every kept point (``positions / fs``)."""
        return self.positions / float(fs)

    def shifted(self, offset: int) -> "Envelope":
        """Return the same envelope with every sample index moved by ``offset``."""
        if offset == 0:
            return self
        return Envelope(self.positions + offset, self.values, self.bin_edges + offset, self.bin_min, self.bin_max)


class MinMaxPyramid:
    """Multi-resolution min/max summary of one trace.

    Parameters
    ----------
    samples : array_like
        The 1-D trace. It is kept as a float32 array (a view when it already
        is float32).
    factor : int
        Number of blocks of one level merged into a block of the next
        (default 16). Levels are built until a level holds at most
        ``factor`` blocks.

    Notes
    -----
    Memory: about ``(8 + 16) / (factor - 1)`` bytes per sample on top of the
    trace itself, i.e. 1.6 bytes per sample for ``factor=16``.
    """

    def __init__(self, samples, factor: int = DEFAULT_FACTOR):
        # float32 input is kept as given, even a strided view (one column of a
        # multi-channel record): no full-length copy per trace; only the first
        # merge copies it, transiently
        data = np.asarray(samples, dtype=np.float32)
        if data.ndim != 1:
            raise ValueError(f"samples must be 1-D, got {data.ndim}-D")
        if data.size == 0:
            raise ValueError("samples must not be empty")
        if int(factor) < 2:
            raise ValueError(f"factor must be at least 2, got {factor}")
        self.data = data
        self.factor = int(factor)
        # levels[k] = (mins, min_pos, maxs, max_pos) for blocks of factor**k samples, k >= 1
        self.levels: list[tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]] = []
        mins, maxs = data, data
        min_pos = max_pos = None  # level 0: the position is the index itself
        while mins.size > self.factor:
            mins, min_pos = _merge(mins, min_pos, self.factor, np.argmin)
            maxs, max_pos = _merge(maxs, max_pos, self.factor, np.argmax)
            self.levels.append((mins, min_pos, maxs, max_pos))

    def __len__(self) -> int:
        return int(self.data.size)

    def _level_arrays(self, level: int):
        if level == 0:
            return self.data, None, self.data, None
        return self.levels[level - 1]

    def reduce(self, start: int, stop: int, n_bins: int) -> Envelope:
        """Reduce samples ``start:stop`` to at most ``2 * n_bins`` points.

        When the window holds no more than ``2 * n_bins`` samples they are
        all returned (one bin per sample). Otherwise the window is split
        into ``n_bins`` bins whose edges fall on block boundaries of the
        chosen level (so the first edge may move left and the last edge
        right by less than one bin); each bin contributes its minimum and
        its maximum at their exact positions.

        Parameters
        ----------
        start, stop : int
            Sample range; clipped to the trace.
        n_bins : int
            Number of bins, typically the number of plot pixels across.

        Returns
        -------
        Envelope
        """
        n = self.data.size
        start = int(min(max(start, 0), n - 1))
        stop = int(min(max(stop, start + 1), n))
        n_bins = max(int(n_bins), 1)
        width = stop - start
        if width <= 2 * n_bins:
            positions = np.arange(start, stop, dtype=np.int64)
            values = self.data[start:stop]
            return Envelope(positions, values, np.arange(start, stop + 1, dtype=np.int64), values, values)

        samples_per_bin = width / n_bins
        level = 0
        while level < len(self.levels) and self.factor ** (level + 1) <= samples_per_bin:
            level += 1
        block = self.factor**level
        mins, min_pos, maxs, max_pos = self._level_arrays(level)
        first_block = start // block
        end_block = min(-(-stop // block), mins.size)
        edges_blocks = np.unique(np.linspace(first_block, end_block, n_bins + 1).round().astype(np.int64))
        bin_starts = edges_blocks[:-1]
        counts = np.diff(edges_blocks)
        kmax = int(counts.max())
        # Padded (bins x kmax) gather of block indices; unused slots masked out.
        offsets = np.arange(kmax, dtype=np.int64)
        idx = bin_starts[:, None] + offsets[None, :]
        valid = offsets[None, :] < counts[:, None]
        idx = np.where(valid, idx, bin_starts[:, None])
        block_min = np.where(valid, mins[idx], np.inf)
        block_max = np.where(valid, maxs[idx], -np.inf)
        rows = np.arange(idx.shape[0])
        amin = idx[rows, np.argmin(block_min, axis=1)]
        amax = idx[rows, np.argmax(block_max, axis=1)]
        bin_min = mins[amin]
        bin_max = maxs[amax]
        pmin = amin if min_pos is None else min_pos[amin]
        pmax = amax if max_pos is None else max_pos[amax]
        positions = np.stack([pmin, pmax], axis=1).astype(np.int64)
        values = np.stack([bin_min, bin_max], axis=1)
        order = np.argsort(positions, axis=1, kind="stable")
        positions = np.take_along_axis(positions, order, axis=1).ravel()
        values = np.take_along_axis(values, order, axis=1).ravel()
        keep = np.ones(positions.size, dtype=bool)
        keep[1:] = positions[1:] != positions[:-1]
        sample_edges = np.minimum(edges_blocks * block, n)
        return Envelope(positions[keep], values[keep].astype(np.float32), sample_edges, bin_min, bin_max)


def _merge(values: np.ndarray, positions: np.ndarray | None, factor: int, argfunc):
    """Merge blocks of ``factor`` entries into one; return (extremes, their positions).

    The tail is padded with its own last entry, which can neither create a
    new extreme nor win a tie (``argmin``/``argmax`` return the first hit).
    """
    n = values.size
    n_blocks = -(-n // factor)
    pad = n_blocks * factor - n
    if pad:
        values = np.concatenate([values, np.repeat(values[-1:], pad)])
        if positions is not None:
            positions = np.concatenate([positions, np.repeat(positions[-1:], pad)])
    grid = values.reshape(n_blocks, factor)
    local = argfunc(grid, axis=1)
    flat = np.arange(n_blocks, dtype=np.int64) * factor + local
    merged_pos = flat if positions is None else positions[flat]
    return grid[np.arange(n_blocks), local], merged_pos.astype(np.int64)


def reduce_window(samples, start: int, stop: int, n_bins: int) -> Envelope:
    """One-off min/max reduction of ``samples[start:stop]`` without keeping a pyramid.

    Convenience for short traces (beat templates, tests); for long records
    build a :class:`MinMaxPyramid` once and call its ``reduce``.
    """
    start = max(int(start), 0)
    stop = max(int(stop), start + 1)
    return MinMaxPyramid(np.asarray(samples)[start:stop]).reduce(0, stop - start, n_bins).shifted(start)
