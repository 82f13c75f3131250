"""Fiducial points of a beat template: isoelectric level, R peak, QRS bounds, J, ST, P and T.

All points are found on the ORIGINAL template and then read at the same
places on the cleaned template, so both are measured with one ruler.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class Fiducials:
    """Sample indices (into the template) of the points the measures use.

    Attributes
    ----------
    r : int
        R peak: largest deviation from the isoelectric level near the centre.
    polarity : float
        +1 when the R deflection is positive, -1 when negative.
    iso : slice
        Isoelectric (PR-segment) window.
    onset, offset : float
        QRS onset and end (J point), fractional sample positions.
    threshold : float
        Slope (record units per sample) defining the QRS bounds.
    st : slice
        ST window centred at J+80 ms (J+60 ms when RR < 0.6 s).
    st_delay_ms : float
        80 or 60.
    p, t : int or None
        P and T wave peaks in the smoothed template, or ``None`` when the
        window for that wave is empty.
    """

    r: int
    polarity: float
    iso: slice
    onset: float
    offset: float
    threshold: float
    st: slice
    st_delay_ms: float
    p: int | None
    t: int | None


def moving_average(values: np.ndarray, width: float) -> np.ndarray:
    """Centred moving average over ``width`` samples (floored, made odd), edges repeated (common practice)."""
    width = max(1, int(width) | 1)
    if width == 1 or values.size < 2:
        return values.astype(np.float64)
    half = width // 2
    padded = np.concatenate([np.full(half, values[0]), values, np.full(half, values[-1])]).astype(np.float64)
    csum = np.concatenate([[0.0], np.cumsum(padded)])
    return (csum[width:] - csum[:-width]) / width


SLOPE_SMOOTH_S = 0.02


def slope_of(template: np.ndarray, fs: float) -> np.ndarray:
    """Slope (record units per sample) of the template smoothed over 20 ms.

    A 20 ms moving average has zeros at 50, 100 and 150 Hz and damps 60 Hz
    to 16 %, so a mains residue in the template does not create slopes
    (common practice).
    """
    return np.gradient(moving_average(np.asarray(template, dtype=np.float64), SLOPE_SMOOTH_S * fs))


def find_fiducials(original: np.ndarray, centre: int, fs: float, rr_s: float, slope_noise: float) -> Fiducials:
    """Locate the fiducial points on the original template.

    Parameters
    ----------
    original : numpy.ndarray
        Original beat template.
    centre : int
        Index of the aligned beat fiducial in the template.
    fs : float
        Sampling rate (Hz).
    rr_s : float
        Median RR interval (s).
    slope_noise : float
        Typical noise of the template slope (one s.e., record units per
        sample); the QRS slope threshold is never below five times this value.

    Notes
    -----
    * R: the largest deviation from the template median within +-50 ms.
    * QRS onset and J point: where the slope (20 ms smoothing) falls below 8 %
      of the steepest QRS slope for good (see :func:`qrs_bounds`), searched
      within min(100 ms, 0.2 RR) before and min(120 ms, 0.22 RR) after R
      (slope-threshold delineation, common practice). A slope criterion does
      not depend on the baseline, so an ST deviation does not move the J point.
      The quiet run that ends the QRS lasts min(30 ms, 0.06 RR); without
      one, the bound is the first slope minimum beyond the steepest QRS slope.
    * Isoelectric level: the 20 ms of the PR segment ending 5 ms before QRS
      onset (the PQ junction; AHA/ACCF/HRS 2009 Part VI, from memory; common
      practice).
    * ST: J+80 ms, J+60 ms when RR < 0.6 s (Long-Term ST Database convention).
    * P and T: largest deviation from the isoelectric level of the 40 ms
      smoothed template in [R - min(300 ms, 0.4 RR), onset - 20 ms] and
      [J + 40 ms, R + min(500 ms, 0.62 RR)].
    """
    n = original.size
    reach = max(1, int(round(0.05 * fs)))
    lo, hi = max(0, centre - reach), min(n, centre + reach + 1)
    rough = original - np.median(original)
    r = lo + int(np.argmax(np.abs(rough[lo:hi])))
    slope = np.abs(slope_of(original, fs))
    steepest = float(slope[max(0, r - reach) : min(n, r + reach + 1)].max())
    threshold = max(0.08 * steepest, 5.0 * slope_noise)
    before = max(1, int(round(min(0.10, 0.20 * rr_s) * fs)))
    after = max(1, int(round(min(0.12, 0.22 * rr_s) * fs)))
    onset, offset = qrs_bounds(slope, r, threshold, before, after, fs, rr_s=rr_s, fallback="minimum")
    width = max(1, int(round(0.02 * fs)))
    iso_hi = max(1, int(np.floor(onset)) - int(round(0.005 * fs)))
    iso = slice(max(0, iso_hi - width), iso_hi)
    level = float(np.mean(original[iso]))
    deviation = original - level
    polarity = 1.0 if deviation[r] >= 0 else -1.0
    st_delay_ms = 80.0 if rr_s >= 0.6 else 60.0
    st_centre = min(n - 1, int(round(offset + st_delay_ms / 1000.0 * fs)))
    half = max(1, int(round(0.01 * fs)))
    st = slice(max(0, st_centre - half), min(n, st_centre + half + 1))
    smooth = moving_average(deviation, int(round(0.04 * fs)))
    p_lo = max(0, r - int(round(min(0.30, 0.40 * rr_s) * fs)))
    p_hi = max(p_lo, int(onset) - int(round(0.02 * fs)))
    p = p_lo + int(np.argmax(np.abs(smooth[p_lo:p_hi]))) if p_hi - p_lo >= 3 else None
    t_lo = min(n, int(np.ceil(offset)) + int(round(0.04 * fs)))
    t_hi = min(n, r + int(round(min(0.50, 0.62 * rr_s) * fs)))
    t = t_lo + int(np.argmax(np.abs(smooth[t_lo:t_hi]))) if t_hi - t_lo >= 3 else None
    return Fiducials(r, polarity, iso, onset, offset, threshold, st, st_delay_ms, p, t)


def _first_quiet(quiet: np.ndarray, run: int) -> int | None:
    """Index of the first sample that starts ``run`` consecutive True values."""
    if quiet.size < run:
        return None
    counts = np.convolve(quiet.astype(np.int32), np.ones(run, dtype=np.int32), mode="valid")
    hits = np.flatnonzero(counts == run)
    return int(hits[0]) if hits.size else None


def _first_valley(values: np.ndarray) -> int:
    """Index of the first local minimum of ``values`` (the last index when it never rises again)."""
    rises = np.flatnonzero(np.diff(values) > 0)
    return int(rises[0]) if rises.size else values.size - 1


def qrs_bounds(
    deviation: np.ndarray,
    r: int,
    threshold: float,
    before: int,
    after: int,
    fs: float | None = None,
    rr_s: float | None = None,
    fallback: str = "limit",
) -> tuple[float, float]:
    """QRS onset and end around ``r``: where ``|deviation|`` (a slope) falls below ``threshold`` for good.

    Searching outward from ``r`` (at most ``before`` samples back and ``after``
    forward), the bound is the first crossing below ``threshold`` that is
    followed by a quiet run of min(30 ms, 0.06 RR) below it (0.06 RR keeps
    the run shorter than the PR and ST segments at high heart rates), so the
    brief flat top of R or S does not end the QRS (threshold delineation,
    common practice). Returned as fractional sample positions, linearly
    interpolated at the crossing, so low sampling rates do not quantise the
    width. Without a quiet run the bound is the end of the search range
    (``fallback="limit"``, so callers can tell it was not found) or the
    first slope minimum beyond the steepest QRS slope on that side
    (``fallback="minimum"``: the P wave or T wave keeps the slope up, the
    junction with the QRS is where it is lowest).
    """
    seconds = 0.03 if rr_s is None else min(0.03, 0.06 * rr_s)
    run = max(2, int(round(seconds * fs))) if fs else 3
    size = np.abs(deviation)
    quiet = size <= threshold
    hi = min(deviation.size, r + after + 1)
    lo = max(0, r - before)
    # Forward (J point).
    j = _first_quiet(quiet[r:hi], run)
    if j is None:
        offset = float(hi - 1)
        if fallback == "minimum" and hi - r >= 3:
            steep = r + int(np.argmax(size[r:hi]))
            offset = float(steep + _first_valley(size[steep:hi]))
    else:
        last = r + j - 1  # last sample above the threshold
        a0, a1 = size[last], size[last + 1]
        offset = last + float((a0 - threshold) / (a0 - a1)) if a0 > a1 else float(last)
    # Backward (onset).
    back = quiet[lo : r + 1][::-1]
    j = _first_quiet(back, run)
    if j is None:
        onset = float(lo)
        if fallback == "minimum" and r + 1 - lo >= 3:
            steep = lo + int(np.argmax(size[lo : r + 1]))
            onset = float(steep - _first_valley(size[lo : steep + 1][::-1]))
    else:
        first = r - j + 1  # first sample above the threshold
        a0, a1 = size[first - 1], size[first]
        onset = first - 1 + float((threshold - a0) / (a1 - a0)) if a1 > a0 else float(first)
    return onset, offset


def at_limit(onset: float, offset: float, r: int, before: int, after: int, size: int) -> bool:
    """True when a QRS bound sits at the end of its search range."""
    return onset <= max(0, r - before) + 1e-9 or offset >= min(size, r + after + 1) - 1 - 1e-9
