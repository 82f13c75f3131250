"""Whole-trace checks that do not need beats: clipping, edge artefacts, overall PRDN.

Vectorised over the trace; no per-sample Python loops.
"""

from __future__ import annotations

import numpy as np

# Window (s) for the edge comparison and the most interior windows sampled.
EDGE_WINDOW_S = 0.5
MAX_INTERIOR_WINDOWS = 2000
# Percentile of the interior windows an edge is compared with.
EDGE_REFERENCE_PERCENTILE = 99.5


def flat_runs_at_extremes(signal: np.ndarray, fs: float, min_ms: float = 4.0) -> np.ndarray:
    """Runs of samples stuck at the trace's maximum or minimum.

    A run counts when at least ``min_run_samples(fs, min_ms)`` consecutive
    samples lie within ``1e-7`` of the range from the global maximum (or
    minimum): the signature of clipping (common practice).

    Returns
    -------
    numpy.ndarray
        ``(n_runs, 2)`` int64 array of [start, end) sample indices.
    """
    signal = np.asarray(signal)
    hi, lo = float(signal.max()), float(signal.min())
    span = hi - lo
    min_run = min_run_samples(fs, min_ms)
    if span == 0:
        return np.array([[0, signal.size]], dtype=np.int64) if signal.size >= min_run else np.empty((0, 2), np.int64)
    tol = 1e-7 * span
    runs = []
    for where in (np.flatnonzero(signal >= hi - tol), np.flatnonzero(signal <= lo + tol)):
        # Runs of consecutive indices (the candidates are few: no full-length masks kept).
        breaks = np.flatnonzero(np.diff(where) != 1)
        starts = where[np.concatenate([[0], breaks + 1])] if where.size else where
        ends = where[np.concatenate([breaks, [where.size - 1]])] + 1 if where.size else where
        keep = (ends - starts) >= min_run
        runs.append(np.stack([starts[keep], ends[keep]], axis=1))
    return np.concatenate(runs).astype(np.int64)


def min_run_samples(fs: float, min_ms: float = 4.0) -> int:
    """Shortest flat run that can be clipping: ``max(3, min_ms * fs / 1000)`` samples, 2 below 250 Hz.

    Below 250 Hz three samples last 12-24 ms, longer than the part of an R
    peak a clipper cuts off (common practice).
    """
    return max(2 if fs < 250.0 else 3, int(np.ceil(min_ms / 1000.0 * fs)))


def clipped_runs(original: np.ndarray, cleaned: np.ndarray, fs: float) -> np.ndarray:
    """Flat runs at the cleaned trace's extremes under which the original goes beyond the flat level.

    A flat run of the cleaned trace at its maximum (minimum) is clipping only
    if the original, averaged over the run and less the local baseline the
    cleaning removed (median of the removed component within 0.25 s), lies
    above (below) the flat level by more than ``max(3 s.e., 2 % of the cleaned trace's range)``,
    with s.e. = sigma / sqrt(run length) and sigma the robust (MAD of first
    differences / sqrt 2) noise of the removed component within 0.25 s of the
    run. A clipper cuts the original off at the level, so the original lies
    beyond it throughout the run; a staircase reconstruction (Haar) holds the
    local mean of the original, which lies on both sides of its level
    (common practice). Runs the original itself has (a saturated recording)
    do not count either: there the original sits at the level.

    Returns
    -------
    numpy.ndarray
        ``(n_runs, 2)`` int64 array of [start, end) sample indices.
    """
    runs = flat_runs_at_extremes(cleaned, fs)
    if runs.shape[0] == 0:
        return runs
    hi, lo = float(np.max(cleaned)), float(np.min(cleaned))
    span = hi - lo
    reach = max(4, int(round(0.25 * fs)))
    n = cleaned.size
    keep = np.zeros(runs.shape[0], dtype=bool)
    # One loop step per run: runs at the global extremes are few.
    for i, (start, end) in enumerate(runs.tolist()):
        a, b = max(0, start - reach), min(n, end + reach)
        removed = original[a:b].astype(np.float64) - cleaned[a:b].astype(np.float64)
        steps = np.diff(removed)
        sigma = 1.4826 * float(np.median(np.abs(steps - np.median(steps)))) / np.sqrt(2.0) if steps.size else 0.0
        level = float(cleaned[start])
        polarity = 1.0 if level >= hi - 1e-7 * span else -1.0
        # The removed part's local median is the baseline (wander) the
        # cleaning took out there; only what the original has beyond it counts.
        offset = float(np.median(removed))
        excess = polarity * (float(np.mean(original[start:end], dtype=np.float64)) - offset - level)
        keep[i] = excess > max(3.0 * sigma / np.sqrt(end - start), 0.02 * span)
    return runs[keep]


def _bend(rows: np.ndarray, smooth: int) -> np.ndarray:
    """Peak-to-peak of each row after a moving average of ``smooth`` samples and its straight line removed."""
    rows = _smooth_rows(rows, smooth)
    m = rows.shape[1]
    t = np.arange(m, dtype=np.float64) - (m - 1) / 2.0
    centred = rows - rows.mean(axis=1, keepdims=True)
    flat = centred - np.outer(centred @ t / float(t @ t), t)
    return np.ptp(flat, axis=1)


def _off_line(rows: np.ndarray, far_second_half: bool) -> np.ndarray:
    """Peak-to-peak of each row after removing the straight line fitted on one half.

    The line is a least-squares fit, extended over the whole row.

    Fitted on the half away from the record's edge, the line follows a slow
    ramp there and extends it to the edge: a ramp leaves nothing, a
    transient that starts at the edge keeps most of its size (common
    practice).
    """
    m = rows.shape[1]
    half = slice(m // 2, m) if far_second_half else slice(0, m // 2)
    t = np.arange(m, dtype=np.float64)
    th = t[half] - t[half].mean()
    part = rows[:, half]
    slope = (part - part.mean(axis=1, keepdims=True)) @ th / float(th @ th)
    line = part.mean(axis=1, keepdims=True) + np.outer(slope, t - t[half].mean())
    return np.ptp(rows - line, axis=1)


def _off_level(rows: np.ndarray, far_second_half: bool) -> np.ndarray:
    """Largest departure of each row from the mean of its half away from the edge (a ramp or swoop counts)."""
    m = rows.shape[1]
    half = slice(m // 2, m) if far_second_half else slice(0, m // 2)
    return np.max(np.abs(rows - rows[:, half].mean(axis=1, keepdims=True)), axis=1)


def _smooth_rows(rows: np.ndarray, width: int) -> np.ndarray:
    """Trailing-edge-safe moving average of ``width`` along rows ('valid' part, padded at the end)."""
    if width <= 1 or rows.shape[1] <= width:
        return rows
    c = np.concatenate([np.zeros((rows.shape[0], 1)), np.cumsum(rows, axis=1)], axis=1)
    valid = (c[:, width:] - c[:, :-width]) / width
    return np.concatenate([valid, np.repeat(valid[:, -1:], width - 1, axis=1)], axis=1)


def edge_deviation(original: np.ndarray, cleaned: np.ndarray, fs: float) -> tuple[float | None, list[tuple[int, int]]]:
    """How far the removed component at the start and end exceeds its interior.

    Three views of the removed component (original minus cleaned) over the
    first and last 0.5 s, each compared with the same view of the interior
    (up to 2000 windows spread evenly) at its 99.5th percentile (the largest
    interior value for records under about 100 s); the larger excess is
    returned:

    * peak-to-peak after removing the straight line fitted on the half of
      the window away from the edge (a burst, a hold that takes the beats
      out, a step decaying from the edge; interior windows take the larger
      of both halves);
    * peak-to-peak after a 40 ms moving average (against noise) and the
      window's straight line removed: the bend of a slower transient;
    * the largest departure, after a 40 ms moving average, from the mean of
      the half of the window away from the edge: a ramp or the swoop of a
      high-pass settling at the edge counts (it moves the beats there off
      their level; the level of whole beats is judged by
      :func:`tracevet.assessment.stretches.baseline_excursions`).

    Electrode motion and wander inside
    the record are removed as steeply as at an edge, hence the reference at
    the top of the interior rather than its typical value. A cleaning that
    behaves at the edges as inside gives a value at or below zero (common
    practice).

    Returns
    -------
    (value, windows)
        ``value`` in record units (``None`` for traces shorter than 2 s) and
        the [start, end) samples of the edge windows that exceed the interior.
    """
    n = original.size
    width = max(8, int(round(EDGE_WINDOW_S * fs)))
    n_windows = n // width
    if n_windows < 4:
        return None, []
    interior = np.arange(1, n_windows - 1)
    if interior.size > MAX_INTERIOR_WINDOWS:
        interior = interior[np.linspace(0, interior.size - 1, MAX_INTERIOR_WINDOWS).round().astype(np.int64)]
    idx = interior[:, None] * width + np.arange(width)[None, :]
    inner = original[idx].astype(np.float64) - cleaned[idx].astype(np.float64)
    smooth = max(1, int(round(0.04 * fs)))
    off_line = np.maximum(_off_line(inner, True), _off_line(inner, False))
    ref_raw = float(np.percentile(off_line, EDGE_REFERENCE_PERCENTILE, method="higher"))
    ref_bend = float(np.percentile(_bend(inner, smooth), EDGE_REFERENCE_PERCENTILE, method="higher"))
    inner_smooth = _smooth_rows(inner, smooth)
    ref_level = float(np.percentile(np.maximum(_off_level(inner_smooth, True), _off_level(inner_smooth, False)),
                                    EDGE_REFERENCE_PERCENTILE, method="higher"))
    edges = [(0, width), (n - width, n)]
    values = []
    for (start, end), at_start in zip(edges, (True, False)):
        part = (original[start:end].astype(np.float64) - cleaned[start:end].astype(np.float64))[None, :]
        values.append(max(float(_off_line(part, at_start)[0]) - ref_raw, float(_bend(part, smooth)[0]) - ref_bend,
                          float(_off_level(_smooth_rows(part, smooth), at_start)[0]) - ref_level))
    return max(values), [edge for edge, value in zip(edges, values) if value > 0]


def signal_comparison(original: np.ndarray, cleaned: np.ndarray, chunk: int = 1 << 20) -> tuple[float | None, float]:
    """Whole-trace PRDN (%) and r.m.s. of the removed component (record units).

    PRDN = 100 sqrt(sum (x - y)^2 / sum (x - mean x)^2) (common practice),
    accumulated in chunks so that 24-hour traces need little memory. On a
    noisy original it mostly measures the noise removed, which is why it is
    reported but never flagged.
    """
    n = original.size
    mean = 0.0
    for start in range(0, n, chunk):
        mean += float(np.sum(original[start : start + chunk], dtype=np.float64))
    mean /= n
    num = 0.0
    den = 0.0
    for start in range(0, n, chunk):
        x = original[start : start + chunk].astype(np.float64)
        diff = x - cleaned[start : start + chunk]
        num += float(np.dot(diff, diff))
        x -= mean
        den += float(np.dot(x, x))
    removed_rms = float(np.sqrt(num / n))
    return (None if den == 0 else 100.0 * float(np.sqrt(num / den))), removed_rms
