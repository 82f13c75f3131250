"""Preparing the removed part of beat windows: slow-trend removal, row smoothing, slope noise."""

from __future__ import annotations

import numpy as np

from tracevet.assessment.beats import median_standard_error
from tracevet.assessment.fiducials import SLOPE_SMOOTH_S


def detrended(rows: np.ndarray) -> np.ndarray:
    """Remove the least-squares line from each row (last axis)."""
    m = rows.shape[-1]
    t = np.arange(m, dtype=np.float64) - (m - 1) / 2.0
    centred = rows - rows.mean(axis=-1, keepdims=True)
    denom = float(np.sum(t * t))
    if denom == 0:
        return centred
    slope = (centred @ t) / denom
    return centred - slope[..., None] * t


def remove_slow_trend(removed: np.ndarray, iso: slice, fs: float) -> np.ndarray:
    """Subtract from each beat's removed window the parabola through three quiet anchors.

    Anchors: the mean of the first 30 ms (T-P segment before the P wave), of
    the isoelectric window and of the last 30 ms (T-P segment after the T
    wave). Baseline wander taken out by the cleaning differs from beat to beat
    and is nearly a parabola over one beat, so this keeps it from masking the
    beat-locked part of the removed component (knot-based baseline
    estimation, cf. cubic-spline baseline through PR knots; common practice).
    """
    n_beats, m = removed.shape
    edge = max(1, int(round(0.03 * fs)))
    t = np.arange(m, dtype=np.float64)
    knots = np.array([(edge - 1) / 2.0, (iso.start + iso.stop - 1) / 2.0, m - 1 - (edge - 1) / 2.0])
    if not (knots[0] < knots[1] < knots[2]):
        return removed - removed[:, iso].mean(axis=1, keepdims=True)
    values = np.stack(
        [removed[:, :edge].mean(axis=1), removed[:, iso].mean(axis=1), removed[:, m - edge :].mean(axis=1)], axis=1
    )
    # Lagrange basis of the parabola through the three knots.
    basis = np.empty((3, m))
    for i in range(3):
        others = [knots[j] for j in range(3) if j != i]
        basis[i] = (t - others[0]) * (t - others[1]) / ((knots[i] - others[0]) * (knots[i] - others[1]))
    return removed - values @ basis


def slope_noise(removed: np.ndarray, fs: float) -> float:
    """Typical s.e. of the template slope, from the beat-to-beat spread of the removed part."""
    slopes = np.gradient(smooth_rows_same(removed, int(round(SLOPE_SMOOTH_S * fs))), axis=1)
    return float(np.median(median_standard_error(slopes)))


def smooth_rows_same(rows: np.ndarray, width: int) -> np.ndarray:
    """Centred moving average along each row, edges repeated (same length)."""
    width = max(1, int(width) | 1)
    if width == 1:
        return rows
    half = width // 2
    padded = np.concatenate([np.repeat(rows[:, :1], half, axis=1), rows, np.repeat(rows[:, -1:], half, axis=1)], axis=1)
    csum = np.concatenate([np.zeros((rows.shape[0], 1)), np.cumsum(padded, axis=1)], axis=1)
    return (csum[:, width:] - csum[:, :-width]) / width
