"""QRS detection (Pan & Tompkins 1985) at any sampling rate, and beat matching (ANSI/AAMI EC57).

References
----------
Pan J, Tompkins WJ. A real-time QRS detection algorithm. IEEE Trans. Biomed.
Eng. BME-32(3):230-236, 1985. doi:10.1109/TBME.1985.325532

ANSI/AAMI EC57: Testing and reporting performance results of cardiac rhythm and
ST segment measurement algorithms (beat-by-beat comparison, 150 ms match window).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import signal as sps
from scipy.ndimage import maximum_filter1d, uniform_filter1d

__all__ = ["detect_qrs", "match_beats", "MatchResult", "pan_tompkins_stages"]

# Published constants of Pan & Tompkins (1985).
_PASS_BAND_HZ = (5.0, 15.0)  # aim of the low-pass/high-pass cascade
_INTEGRATION_S = 0.150  # moving-window integration width
_REFRACTORY_S = 0.200  # no second QRS within 200 ms
_T_WAVE_S = 0.360  # a peak 200-360 ms after a QRS may be a T wave
_LEARN_S = 2.0  # learning phase
_MISSED_FACTOR = 1.66  # search back after 166 % of the RR average
_RR_LOW, _RR_HIGH = 0.92, 1.16  # limits of a regular RR

# Our additions (documented in detect_qrs): the noise-block judgement (block
# length, contrast and acceptance rate, see _noise_only_blocks), and the
# half-width of the window in which the R peak is placed on the filtered signal.
_MIN_CONTRAST = 30.0
_GATE_BLOCK_S = 20.0
_NOISE_RATE_HZ = 2.75
_NOISE_CONTRAST = 12.0
_STANDS_OUT = 80.0
_REFINE_S = 0.09
# No R peak is reported this close to either end of the record: the QRS is cut
# there and its extremum cannot be told from a filter edge effect.
_EDGE_S = 0.05
# Samples per chunk of a long record (memory bound), see _candidates.
_CHUNK_SAMPLES = 1 << 21


@dataclass(frozen=True)
class PanTompkinsStages:
    """Intermediate signals of the detector (all at the input rate, zero delay)."""

    bandpassed: np.ndarray
    derivative: np.ndarray
    integrated: np.ndarray
    refined: np.ndarray


def _as_signal(x) -> np.ndarray:
    """1-D float signal with non-finite samples replaced by the median (never raises on values).

    float32 and float64 input is used as given (never modified) and copied, to
    float64, only when a sample must be replaced: a day-long float32 record is
    not doubled into a full-length float64 copy; :func:`_stages` converts each
    chunk to float64 (exactly) before filtering.
    """
    a = np.asarray(x)
    if a.dtype not in (np.float32, np.float64):
        a = a.astype(np.float64)
    if a.ndim != 1:
        a = np.squeeze(a)
        if a.ndim != 1:
            raise ValueError("one channel (a 1-D signal) is expected")
    bad = ~np.isfinite(a)
    if bad.any():
        a = a.astype(np.float64)
        a[bad] = np.median(a[~bad]) if (~bad).any() else 0.0
    return a


def _bandpass(x: np.ndarray, fs: float, lo: float, hi: float, order: int = 2) -> np.ndarray:
    hi = min(hi, 0.45 * fs)
    sos = sps.butter(order, [lo, hi], btype="bandpass", fs=fs, output="sos")
    return sps.sosfiltfilt(sos, x)


def pan_tompkins_stages(signal, fs: float) -> PanTompkinsStages:
    """Band-pass, derivative, squaring and moving-window integration (Pan & Tompkins 1985).

    - Band-pass 5-15 Hz (the aim of the paper's integer low-pass/high-pass
      cascade at 200 Hz, whose -3 dB band is about 5-12 Hz): here a 2nd-order
      Butterworth band-pass designed at the record's own rate and run forwards
      and backwards (zero phase), so no resampling and no delay to undo.
    - Derivative: the paper's five-point derivative
      y(n) = (1/8T)(-x(n-2) - 2x(n-1) + 2x(n+1) + x(n+2)) with its 5 ms step at
      200 Hz, kept in time: the step is m = round(fs/200) samples.
    - Squaring, then moving-window integration over 150 ms, centred.

    Parameters
    ----------
    signal : array_like
        1-D signal, any units.
    fs : float
        Sampling rate, Hz.

    Returns
    -------
    PanTompkinsStages
        ``bandpassed``, ``derivative``, ``integrated`` (Pan & Tompkins stages)
        and ``refined`` (0.5-45 Hz zero-phase band, used to place R peaks).
    """
    return _stages(_as_signal(signal), float(fs))


def _stages(x: np.ndarray, fs: float) -> PanTompkinsStages:
    x = np.asarray(x, dtype=np.float64)
    bp = _bandpass(x, fs, *_PASS_BAND_HZ)
    m = max(1, int(round(fs / 200.0)))
    d = np.zeros_like(bp)
    if bp.size > 4 * m:
        d[2 * m : -2 * m] = (-bp[: -4 * m] - 2 * bp[m : -3 * m] + 2 * bp[3 * m : -m] + bp[4 * m :]) * (fs / (8.0 * m))
    w = max(1, int(round(_INTEGRATION_S * fs)))
    mwi = uniform_filter1d(d * d, size=w, mode="nearest")
    refined = _bandpass(x, fs, 0.5, 45.0, order=2)
    return PanTompkinsStages(bp, d, mwi, refined)


class _RRAverages:
    """RR AVERAGE1 (last 8 RR) and RR AVERAGE2 (last 8 RR within 92-116 %), Pan & Tompkins 1985.

    Plain Python floats: this runs once per beat.
    """

    def __init__(self, initial: float):
        self.recent = [initial] * 8
        self.selected = [initial] * 8
        self.avg2 = initial

    def add(self, rr: float) -> bool:
        """Record an RR interval; return True when it is regular (within 92-116 % of average 2)."""
        avg2 = self.avg2
        self.recent = self.recent[1:] + [rr]
        regular = _RR_LOW * avg2 <= rr <= _RR_HIGH * avg2
        if regular:
            self.selected = self.selected[1:] + [rr]
        elif not any(_RR_LOW * avg2 <= r <= _RR_HIGH * avg2 for r in self.recent[-4:]):
            # The rhythm has changed for good (the last 4 RR all disagree with
            # average 2): average 2 follows average 1 (the recent values).
            self.selected = list(self.recent)
        self.avg2 = sum(self.selected) / 8.0
        return regular


def _thresholds(candidates, values, slopes, fs, n_samples):
    """Adaptive-threshold decision over candidate peaks (one loop step per candidate).

    Pan & Tompkins (1985): SPKI = 0.125 PEAKI + 0.875 SPKI after a QRS, NPKI the
    same after a noise peak, THRESHOLD I1 = NPKI + 0.25 (SPKI - NPKI), I2 = I1/2;
    a peak found by search-back updates SPKI = 0.25 PEAKI + 0.75 SPKI; search back
    when no QRS came within 166 % of RR AVERAGE2; 200 ms refractory; a peak
    200-360 ms after a QRS whose maximal slope is under half that of the
    previous QRS is a T wave; thresholds halved while the rhythm is irregular.
    Learning: SPKI starts at a third of the largest peak of the first 2 s, NPKI
    at half the median candidate peak (our choice, robust to an artefact at the
    start). Peaks examined by an unsuccessful search-back are not examined
    again (bounded work on long stretches without beats).
    """
    n_learn = max(1, int(_LEARN_S * fs))
    first = values[candidates < n_learn]
    if first.size == 0:
        first = values[: min(values.size, 3)]
    spki = float(first.max()) / 3.0 if first.size else 0.0
    npki = float(np.median(values)) / 2.0 if values.size else 0.0
    refractory = int(round(_REFRACTORY_S * fs))
    t_wave = int(round(_T_WAVE_S * fs))
    rr = _RRAverages(1.0 * fs)
    irregular = False

    qrs: list[int] = []  # indices into candidates
    last_pos = -10 * refractory
    last_slope = 0.0
    pending: list[int] = []  # noise candidates since the last QRS (search-back pool)

    def th1():
        t = npki + 0.25 * (spki - npki)
        return 0.5 * t if irregular else t

    def is_t_wave(i):
        gap = candidates[i] - last_pos
        return qrs and gap <= t_wave and slopes[i] < 0.5 * last_slope

    def accept(i, searchback):
        nonlocal spki, last_pos, last_slope, irregular
        v = values[i]
        spki = (0.25 * v + 0.75 * spki) if searchback else (0.125 * v + 0.875 * spki)
        if qrs:
            irregular = not rr.add(float(candidates[i] - last_pos))
        qrs.append(i)
        last_pos = int(candidates[i])
        last_slope = float(slopes[i])
        pending.clear()

    def search_back(pos):
        """Pan & Tompkins search-back with THRESHOLD I2 over the peaks since the last QRS."""
        while qrs and pos - last_pos > _MISSED_FACTOR * rr.avg2 and pending:
            th2 = 0.5 * th1()
            pool = [j for j in pending if values[j] > th2
                    and candidates[j] - last_pos >= refractory and not is_t_wave(j)]
            if not pool:
                pending.clear()
                return
            best = max(pool, key=lambda j: values[j])
            later = [j for j in pending if candidates[j] > candidates[best]]
            accept(best, searchback=True)
            pending.extend(later)

    for i in range(candidates.size):
        pos = int(candidates[i])
        search_back(pos)
        if pos - last_pos < refractory:
            continue
        v = values[i]
        if v > th1() and not is_t_wave(i):
            accept(i, searchback=False)
        else:
            npki = 0.125 * v + 0.875 * npki
            pending.append(i)
    search_back(n_samples)
    return np.asarray(qrs, dtype=np.int64)


def _noise_only_blocks(candidates, values, chosen, fs, n_samples) -> np.ndarray:
    """Mask over ``chosen``: True for detections in 20 s blocks that look like noise only.

    On stationary noise without beats the adaptive thresholds accept nearly
    every local maximum of the integrated signal, i.e. about 2.9-3.7 peaks per
    second (the 200 ms refractory period allows 5), and the accepted peaks do
    not stand out: contrast = median integrated value of the accepted peaks /
    that of the rejected ones stays under about 11. A block is taken for noise
    when both hold: at least 2.75 accepted peaks per second (165 per minute)
    and a contrast under 30. ECG at up to 150 bpm stays below that rate, even
    with white noise at 3 dB SNR; clean or moderately noisy ECG has a contrast
    far above 30 at any rate (our measurements on synthetic records and the
    MIT-BIH excerpt). When fewer than 3 peaks were rejected in a block, the
    highest of the median rejected values of this block and its two neighbours
    is used; with fewer than 3 rejected peaks in all three, the block is not
    judged. A block next to a noise block is
    also taken for noise when its contrast is under 12 (the start of a noise
    stretch, while the thresholds come down from the ECG level). In a noise
    block, a detection whose own value is at least 80 times the block's median
    rejected value is kept (beats sharing a block with the end of a noise stretch).
    """
    block = max(1, int(_GATE_BLOCK_S * fs))
    accepted = np.zeros(values.size, dtype=bool)
    accepted[chosen] = True
    blk = candidates // block
    n_blocks = int(blk.max()) + 1 if blk.size else 0
    noisy_block = np.zeros(n_blocks, dtype=bool)
    order = np.argsort(blk, kind="stable")
    bounds = np.searchsorted(blk[order], np.arange(n_blocks + 1))

    def block_values(b, want_accepted):
        members = order[bounds[b] : bounds[b + 1]]
        return values[members[accepted[members] == want_accepted]]

    contrast = np.full(n_blocks, np.inf)
    rejected_level = np.full(n_blocks, np.inf)
    for b in range(n_blocks):
        acc = block_values(b, True)
        rej = block_values(b, False)
        level = float(np.median(rej)) if rej.size >= 3 else None
        if level is None:  # few rejected: the highest median of this and the neighbouring blocks
            pools = [block_values(k, False) for k in range(max(0, b - 1), min(n_blocks, b + 2))]
            if sum(p.size for p in pools) >= 3:
                level = max(float(np.median(p)) for p in pools if p.size)
        if acc.size and level is not None:
            rejected_level[b] = max(level, 1e-300)
            contrast[b] = np.median(acc) / rejected_level[b]
        seconds = (min(n_samples, (b + 1) * block) - b * block) / fs
        noisy_block[b] = acc.size >= _NOISE_RATE_HZ * seconds and contrast[b] < _MIN_CONTRAST
    # Next to a noise block, where the thresholds are still settling and fewer
    # peaks are accepted, a contrast as low as pure noise's is enough.
    for _ in range(2):
        beside = np.zeros(n_blocks, dtype=bool)
        beside[1:] |= noisy_block[:-1]
        beside[:-1] |= noisy_block[1:]
        noisy_block |= beside & (contrast < _NOISE_CONTRAST)
    # In a noise block, a peak that alone stands out as a beat would is kept
    # (the first beats after a noise stretch share its block).
    b_chosen = blk[chosen]
    stands_out = values[chosen] >= _STANDS_OUT * rejected_level[b_chosen]
    return noisy_block[b_chosen] & ~stands_out


def _extrema(positions, refined, fs):
    """Largest and smallest sample of the 0.5-45 Hz signal within +-90 ms of each position.

    Returns (index of max, index of min, upward excursion, downward excursion);
    excursions are measured from the beat's baseline, the median of the signal
    over +-300 ms (mostly PR, ST and TP segments).
    """
    half = max(1, int(round(_REFINE_S * fs)))
    wide = max(half + 1, int(round(0.3 * fs)))
    n = refined.size
    idx = np.clip(positions[:, None] + np.arange(-half, half + 1), 0, n - 1)
    win = refined[idx]
    wide_idx = np.clip(positions[:, None] + np.arange(-wide, wide + 1, max(1, wide // 60)), 0, n - 1)
    base = np.median(refined[wide_idx], axis=1)
    rows = np.arange(idx.shape[0])
    imax = idx[rows, np.argmax(win, axis=1)]
    imin = idx[rows, np.argmin(win, axis=1)]
    return imax, imin, refined[imax] - base, base - refined[imin]


def _place_on_extremum(imax, imin, up, down):
    """Choose the R extremum of each beat; return (sample index, excursion).

    Polarity: the record's dominant QRS polarity (median over beats of the
    larger excursion) is used, unless a beat's opposite excursion is more than
    1.5 times larger (e.g. a ventricular ectopic of inverted shape); this keeps
    one fiducial per beat shape.
    """
    positive = np.median(up - down) >= 0
    use_max = (up * 1.5 >= down) if positive else (up > 1.5 * down)
    return np.where(use_max, imax, imin), np.where(use_max, up, down)


def detect_qrs(signal, fs: float) -> np.ndarray:
    """R-peak sample indices by the Pan & Tompkins (1985) method, at any rate (125 Hz-2 kHz).

    Stages (see :func:`pan_tompkins_stages`): 5-15 Hz band-pass designed at the
    record's rate (no resampling; zero phase), five-point derivative, squaring,
    150 ms moving-window integration. Candidates are the local maxima of the
    integrated signal at least 200 ms apart (the refractory period), so the
    decision loop runs once per candidate, not per sample. Decision rules of the
    paper: adaptive SPKI/NPKI thresholds with a 2 s learning phase, search-back
    with the halved threshold after 166 % of the RR average, T-wave rejection by
    slope 200-360 ms after a QRS, halved thresholds for irregular rhythm. The
    QRS slope is the largest |derivative| within +-75 ms of a candidate.

    Our additions: in each 20 s block where nearly every local maximum was
    accepted (at least 2.75 per second) and the accepted peaks do not stand out
    from the rejected ones (median ratio under 30, see :func:`_noise_only_blocks`),
    the detections are dropped as noise without beats; a flat line gives no
    candidate at all. Each detection is then placed on the R
    extremum (either polarity, see :func:`_place_on_extremum`) of a 0.5-45 Hz zero-phase
    version of the input within +-90 ms; none is reported within 50 ms of
    either end of the record (an incomplete QRS); detections that land on the same
    extremum or closer than 200 ms are merged (the larger excursion is kept).

    Parameters
    ----------
    signal : array_like
        1-D signal (float32 or float64), any units. NaN/inf samples are replaced
        by the median of the others. A 2-D array with more than one channel is
        a programming error (ValueError): detect on each channel.
    fs : float
        Sampling rate, Hz.

    Returns
    -------
    numpy.ndarray
        int64 sample indices of the R peaks, sorted; empty when no beat is found
        (flat line, noise only, a record shorter than 0.5 s).
    """
    x = _as_signal(signal)
    fs = float(fs)
    if not np.isfinite(fs) or fs <= 0 or x.size < int(0.5 * fs) or x.size < 16:
        return np.zeros(0, dtype=np.int64)
    if np.ptp(x) == 0:
        return np.zeros(0, dtype=np.int64)
    refractory = max(1, int(round(_REFRACTORY_S * fs)))
    cand, values, slopes, imax, imin, up, down = _candidates(x, fs, refractory)
    if cand.size == 0:
        return np.zeros(0, dtype=np.int64)
    chosen = _thresholds(cand, values, slopes, fs, x.size)
    if chosen.size:
        chosen = chosen[~_noise_only_blocks(cand, values, chosen, fs, x.size)]
    if chosen.size == 0:
        return np.zeros(0, dtype=np.int64)
    peaks, size = _place_on_extremum(imax[chosen], imin[chosen], up[chosen], down[chosen])
    edge = int(round(_EDGE_S * fs))
    inside = (peaks >= edge) & (peaks < x.size - edge)
    return _merge_close(peaks[inside], size[inside], refractory)


def _candidates(x, fs, refractory):
    """Candidate peaks of the integrated signal with their value, slope and R extrema.

    Long records are processed in chunks of about 2 million samples with 5 s of
    overlap on each side (more than the filters' settling time), so memory stays
    bounded; candidates are kept only in each chunk's core.
    """
    pad = int(5 * fs)
    core = max(_CHUNK_SAMPLES, 4 * pad)
    half = max(1, int(round(0.075 * fs)))
    parts = []
    for c0 in range(0, x.size, core):
        c1 = min(x.size, c0 + core)
        a, b = max(0, c0 - pad), min(x.size, c1 + pad)
        st = _stages(x[a:b], fs)
        # Zero padding lets a maximum at the first or last sample be a candidate.
        pk, _ = sps.find_peaks(np.concatenate(([0.0], st.integrated, [0.0])), distance=refractory)
        pk = pk - 1
        pk = pk[(pk + a >= c0) & (pk + a < c1) & (st.integrated[pk] > 0)]
        if pk.size == 0:
            continue
        # Maximal slope near each candidate, for T-wave discrimination.
        slope = maximum_filter1d(np.abs(st.derivative), size=2 * half + 1, mode="nearest")[pk]
        i_max, i_min, e_up, e_down = _extrema(pk, st.refined, fs)
        parts.append((pk + a, st.integrated[pk], slope, i_max + a, i_min + a, e_up, e_down))
    if not parts:
        empty = np.zeros(0)
        return (np.zeros(0, dtype=np.int64), empty, empty, np.zeros(0, dtype=np.int64),
                np.zeros(0, dtype=np.int64), empty, empty)
    return tuple(np.concatenate(col) for col in zip(*parts))


def _merge_close(peaks, size, min_gap):
    """Sort; of two peaks closer than ``min_gap`` (or equal), keep the larger excursion ``size``."""
    order = np.argsort(peaks, kind="stable")
    peaks, size = peaks[order], size[order]
    if peaks.size < 2:
        return peaks.astype(np.int64)
    keep = [0]
    for k in range(1, peaks.size):
        if peaks[k] - peaks[keep[-1]] < min_gap:
            if size[k] > size[keep[-1]]:
                keep[-1] = k
        else:
            keep.append(k)
    return peaks[keep].astype(np.int64)


@dataclass(frozen=True)
class MatchResult:
    """Beat-by-beat comparison of detections with reference beats (ANSI/AAMI EC57).

    Attributes
    ----------
    tp, fn, fp : int
        Matched reference beats, missed reference beats, extra detections.
    sensitivity : float
        Se = TP / (TP + FN) (1.0 when there is no reference beat).
    positive_predictivity : float
        +P = TP / (TP + FP) (1.0 when there is no detection).
    matched_reference, matched_detected : numpy.ndarray
        Indices (into the sorted inputs) of the matched pairs.
    """

    tp: int
    fn: int
    fp: int
    sensitivity: float
    positive_predictivity: float
    matched_reference: np.ndarray
    matched_detected: np.ndarray


def match_beats(reference, detected, fs: float, window_s: float = 0.15, start_s: float = 0.0,
                end_s: float | None = None) -> MatchResult:
    """Match detected beats to reference beats one-to-one within +-``window_s``.

    ANSI/AAMI EC57 (and EC38) beat-by-beat rule: a detection matches a reference
    beat when |dt| <= 150 ms; each beat is matched at most once. Pairs are taken
    in order of increasing |dt| (the closest pair first), which on a time line
    gives the largest number of matches. Se = TP/(TP+FN), +P = TP/(TP+FP)
    (common practice; EC57 definitions from memory). EC57 starts the comparison
    5 min into each record (learning period): pass ``start_s=300`` to do the same.
    Reference beats outside [``start_s``, ``end_s``) are ignored; detections
    outside it are never counted as false positives but may still match a
    reference beat inside it (the window's margin). ``end_s`` (default: no end)
    lets the last, possibly incomplete beat of a record be left out.

    Parameters
    ----------
    reference, detected : array_like of int
        Sample indices of reference and detected beats.
    fs : float
        Sampling rate, Hz.
    window_s : float
        Match window, seconds (150 ms in EC57).
    start_s, end_s : float
        Scored interval, seconds (``end_s=None``: to the end).

    Returns
    -------
    MatchResult
    """
    ref = np.sort(np.asarray(reference, dtype=np.int64).ravel())
    det = np.sort(np.asarray(detected, dtype=np.int64).ravel())
    w = float(window_s) * float(fs)
    start = float(start_s) * float(fs)
    end = np.inf if end_s is None else float(end_s) * float(fs)
    ref_keep = np.nonzero((ref >= start) & (ref < end))[0]
    det_keep = np.nonzero((det >= start - w) & (det < end + w))[0]
    ref = ref[ref_keep]
    det = det[det_keep]
    # Detections just outside [start, end) may only serve as matches, never as FP.
    if ref.size and det.size:
        lo = np.searchsorted(det, ref - w, side="left")
        hi = np.searchsorted(det, ref + w, side="right")
        counts = hi - lo
        ri = np.repeat(np.arange(ref.size), counts)
        di = np.concatenate([np.arange(a, b) for a, b in zip(lo, hi)]) if counts.sum() else np.zeros(0, np.int64)
        dist = np.abs(det[di] - ref[ri])
        order = np.argsort(dist, kind="stable")
        ref_used = np.zeros(ref.size, dtype=bool)
        det_used = np.zeros(det.size, dtype=bool)
        pairs_r, pairs_d = [], []
        for k in order:
            r, d = ri[k], di[k]
            if not ref_used[r] and not det_used[d]:
                ref_used[r] = det_used[d] = True
                pairs_r.append(r)
                pairs_d.append(d)
        mr = np.asarray(pairs_r, dtype=np.int64)
        md = np.asarray(pairs_d, dtype=np.int64)
    else:
        det_used = np.zeros(det.size, dtype=bool)
        mr = md = np.zeros(0, dtype=np.int64)
    tp = int(mr.size)
    fn = int(ref.size - tp)
    fp = int(np.sum(~det_used & (det >= start) & (det < end)))
    se = tp / (tp + fn) if tp + fn else 1.0
    pp = tp / (tp + fp) if tp + fp else 1.0
    srt = np.argsort(mr)
    return MatchResult(tp, fn, fp, se, pp, ref_keep[mr[srt]], det_keep[md[srt]])
