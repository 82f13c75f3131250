"""Robust baseline estimate: two-stage median of 20 ms block medians, smoothed.

The baseline (respiratory wander, electrode drift, offset) is estimated as
the median over a window wider than any QRS complex, then over a window wider
than any T wave (two-stage median filtering, de Chazal, O'Dwyer & Reilly 2004,
IEEE Trans. Biomed. Eng. 51(7):1196-1206: 200 ms then 600 ms). Our second
window is 1.22 s: measured on the labelled noisy set (benchmarks/eval_noisy_set.py,
tuning split), 600 ms let wide ectopic beats pull the estimate (9 of 60 records
ended below their input SNR, against 2 at 1.2 s), at the price of following
0.4 Hz breathing less closely (peak error 28 % of its amplitude, 11 % at 0.25 Hz;
docs/cleaning.md). To keep a
24-hour record cheap the medians run on 20 ms block medians (a baseline has no
content above a few hertz), and the result is smoothed with a moving average
and interpolated linearly back to the sampling rate.

Why this, not a high-pass: a pulse shorter than half the first window does not
move the estimate at all, so the IEC 60601-2-25 / AAMI EC11 impulse test (3 mV x
100 ms) leaves no displacement after the pulse (a high-pass fast enough to
follow 0.4 Hz breathing leaves about 0.35 mV, see docs/cleaning.md), and the
estimate has no start-up transient at the ends of a record (the medians see
the record's own samples there, repeated at the edge).
"""

from __future__ import annotations

import numpy as np
from scipy import ndimage

BLOCK_S = 0.02
FIRST_WINDOW_S = 0.22  # 11 blocks: wider than twice a 100 ms pulse or a QRS
SECOND_WINDOW_S = 1.22  # 61 blocks: wider than a T wave, and than a wide ectopic beat with its T wave
SMOOTH_S = 0.3  # moving average applied twice (a triangle of 0.6 s support)


def block_length(fs: float) -> int:
    """Samples per block: ``round(0.02 fs)``, at least 1 (at most 2^62 for absurd rates)."""
    return max(1, int(min(round(BLOCK_S * fs), 2**62)))


def _odd_blocks(seconds: float) -> int:
    k = max(1, int(round(seconds / BLOCK_S)))
    return k if k % 2 else k + 1


def reach_samples(fs: float) -> int:
    """Samples either side a baseline value depends on (windows, smoothing, interpolation)."""
    b = block_length(fs)
    blocks = _odd_blocks(FIRST_WINDOW_S) // 2 + _odd_blocks(SECOND_WINDOW_S) // 2 + 2 * (_odd_blocks(SMOOTH_S) // 2) + 2
    return blocks * b


def _running_median(values: np.ndarray, size: int, shrink_at_ends: bool = False) -> np.ndarray:
    """Running median of odd ``size``; near an end, of the window's part inside the record, or held.

    Near an end no window is padded with made-up values (a record that starts inside a
    wave would otherwise see that wave repeated or mirrored into a majority). With
    ``shrink_at_ends`` the window there is cut to what the record holds (still at least
    half of it, so a wave shorter than half the window cannot fill a majority): a
    baseline that moves steeply at an end is followed. Otherwise the value is held at
    the nearest median of a window lying wholly inside the record.
    """
    half = size // 2
    if values.size <= size:
        return np.full(values.size, float(np.median(values)), dtype=np.float64)
    out = ndimage.median_filter(values, size=size, mode="nearest")
    if shrink_at_ends:
        # The window shrinks to what the record holds (at least half of it, so no wave
        # can fill a majority of it): steep wander at an end is followed, not held.
        for i in range(half):
            out[i] = np.median(values[: i + half + 1])
            out[-1 - i] = np.median(values[values.size - i - half - 1 :])
        return out
    out[:half] = out[half]
    out[-half:] = out[-half - 1]
    return out


def estimate(x: np.ndarray, fs: float, follow_ends: bool = True) -> np.ndarray:
    """Baseline estimate of ``x`` (same length and dtype).

    Steps: medians of 20 ms blocks (the last, shorter block too); a 220 ms
    then a 1220 ms running median over them (de Chazal et al. 2004 use 200 and
    600 ms; odd block counts); a 300 ms moving average applied twice; linear
    interpolation from the block centres back to every sample. Within half a
    window of the record's ends no made-up values enter (a record that starts or
    ends inside a wave gets no made-up baseline there): the 220 ms medians are
    held at the nearest window that lies wholly inside the record, and, with
    ``follow_ends`` (the default, for removal), the 1220 ms window shrinks to the
    part inside the record, so steep wander at an end is followed rather than
    left in the first or last beats (on a record starting on 0.6 mV/s of
    wander, the held value was 0.4 mV off at the first sample;
    :func:`_running_median`). :func:`end_padded` uses the held form.
    """
    x = np.asarray(x)
    n = x.shape[0]
    if n == 0:
        return x.copy()
    b = min(block_length(fs), n)
    full = n // b
    parts = []
    if full:
        parts.append(np.median(x[: full * b].reshape(full, b), axis=1))
    if n - full * b:
        parts.append(np.array([np.median(x[full * b :])]))
    med = np.concatenate(parts)
    med = _running_median(med, _odd_blocks(FIRST_WINDOW_S))
    med = _running_median(med, _odd_blocks(SECOND_WINDOW_S), shrink_at_ends=follow_ends)
    k = _odd_blocks(SMOOTH_S)
    med = ndimage.uniform_filter1d(med, k, mode="nearest")
    med = ndimage.uniform_filter1d(med, k, mode="nearest")
    centres = np.arange(med.size) * b + (b - 1) / 2.0
    if n - full * b:
        centres[-1] = full * b + (n - full * b - 1) / 2.0
    out = np.interp(np.arange(n, dtype=np.float64), centres, med)
    return out.astype(x.dtype if x.dtype in (np.float32, np.float64) else np.float64, copy=False)


def remove(x: np.ndarray, fs: float) -> np.ndarray:
    """``x`` minus its :func:`estimate` (a new array of ``x``'s dtype)."""
    return x - estimate(x, fs)


def end_padded(x: np.ndarray, fs: float, padlen: int) -> np.ndarray:
    """``x`` extended by ``padlen`` samples at both ends, about its local baseline.

    The record is split near each end into its baseline ``B`` (:func:`estimate`)
    and the rest ``r = x - B``; the extension is ``B`` continued by odd
    extension about its end value (a drift keeps its slope, no jump) plus ``r``
    mirrored (even extension: beats continue at their own level). Odd extension
    about the end *sample* instead (``scipy.signal`` ``padtype='odd'``) treats a
    record that ends on a wave as if the baseline sat at the wave's height, and a
    zero-phase filter then pulls the first and last seconds by that much.
    """
    n = x.shape[0]
    padlen = int(min(max(padlen, 0), n - 1))
    if padlen == 0:
        return np.asarray(x, dtype=np.float64).copy()
    span = min(n, padlen + 1 + reach_samples(fs))
    head = np.asarray(x[:span], dtype=np.float64)
    tail = np.asarray(x[n - span :], dtype=np.float64)
    bh = estimate(head, fs, follow_ends=False)
    bt = estimate(tail, fs, follow_ends=False)
    rh = head - bh
    rt = tail - bt
    left = (2.0 * bh[0] - bh[padlen:0:-1]) + rh[padlen:0:-1]
    right = (2.0 * bt[-1] - bt[-2 : -padlen - 2 : -1]) + rt[-2 : -padlen - 2 : -1]
    out = np.empty(n + 2 * padlen, dtype=np.float64)
    out[:padlen] = left
    out[padlen : padlen + n] = x
    out[padlen + n :] = right
    return out
