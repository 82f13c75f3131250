"""Beat windows, morphology grouping and median beat templates.

Beats are located on the ORIGINAL trace only, so that a cleaning cannot hide
its own damage. Each beat window is cut from the original, the cleaned and
the removed trace (original minus cleaned) at the same samples, and the
templates are sample-wise medians over the beats of the dominant morphology.
Beats of clearly different shape (ventricular ectopics, artefacts taken for
beats) are grouped apart by their correlation with the dominant QRS shape,
so they do not blur the dominant template.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

# Most beats used for a template: the median over a thousand beats spread
# evenly over the record is as good as over all of them and keeps 24-hour
# records within memory.
MAX_TEMPLATE_BEATS = 1000
# ... and at most this many window values per trace (memory at high rates).
MAX_WINDOW_VALUES = 2_000_000
# Consistency factor between the MAD and the standard deviation of a normal
# variable, 1/Phi^-1(3/4) (Hampel 1974; common practice).
MAD_TO_SD = 1.482602218505602
# Standard error of a sample median relative to that of a mean for normal data,
# sqrt(pi/2) (Kenney & Keeping 1962, from memory; common practice).
MEDIAN_SE_FACTOR = 1.2533141373155003


@dataclass(frozen=True)
class BeatWindows:
    """Beat windows of one channel.

    Attributes
    ----------
    fs : float
        Sampling rate (Hz).
    pre, post : int
        Samples before and after the fiducial point in each window.
    rr_s : float
        Median RR interval of the detected beats (s).
    peaks : numpy.ndarray
        Detected fiducial samples (int64), all beats.
    labels : numpy.ndarray
        Per detected beat: 0 dominant morphology, 1 other morphology,
        -1 window runs off the record.
    aligned : numpy.ndarray
        Fiducial samples (int64) of the dominant beats used for templates,
        after alignment on the original template.
    original, cleaned, removed : numpy.ndarray
        ``(n_used, pre + post + 1)`` windows (float64).
    offset : int
        Median shift (samples) from a detected fiducial to its aligned
        position; the beat-by-beat measures cut every beat at ``peak + offset``.
    """

    fs: float
    pre: int
    post: int
    rr_s: float
    peaks: np.ndarray
    labels: np.ndarray
    aligned: np.ndarray
    original: np.ndarray
    cleaned: np.ndarray
    removed: np.ndarray
    offset: int = 0

    @property
    def n_used(self) -> int:
        """Number of dominant beats behind the templates."""
        return int(self.aligned.size)

    @property
    def time_s(self) -> np.ndarray:
        """Template time axis in seconds relative to the fiducial point."""
        return np.arange(-self.pre, self.post + 1) / self.fs


def window_bounds(rr_s: float, fs: float) -> tuple[int, int]:
    """Samples before and after the R peak in a beat window.

    The window spans the P wave and the T wave: min(0.30 s, 0.40 RR) before
    and min(0.60 s, 0.65 RR) after the R peak (PR <= 200 ms and QT about
    430 ms at 60 bpm; reference values of AHA/ACC clinical teaching,
    common practice).
    """
    pre = int(round(min(0.30, 0.40 * rr_s) * fs))
    post = int(round(min(0.60, 0.65 * rr_s) * fs))
    return max(pre, 2), max(post, 2)


def cut_windows(signal: np.ndarray, centres: np.ndarray, pre: int, post: int) -> np.ndarray:
    """Return ``signal[c - pre : c + post + 1]`` for every centre as rows.

    All centres must have their whole window inside ``signal``.
    """
    offsets = np.arange(-pre, post + 1)
    return signal[centres[:, None] + offsets[None, :]]


def _unit_rows(rows: np.ndarray) -> np.ndarray:
    rows = rows - rows.mean(axis=1, keepdims=True)
    norms = np.linalg.norm(rows, axis=1, keepdims=True)
    return np.divide(rows, norms, out=np.zeros_like(rows), where=norms > 0)


def group_morphology(original: np.ndarray, centres: np.ndarray, fs: float) -> np.ndarray:
    """Label beats 0 (dominant morphology) or 1 (clearly different shape).

    The QRS window (+-80 ms) of every beat is correlated with a seed template:
    the median of the beats most correlated with the beat that has the highest
    median correlation with the others (a medoid). The acceptance threshold
    follows the typical correlation of the record, so noisy records keep their
    beats: ``max(0.5, 2 c_ref - 1.15)`` with ``c_ref`` the median correlation of
    the accepted beats (correlation-based beat grouping, common practice).

    Parameters
    ----------
    original : numpy.ndarray
        The original trace (1-D).
    centres : numpy.ndarray
        Fiducial samples whose QRS window lies inside the trace.
    fs : float
        Sampling rate (Hz).
    """
    n = centres.size
    if n < 3:
        return np.zeros(n, dtype=np.int8)
    half = max(2, int(round(0.08 * fs)))
    qrs = _unit_rows(cut_windows(original, centres, half, half).astype(np.float64))
    pick = np.linspace(0, n - 1, min(n, 300)).round().astype(np.int64)
    sub = qrs[pick]
    corr = sub @ sub.T
    seed = int(np.argmax(np.median(corr, axis=1)))
    close = corr[seed] >= np.quantile(corr[seed], 0.5)
    template = np.median(sub[close], axis=0)
    labels = np.zeros(n, dtype=np.int8)
    for _ in range(2):
        unit = _unit_rows(template[None, :])[0]
        c_all = qrs @ unit
        likely = c_all[c_all >= 0.5]
        c_ref = float(np.median(likely)) if likely.size else 0.5
        threshold = max(0.5, 2.0 * c_ref - 1.15)
        labels = np.where(c_all >= threshold, 0, 1).astype(np.int8)
        if not np.any(labels == 0):
            return np.zeros(n, dtype=np.int8)
        template = np.median(qrs[labels == 0], axis=0)
    return labels


def _smoothed_rows(rows: np.ndarray, width: int) -> np.ndarray:
    """Centred moving average of odd ``width`` along each row ('valid' part only)."""
    csum = np.concatenate([np.zeros((rows.shape[0], 1)), np.cumsum(rows, axis=1)], axis=1)
    return (csum[:, width:] - csum[:, :-width]) / width


def align_to_template(
    original: np.ndarray, centres: np.ndarray, half: int, max_lag: int, fs: float, rounds: int = 2
) -> np.ndarray:
    """Shift each centre by the lag (|lag| <= max_lag) that best matches the median QRS.

    The score is the correlation of each beat's QRS window (+-``half``) with
    the median QRS window of all beats (cross-correlation alignment, common
    practice). Both are first smoothed by a 20 ms moving average, whose zeros
    at 50, 100, 150 Hz (and strong attenuation at 60 Hz) keep mains hum from
    steering the alignment and so becoming phase-locked in the template.
    Vectorised over beats; one pass per lag.
    """
    width = max(1, int(round(0.02 * fs))) | 1
    pad = width // 2
    reach = half + 2 * max_lag + pad
    rows = cut_windows(original, centres, reach, reach).astype(np.float64)
    smooth = _smoothed_rows(rows, width)  # index j <-> offset j - (reach - pad)
    base = reach - pad
    shift = np.zeros(centres.size, dtype=np.int64)
    for round_no in range(rounds):
        limit = max_lag if round_no == 0 else max(1, max_lag // 4)
        offsets = base + shift[:, None] + np.arange(-half, half + 1)[None, :]
        current = np.take_along_axis(smooth, offsets, axis=1)
        unit = _unit_rows(np.median(current, axis=0)[None, :])[0]
        best = np.full(centres.size, -np.inf)
        new_shift = shift.copy()
        for lag in range(-limit, limit + 1):
            trial = shift + lag
            ok = np.abs(trial) <= 2 * max_lag
            cols = base + np.clip(trial, -2 * max_lag, 2 * max_lag)[:, None] + np.arange(-half, half + 1)[None, :]
            score = _unit_rows(np.take_along_axis(smooth, cols, axis=1)) @ unit
            better = ok & (score > best)
            best[better] = score[better]
            new_shift[better] = trial[better]
        shift = new_shift
    return centres + shift


def build_windows(original: np.ndarray, cleaned: np.ndarray, peaks: np.ndarray, fs: float) -> BeatWindows | None:
    """Group beats and cut aligned windows of the dominant beats.

    Returns ``None`` when fewer than two beats have whole windows.

    Parameters
    ----------
    original, cleaned : numpy.ndarray
        1-D traces of equal length.
    peaks : numpy.ndarray
        Fiducial (R-peak) samples found on ``original``.
    fs : float
        Sampling rate (Hz).
    """
    n_samples = original.size
    peaks = np.unique(np.asarray(peaks, dtype=np.int64))
    peaks = peaks[(peaks >= 0) & (peaks < n_samples)]
    if peaks.size < 2:
        return None
    rr_s = float(np.median(np.diff(peaks))) / fs
    pre, post = window_bounds(rr_s, fs)
    max_lag = max(1, int(round(0.04 * fs)))
    half = max(2, int(round(0.06 * fs)))
    margin = half + 2 * max_lag + int(round(0.01 * fs)) + 1
    margin_lo = max(pre, margin) + max_lag
    margin_hi = max(post, margin) + max_lag
    inside = (peaks >= margin_lo) & (peaks < n_samples - margin_hi)
    labels = np.full(peaks.size, -1, dtype=np.int8)
    if inside.sum() < 2:
        return None
    labels[inside] = group_morphology(original, peaks[inside], fs)
    dominant = peaks[labels == 0]
    most = max(50, min(MAX_TEMPLATE_BEATS, MAX_WINDOW_VALUES // (pre + post + 1)))
    if dominant.size > most:
        pick = np.linspace(0, dominant.size - 1, most).round().astype(np.int64)
        dominant = dominant[pick]
    aligned = align_to_template(original, dominant, half, max_lag, fs)
    offset = int(np.median(aligned - dominant))
    aligned = aligned[(aligned >= pre) & (aligned < n_samples - post)]
    if aligned.size < 2:
        return None
    x = cut_windows(original, aligned, pre, post).astype(np.float64)
    y = cut_windows(cleaned, aligned, pre, post).astype(np.float64)
    return BeatWindows(
        offset=offset,
        fs=fs,
        pre=pre,
        post=post,
        rr_s=rr_s,
        peaks=peaks,
        labels=labels,
        aligned=aligned,
        original=x,
        cleaned=y,
        removed=x - y,
    )


def median_template(windows: np.ndarray) -> np.ndarray:
    """Sample-wise median over beats: the robust beat template (common practice)."""
    return np.median(windows, axis=0)


def median_standard_error(values: np.ndarray, axis: int = 0) -> np.ndarray:
    """Standard error of the median of ``values`` along ``axis``.

    SE = sqrt(pi/2) * 1.4826 * MAD / sqrt(n): the large-sample standard error
    of a median of normal data with the MAD as robust s.d. (common practice).
    """
    values = np.asarray(values, dtype=np.float64)
    n = values.shape[axis]
    med = np.median(values, axis=axis, keepdims=True)
    mad = np.median(np.abs(values - med), axis=axis)
    return MEDIAN_SE_FACTOR * MAD_TO_SD * mad / np.sqrt(max(n, 1))


def windows_at(
    original: np.ndarray,
    cleaned: np.ndarray,
    centres: np.ndarray,
    like: BeatWindows,
    align: bool = False,
    most_beats: int = MAX_TEMPLATE_BEATS,
) -> BeatWindows | None:
    """Beat windows of ``original`` and ``cleaned`` at ``centres``, shaped like ``like`` (same rate and bounds).

    At most ``most_beats`` centres are used, spread evenly. With
    ``align`` the centres are first aligned on their own median QRS (as
    :func:`build_windows` does for the dominant beats). Returns ``None``
    when fewer than two whole windows remain.
    """
    fs, pre, post = like.fs, like.pre, like.post
    n_samples = original.size
    centres = np.asarray(centres, dtype=np.int64)
    most = max(50, min(most_beats, MAX_WINDOW_VALUES // (pre + post + 1)))
    if centres.size > most:
        centres = centres[np.linspace(0, centres.size - 1, most).round().astype(np.int64)]
    offset = 0
    if align:
        max_lag = max(1, int(round(0.04 * fs)))
        half = max(2, int(round(0.06 * fs)))
        reach = half + 2 * max_lag + int(round(0.01 * fs)) + 1
        inside = centres[(centres >= reach) & (centres < n_samples - reach)]
        if inside.size >= 2:
            aligned = align_to_template(original, inside, half, max_lag, fs)
            offset = int(np.median(aligned - inside))
            centres = aligned
    centres = centres[(centres >= pre) & (centres < n_samples - post)]
    if centres.size < 2:
        return None
    x = cut_windows(original, centres, pre, post).astype(np.float64)
    y = cut_windows(cleaned, centres, pre, post).astype(np.float64)
    return BeatWindows(fs, pre, post, like.rr_s, like.peaks, like.labels, centres, x, y, x - y, offset)
