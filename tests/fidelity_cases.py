"""Labelled original/cleaned pairs for the fidelity assessment.

Faithful pairs: a synthetic ECG (McSharry et al. 2003 model, tracevet.synthetic)
or MCG with noise, cleaned by the engine with default settings, or the clean
signal plus a small residual of the noise (an ideal cleaning); the real MIT-BIH
excerpt (record 208, tests/data) cleaned with default settings.
Distorted pairs: a faithful cleaning with a distortion of known size, beyond
clinical tolerance, applied to it (R-peak scaling, QRS widening by smoothing,
ST shift, P or T attenuation, ringing, time shift, clipping, edge transient),
or an over-aggressive cleaning by the engine.

Used by tests/test_fidelity_labelled.py (a fast subset) and by
benchmarks/eval_fidelity.py (the full grid).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.ndimage import gaussian_filter1d

from mitdb import excerpt_mv
from tracevet import synthetic as syn
from tracevet.cleaning import DEFAULT_SETTINGS, CleaningSettings, clean
from tracevet.recording import Recording



@dataclass(frozen=True)
class Case:
    """One labelled pair."""

    name: str
    category: str
    distorted: bool
    original: Recording
    cleaned: Recording
    r_peaks: np.ndarray


# --------------------------------------------------------------------------- sources


@dataclass(frozen=True)
class Source:
    """A clean signal, its noisy version and where the beats are."""

    name: str
    clean: np.ndarray | None  # None for real data (unknown clean signal)
    noisy: np.ndarray
    fs: float
    r_peaks: np.ndarray
    p_centres: np.ndarray
    t_centres: np.ndarray
    kind: str
    units: str
    r_amplitude: float
    mains: str = "off"


def _noise(kind: str, n: int, fs: float, scale: float, seed: int) -> tuple[np.ndarray, str]:
    if kind == "white":
        return syn.white_noise(n, 0.04 * scale, seed=seed), "off"
    if kind == "muscle":
        high = min(150.0, 0.45 * fs)
        return syn.muscle_noise(n, fs, 0.05 * scale, seed=seed, high_hz=high), "off"
    if kind == "wander":
        return syn.baseline_wander(n, fs, 0.3 * scale, seed=seed) + syn.white_noise(
            n, 0.015 * scale, seed=seed + 1
        ), "off"
    if kind == "mains":
        freq = 50.0 if seed % 2 == 0 else 60.0
        harmonics = max(1, min(3, int((0.5 * fs - 1) // freq)))
        hum = syn.mains_hum(n, fs, freq, 0.08 * scale, harmonics=harmonics)
        return hum + syn.white_noise(n, 0.015 * scale, seed=seed), str(int(freq))
    if kind == "motion":
        return syn.electrode_motion(n, fs, 0.3 * scale, seed=seed) + syn.white_noise(
            n, 0.02 * scale, seed=seed + 1
        ), "off"
    raise ValueError(kind)


def synthetic_source(fs: float, noise: str, seed: int, duration_s: float = 20.0, heart_rate: float = 70.0,
                     ectopic_every: int | None = None, scale: float = 1.0) -> Source:
    """Synthetic ECG (mV) with one noise type."""
    rec = syn.synthetic_ecg(duration_s, fs, heart_rate_bpm=heart_rate, ectopic_every=ectopic_every, seed=seed)
    n = rec.signal.size
    noise_values, mains = _noise(noise, n, fs, scale, seed)
    normal = rec.beat_labels == "N"
    return Source(
        name=f"ecg-{fs:g}Hz-{noise}-s{seed}",
        clean=rec.signal,
        noisy=rec.signal + noise_values,
        fs=fs,
        r_peaks=rec.r_peaks,
        p_centres=rec.fiducials["P"][normal],
        t_centres=rec.fiducials["T"][normal],
        kind="ecg",
        units="mV",
        r_amplitude=1.0,
        mains=mains,
    )


def mcg_source(fs: float, seed: int, noise_pt: float = 1.0, duration_s: float = 20.0) -> Source:
    """Synthetic MCG (pT) with white sensor noise."""
    rec = syn.synthetic_mcg(duration_s, fs, heart_rate_bpm=65.0, seed=seed)
    n = rec.signal.size
    normal = rec.beat_labels == "N"
    return Source(
        name=f"mcg-{fs:g}Hz-s{seed}",
        clean=rec.signal,
        noisy=rec.signal + syn.white_noise(n, noise_pt, seed=seed),
        fs=fs,
        r_peaks=rec.r_peaks,
        p_centres=rec.fiducials["P"][normal],
        t_centres=rec.fiducials["T"][normal],
        kind="mcg",
        units="pT",
        r_amplitude=70.0,
    )


def mitdb_source(start_s: float, duration_s: float = 30.0) -> Source:
    """A piece of the real MIT-BIH record 208 excerpt (mV), beats from SciPy's find_peaks.

    mV = (adu - 1024) / 200 (tests/data/README.md). Beats: scipy.signal.find_peaks
    on the 5-20 Hz band-passed trace, peaks at least 300 ms apart and above
    35 % of its 99.5th percentile, moved to the largest deviation within
    +-50 ms.
    """
    from scipy.signal import butter, filtfilt, find_peaks

    ecg = excerpt_mv()
    fs = 360.0
    a, b = int(start_s * fs), int((start_s + duration_s) * fs)
    x = ecg[a:b]
    bb, aa = butter(2, [5.0 / (fs / 2), 20.0 / (fs / 2)], btype="band")
    band = np.abs(filtfilt(bb, aa, x))
    peaks, _ = find_peaks(band, distance=int(0.3 * fs), height=0.35 * np.percentile(band, 99.5))
    # Move each peak to the largest deviation from the local median within +-50 ms.
    reach = int(0.05 * fs)
    peaks = peaks[(peaks > reach) & (peaks < x.size - reach)]
    win = x[peaks[:, None] + np.arange(-reach, reach + 1)[None, :]]
    dev = np.abs(win - np.median(x))
    peaks = peaks + np.argmax(dev, axis=1) - reach
    # P and T centres: the peaks of the median beat (40 ms smoothing) in the
    # usual P and T ranges, relative to the PR level (common practice).
    inner = peaks[(peaks > int(0.3 * fs)) & (peaks < x.size - int(0.5 * fs))]
    beat = np.median(x[inner[:, None] + np.arange(-int(0.3 * fs), int(0.5 * fs))[None, :]], axis=0)
    beat = np.convolve(beat - np.median(beat[int(0.2 * fs) : int(0.25 * fs)]), np.ones(15) / 15, mode="same")
    p_lag = int(0.3 * fs) - (int(0.05 * fs) + int(np.argmax(np.abs(beat[int(0.05 * fs) : int(0.22 * fs)]))))
    t_lag = int(np.argmax(np.abs(beat[int(0.42 * fs) : int(0.75 * fs)]))) + int(0.12 * fs)
    return Source(
        name=f"mitdb208-{start_s:g}s",
        clean=None,
        noisy=x,
        fs=fs,
        r_peaks=peaks.astype(np.int64),
        p_centres=peaks - p_lag,
        t_centres=peaks + t_lag,
        kind="ecg",
        units="mV",
        r_amplitude=float(np.median(np.abs(x[peaks] - np.median(x)))),
        mains="60",
    )


# --------------------------------------------------------------------------- cleanings


def _rec(values: np.ndarray, src: Source) -> Recording:
    return Recording(np.asarray(values, dtype=np.float64), src.fs, ("lead",), units=src.units, kind=src.kind)


def default_cleaning(src: Source) -> np.ndarray:
    """The engine with default settings (mains notch when the source has hum)."""
    settings = DEFAULT_SETTINGS if src.mains == "off" else CleaningSettings(mains=src.mains)
    return clean(_rec(src.noisy, src), settings).samples[:, 0].astype(np.float64)


def ideal_cleaning(src: Source) -> np.ndarray:
    """The clean signal plus 10 % of the noise (a near-perfect cleaning)."""
    return src.clean + 0.1 * (src.noisy - src.clean)


# --------------------------------------------------------------------------- distortions


def _bump(n: int, centres: np.ndarray, fs: float, flat_s: float, taper_s: float, offset_s: float = 0.0) -> np.ndarray:
    """Sum of flat-topped raised-cosine windows (1 within +-flat_s, 0 beyond flat_s + taper_s)."""
    t = np.arange(-(flat_s + taper_s), flat_s + taper_s + 1.0 / fs, 1.0 / fs)
    shape = np.where(np.abs(t) <= flat_s, 1.0, 0.5 * (1 + np.cos(np.pi * (np.abs(t) - flat_s) / taper_s)))
    out = np.zeros(n)
    pos = np.asarray(centres, dtype=np.int64) + int(round(offset_s * fs))
    idx = pos[:, None] + np.round(t * fs).astype(np.int64)[None, :]
    ok = (idx >= 0) & (idx < n)
    np.add.at(out, idx[ok], np.broadcast_to(shape, idx.shape)[ok])
    return np.minimum(out, 1.0)


def _local_baseline(y: np.ndarray, peaks: np.ndarray, fs: float) -> np.ndarray:
    """Per-beat PR level (mean over R-90..R-70 ms) spread over each beat's window."""
    n = y.size
    lo, hi = int(round(0.09 * fs)), int(round(0.07 * fs))
    ok = peaks - lo >= 0
    levels = np.array([y[p - lo : p - hi + 1].mean() for p in peaks[ok]])
    base = np.interp(np.arange(n), peaks[ok], levels) if levels.size else np.zeros(n)
    return base


def scale_r(y, src: Source, factor: float):
    """Scale the QRS deviation from the PR level by ``factor`` (R-peak loss)."""
    w = _bump(y.size, src.r_peaks, src.fs, 0.03, 0.03)
    base = _local_baseline(y, src.r_peaks, src.fs)
    return y + (factor - 1.0) * w * (y - base)


def widen_qrs(y, src: Source, sigma_ms: float):
    """Blend in a Gaussian-smoothed copy over the QRS (QRS widening)."""
    smooth = gaussian_filter1d(y, sigma_ms / 1000.0 * src.fs)
    w = _bump(y.size, src.r_peaks, src.fs, 0.08, 0.04)
    return y + w * (smooth - y)


def shift_st(y, src: Source, delta: float):
    """Add ``delta`` (record units) from R+50 ms to R+250 ms with 30 ms tapers (ST shift)."""
    return y + delta * _bump(y.size, src.r_peaks, src.fs, 0.10, 0.03, offset_s=0.15)


def scale_wave(y, src: Source, wave: str, factor: float):
    """Scale the P or T wave deviation from the PR level by ``factor``."""
    centres = src.p_centres if wave == "P" else src.t_centres
    centres = centres[centres >= 0]
    flat, taper = (0.03, 0.04) if wave == "P" else (0.06, 0.08)
    w = _bump(y.size, centres, src.fs, flat, taper)
    base = _local_baseline(y, src.r_peaks, src.fs)
    return y + (factor - 1.0) * w * (y - base)


def add_ringing(y, src: Source, amplitude: float, freq_hz: float = 30.0):
    """Damped oscillation (tau 25 ms) starting 50 ms before and after each R (ringing)."""
    fs = src.fs
    freq = min(freq_hz, 0.3 * fs)
    t = np.arange(int(0.15 * fs)) / fs
    wave = amplitude * np.exp(-t / 0.025) * np.sin(2 * np.pi * freq * t)
    out = y.copy()
    for sign, start in ((1, int(0.05 * fs)), (-1, -int(0.05 * fs))):
        for p in src.r_peaks:
            if sign > 0:
                a = p + start
                seg = slice(a, min(y.size, a + t.size))
                out[seg] += wave[: seg.stop - a] if a < y.size else 0
            else:
                b = p + start
                a = b - t.size
                if a >= 0:
                    out[a:b] += -wave[::-1]
    return out


def time_shift(y, src: Source, ms: float):
    """Delay the trace by ``ms`` (edge sample repeated)."""
    k = int(round(ms / 1000.0 * src.fs))
    return np.concatenate([np.full(k, y[0]), y[:-k]]) if k > 0 else y


def clip_top(y, src: Source, fraction: float):
    """Clip at ``fraction`` of the way from the median to the R-peak height."""
    top = np.median(y) + fraction * (np.median(y[src.r_peaks]) - np.median(y))
    return np.minimum(y, top) if top > np.median(y) else np.maximum(y, top)


def edge_transient(y, src: Source, amplitude: float):
    """Decaying step (tau 0.2 s) at the start and a ramp-up at the end."""
    t = np.arange(y.size) / src.fs
    out = y + amplitude * np.exp(-t / 0.2)
    return out + 0.5 * amplitude * np.exp(-(t[-1] - t) / 0.2)


DISTORTIONS = {
    "r-scale": lambda y, s: scale_r(y, s, 0.72),
    "qrs-smooth": lambda y, s: widen_qrs(y, s, 10.0),
    "st-shift": lambda y, s: shift_st(y, s, 0.2 * s.r_amplitude),
    "p-loss": lambda y, s: scale_wave(y, s, "P", 0.45),
    "t-loss": lambda y, s: scale_wave(y, s, "T", 0.5),
    "ringing": lambda y, s: add_ringing(y, s, 0.15 * s.r_amplitude),
    "time-shift": lambda y, s: time_shift(y, s, 12.0),
    "clipping": lambda y, s: clip_top(y, s, 0.8),
    "edge": lambda y, s: edge_transient(y, s, 0.6 * s.r_amplitude),
}

def _deepest(n: int, wavelet: str) -> int:
    import pywt

    return max(1, pywt.dwt_max_level(n, pywt.Wavelet(wavelet).dec_len))


AGGRESSIVE = {
    # Universal hard threshold with per-level noise estimates down to the deepest level.
    "deep-hard": lambda n: CleaningSettings(transform="dwt", wavelet="db4", level=_deepest(n, "db4"), rule="universal",
                                            threshold_mode="hard", noise_estimate="per_level"),
    # Baseline removal far above the 0.67 Hz bound of AHA/ACCF/HRS 2007 (from memory).
    "heavy-baseline": lambda n: CleaningSettings(baseline="butterworth", baseline_cutoff_hz=3.0),
    # Haar, universal soft threshold with per-level noise estimates, deepest level.
    "deep-soft": lambda n: CleaningSettings(
        transform="dwt", wavelet="haar", level=_deepest(n, "haar"), rule="universal", threshold_mode="soft",
        noise_estimate="per_level",
    ),
}


def make_case(src: Source, cleaning: str, distortion: str | None, detector=None) -> Case:
    """Build one labelled pair from a source.

    Over-aggressive engine cleanings of synthetic sources are labelled by
    their true damage: the assessment of the cleaned trace against the
    noise-free signal (where template noise plays no part). A pair it fails
    is "distorted", one it passes without any flag is a faithful engine
    cleaning, one with warnings only is "borderline" and left out of the rates.
    """
    original = _rec(src.noisy, src)
    if cleaning in AGGRESSIVE:
        from tracevet.assessment import assess

        cleaned = clean(original, AGGRESSIVE[cleaning](src.noisy.size)).samples[:, 0].astype(np.float64)
        truth = assess(_rec(src.clean, src), _rec(cleaned, src), detector=detector or (lambda s, f: src.r_peaks))
        damaged = truth.worst_severity == "fail"
        category = f"engine-{cleaning}" if damaged else f"faithful-engine-{cleaning}"
        if truth.worst_severity == "warn":
            category = f"borderline-engine-{cleaning}"
        return Case(f"{src.name}/{cleaning}", category, damaged, original, _rec(cleaned, src), src.r_peaks)
    base = default_cleaning(src) if cleaning == "default" else ideal_cleaning(src)
    if distortion is None:
        return Case(f"{src.name}/{cleaning}", f"faithful-{cleaning}", False, original, _rec(base, src), src.r_peaks)
    distorted = DISTORTIONS[distortion](base, src)
    return Case(f"{src.name}/{cleaning}/{distortion}", distortion, True, original, _rec(distorted, src), src.r_peaks)
