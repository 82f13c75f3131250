"""How much noise a cleaning removed, estimated from the record itself (no noise-free truth).

The estimate rests on beat-synchronous averaging: what repeats with every beat
is the heart's signal, what does not is noise (signal averaging of the ECG,
common practice; Lander & Berbari 1997, Principles and methods of
signal-averaged electrocardiography, in: Macfarlane & Lawrie, Comprehensive
Electrocardiology). For a trace ``s`` and the R peaks found on the original:

1. every beat window ``[R - 0.35 RR, R + 0.6 RR)`` (median RR) becomes a row
   of a matrix, referred to the median of all rows: a constant offset does
   not count, while baseline wander, which moves the level from beat to
   beat, does;
2. the template ``T`` is the sample-wise median of the rows;
3. the off-beat power of ``s`` is the mean over beats of the mean square of
   ``row - T``. Beats whose off-beat power in the *original* exceeds three
   times its median (ectopic beats, artefacts: their shape differs from the
   template) are left out, the same beats for every trace, so a cleaning that
   smooths an ectopic beat is not credited with removing noise, while a
   cleaning that disturbs a few beats (at the record's ends, say) is charged.

With ``x`` the original, ``y`` the cleaned trace and ``r = x - y`` the part
the cleaning removed:

* ``noise_in``  = off-beat power of ``x`` (noise before cleaning),
* ``noise_left`` = off-beat power of ``y`` (noise the cleaning left),
* ``signal_lost`` = mean square of the template of ``r`` (what the cleaning
  took away from every beat alike: lost signal, not noise), less the noise a
  median of N beats keeps (``pi/2`` times the off-beat power of ``r`` over N),

and the **noise removed** is ``10 log10(noise_in / (noise_left + signal_lost))``
in dB. It estimates the SNR gain ``10 log10(|x - s|^2 / |y - s|^2)`` against
the unknown clean signal ``s``: the error of the cleaned trace is the noise it
left plus the signal it removed. Beat-to-beat variation of the heart itself
(T waves moving with the rate, alignment jitter of a sample) stays in every
trace's off-beat power and so caps the estimate; it does so for every
candidate alike, which keeps the ranking. ``benchmarks/bench_suggest.py``
checks the ranking against the truth on a labelled set.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

# Beat window around each R peak, in fractions of the median RR interval.
PRE_RR = 0.35
POST_RR = 0.6
# At most this many beats (evenly spaced) enter the estimate.
MAX_BEATS = 600
# Fewest beats for an estimate.
MIN_BEATS = 3
# Beats whose off-beat power in the original exceeds this multiple of the median
# (ectopic beats, artefacts) are left out of every trace's estimate.
OUTLIER_FACTOR = 3.0


@dataclass(frozen=True)
class NoiseEstimate:
    """Powers (record units squared) behind the noise-removed estimate of one trace pair.

    Attributes
    ----------
    noise_in : float
        Off-beat power of the original.
    noise_left : float
        Off-beat power of the cleaned trace.
    signal_lost : float
        Mean square of the beat template of the removed part.
    beats : int
        Beats used.
    """

    noise_in: float
    noise_left: float
    signal_lost: float
    beats: int

    @property
    def removed_db(self) -> float | None:
        """Estimated noise removed, ``10 log10(noise_in / (noise_left + signal_lost))`` dB."""
        return removed_db(self.noise_in, self.noise_left, self.signal_lost) if self.beats else None


def removed_db(noise_in: float, noise_left: float, signal_lost: float) -> float:
    """``10 log10(noise_in / (noise_left + signal_lost))``, guarded against zeros."""
    floor = 1e-30
    return 10.0 * math.log10(max(noise_in, floor) / max(noise_left + signal_lost, floor))


def beat_starts(peaks: np.ndarray, n: int, fs: float) -> tuple[np.ndarray, int]:
    """Start samples of the beat windows that fit in ``[0, n)`` and the window width.

    Windows run from ``R - 0.35 RR`` to ``R + 0.6 RR`` (median RR); at most
    :data:`MAX_BEATS` of them, evenly spaced. Returns an empty array when
    fewer than :data:`MIN_BEATS` fit.
    """
    peaks = np.asarray(peaks, dtype=np.int64).reshape(-1)
    if peaks.size < 2:
        return np.empty(0, np.int64), 0
    rr = float(np.median(np.diff(np.sort(peaks))))
    pre = int(round(PRE_RR * rr))
    width = pre + int(round(POST_RR * rr))
    if width < 4:
        return np.empty(0, np.int64), 0
    starts = peaks - pre
    starts = starts[(starts >= 0) & (starts + width <= n)]
    if starts.size > MAX_BEATS:
        starts = starts[np.linspace(0, starts.size - 1, MAX_BEATS).round().astype(np.int64)]
    if starts.size < MIN_BEATS:
        return np.empty(0, np.int64), 0
    return starts, width


def _rows(trace: np.ndarray, starts: np.ndarray, width: int) -> np.ndarray:
    rows = np.asarray(trace, dtype=np.float64)[starts[:, None] + np.arange(width)[None, :]]
    rows -= np.median(rows)
    return rows


def _residual_powers(rows: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    template = np.median(rows, axis=0)
    residual = rows - template
    return np.mean(residual * residual, axis=1), template


def estimate(original: np.ndarray, cleaned: np.ndarray, peaks: np.ndarray, fs: float) -> NoiseEstimate:
    """The :class:`NoiseEstimate` of one channel (see the module text for the method).

    Parameters
    ----------
    original, cleaned : 1-D arrays of equal length
    peaks : R-peak sample indices found on the original
    fs : sampling rate in Hz
    """
    original = np.asarray(original)
    starts, width = beat_starts(peaks, original.shape[0], fs)
    if starts.size == 0:
        return NoiseEstimate(0.0, 0.0, 0.0, 0)
    x = _rows(original, starts, width)
    y = _rows(cleaned, starts, width)
    power_x, _ = _residual_powers(x)
    keep = power_x <= OUTLIER_FACTOR * np.median(power_x)  # beats of the usual shape, judged on the original
    power_y, _ = _residual_powers(y[keep])
    removed = x[keep] - y[keep]
    removed -= np.median(removed)
    power_r, lost_template = _residual_powers(removed)
    # The template is a median of N rows: it keeps noise of variance pi sigma^2 / (2 N)
    # (large-sample variance of the median of normal data, common practice), which is
    # not lost signal and is taken out.
    n_kept = int(np.sum(keep))
    lost = float(np.mean(lost_template * lost_template)) - 0.5 * math.pi * float(np.mean(power_r)) / n_kept
    return NoiseEstimate(float(np.mean(power_x[keep])), float(np.mean(power_y)), max(0.0, lost), n_kept)


def pooled_removed_db(estimates: list[NoiseEstimate]) -> float | None:
    """Noise removed over several windows or channels: powers averaged (weighted by beats), then dB.

    Channels in different units should not be pooled; the suggestion pools a
    channel's windows and then averages the channels' dB values.
    """
    used = [e for e in estimates if e.beats]
    if not used:
        return None
    weights = np.array([e.beats for e in used], dtype=np.float64)
    weights /= weights.sum()
    noise_in = float(np.dot(weights, [e.noise_in for e in used]))
    noise_left = float(np.dot(weights, [e.noise_left for e in used]))
    lost = float(np.dot(weights, [e.signal_lost for e in used]))
    return removed_db(noise_in, noise_left, lost)


def kendall_tau(a, b) -> float:
    """Kendall's rank correlation tau-b of two equally long sequences.

    ``tau_b = (C - D) / sqrt((P - T_a) (P - T_b))`` with ``C`` and ``D`` the
    concordant and discordant pairs, ``P`` all pairs and ``T_a``, ``T_b`` the
    pairs tied in ``a`` or in ``b`` (Kendall 1945, The treatment of ties in
    ranking problems, Biometrika 33(3):239-251). NaN when either sequence is
    constant or shorter than two.
    """
    a = np.asarray(a, dtype=np.float64).reshape(-1)
    b = np.asarray(b, dtype=np.float64).reshape(-1)
    if a.shape != b.shape:
        raise ValueError("kendall_tau needs sequences of equal length")
    n = a.size
    if n < 2:
        return float("nan")
    i, j = np.triu_indices(n, k=1)
    sa, sb = np.sign(a[i] - a[j]), np.sign(b[i] - b[j])
    pairs = float(i.size)
    ties_a = float(np.sum(sa == 0))
    ties_b = float(np.sum(sb == 0))
    denominator = math.sqrt((pairs - ties_a) * (pairs - ties_b))
    if denominator == 0:
        return float("nan")
    return float(np.sum(sa * sb)) / denominator


def pair_agreement(a, b) -> tuple[int, int]:
    """``(agreeing, compared)``: pairs ordered the same way by ``a`` and ``b``, among pairs tied in neither."""
    a = np.asarray(a, dtype=np.float64).reshape(-1)
    b = np.asarray(b, dtype=np.float64).reshape(-1)
    i, j = np.triu_indices(a.size, k=1)
    sa, sb = np.sign(a[i] - a[j]), np.sign(b[i] - b[j])
    compared = (sa != 0) & (sb != 0)
    return int(np.sum((sa == sb) & compared)), int(np.sum(compared))
