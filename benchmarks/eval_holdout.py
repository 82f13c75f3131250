"""Held-out evaluation of the fidelity promise: distorted pairs flagged, faithful pairs quiet.

Run: ``PYTHONPATH=src python benchmarks/eval_holdout.py [--quick] [--verbose] [--no-cli]``

The promise under test: a record whose shape was distorted beyond clinical
tolerance gets at least one flag (``warn`` or ``fail``), and a faithful one
gets none. This script builds its own set of original/cleaned pairs,
independent of the assessment's own labelled set (``tests/fidelity_cases.py``):
other seeds, durations, heart rates, noise mixtures, units, cleanings and
distortion shapes, and a labelling that is MEASURED rather than assumed.

Originals
    * Synthetic ECG (:func:`tracevet.synthetic.synthetic_ecg`, McSharry et al.
      2003) at 125-2000 Hz, 45-150 bpm, with and without ventricular-like
      ectopic beats, 10-60 s, with white noise, muscle noise at 30/20/15/10 dB
      SNR, baseline wander, 50/60 Hz mains, electrode motion, and mixtures;
      in mV, in uV (x1000) and in unknown units (x200, ``units=None``).
    * Synthetic MCG (:func:`tracevet.synthetic.synthetic_mcg`) in pT and fT.
    * Multichannel records (three ECG leads sharing the rhythm, two MCG sensors).
    * The real MIT-BIH record 208 excerpt (``tests/data``, mV = (adu - 1024)/200,
      360 Hz) in 20-60 s windows, and resampled with ``scipy.signal.resample_poly``
      to 250, 500 and 1000 Hz.

Cleanings
    * Engine cleanings (:func:`tracevet.cleaning.clean`): defaults and reasonable
      alternatives (swt/dwt; sym4, sym8, db4, coif3; hybrid, sure, bayes,
      minimax, universal soft at moderate levels; baseline cutoff 0.05-0.5 Hz;
      mains notch when the record has mains), and over-aggressive settings
      (haar/db1 at deep levels, universal hard at a high level, per-level
      noise on deep levels, baseline cutoff 2-5 Hz).
    * Oracle: the noise-free synthetic signal plus 5-10 % of the noise.
    * Zero-phase low-pass (``scipy.signal.sosfiltfilt``, Butterworth) at 40-150 Hz.
    * Direct distortions applied to a faithful cleaning (the oracle for
      synthetic records, the default engine cleaning for the real one):
      QRS-only R scaling by 0.7-0.85, QRS widening by Gaussian smoothing, ST
      shifts of 0.12-0.3 mV (ECG) or 10-20 % of R (MCG), T or P attenuated by
      60 %, causal Butterworth low-pass 20-40 Hz and high-pass 0.5-1 Hz
      (``scipy.signal.sosfilt``), time shifts of 5-20 ms, damped 20-40 Hz
      ringing after every QRS, clipping at 80 % of the typical R peak, and corrupted
      first and last 0.5 s.

Labelling (measured, not assumed)
    Every pair is labelled by measuring what the cleaning did to the heart
    signal: median beat templates (each beat referred to its own PR-segment
    level) of the cleaned trace and of the reference, on the known beat times.
    The reference is the noise-free truth for synthetic records and the
    original for the real excerpt (beats from SciPy's ``find_peaks`` on a
    5-25 Hz band, dominant shape by correlation). Fiducial points are found on
    the reference template by this script's own slope rule. Measured: R
    amplitude change, ST level change at J+80 ms (J+60 ms when RR < 0.6 s),
    QRS width change (outermost crossings of 10 % of each template's own peak
    deviation), timing shift (cross-correlation over the QRS, parabolic
    interpolation), P and T amplitude change, and ringing (r.m.s. of the
    detrended template difference beside the QRS, template noise removed in
    quadrature). Each measure has a standard error from the beat-to-beat
    spread of the difference; a bound counts as crossed only when the value
    clears it by two standard errors.

    ``distorted``: |R change| > 15 %, or |ST| > 0.10 mV (ECG; 8 % of R for MCG),
    or QRS widening > 12 ms, or |shift| > 5 ms, or P or T changed by > 40 %,
    or ringing > 0.03 mV (3 % of R for MCG), or (synthetic) a largest edge
    error against the truth in the first/last 0.5 s (each window linearly
    detrended, so a slow offset does not count) exceeding that of the
    interior 0.5 s windows (95th percentile) by > 0.15 mV (10 % of R); edge
    corruption is distorted by construction. ``faithful``:
    |R| < 7 %, |ST| < 0.04 mV (3 % of R), |width change| < 5 ms, |shift| < 2 ms,
    P and T within 15 %, ringing < 0.012 mV (1.2 % of R), edge excess
    < 0.05 mV (3 % of R). Anything between is ``ambiguous`` and reported
    apart, outside the rates. ECG labels use millivolts whatever units the
    record declares (the truth's scale is known here).

Reported: per category, detection rate (any flag) on distorted pairs, the
false-flag rate (any flag) on faithful pairs, fail-only rates, crashes (any
exception from ``assess``, with a one-line traceback summary), and every
failing case with its flags and the metrics involved. A few pairs are also
run through ``tracevet assess --json`` in a subprocess to check the CLI
contract (one JSON object with ``metrics`` and ``flags``; exit 0/1/2).
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import tempfile
import time
import traceback
from collections import defaultdict
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
from scipy import signal as sps
from scipy.ndimage import gaussian_filter1d

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "src"))

from tracevet import synthetic as syn  # noqa: E402
from tracevet.assessment import assess  # noqa: E402
from tracevet.cleaning import DEFAULT_SETTINGS, apply_overrides, clean  # noqa: E402
from tracevet.errors import SettingsError  # noqa: E402
from tracevet.recording import Recording, write_recording  # noqa: E402

DATA = ROOT / "tests" / "data" / "mitdb-208-excerpt.npz"

# Label thresholds: (distorted beyond, faithful below). Amplitudes of ECG in mV,
# of MCG as a fraction of R.
LABEL = {
    "r": (0.15, 0.07),
    "st_mv": (0.10, 0.04),
    "st_rel": (0.08, 0.03),
    "widen": (12.0, 5.0),
    "shift": (5.0, 2.0),
    "wave": (0.40, 0.15),
    "ring_mv": (0.03, 0.012),
    "ring_rel": (0.03, 0.012),
    "edge_mv": (0.15, 0.05),
    "edge_rel": (0.10, 0.03),
}


# --------------------------------------------------------------------------- sources


@dataclass
class Source:
    """An original recording with what is known about it."""

    name: str
    fs: float
    kind: str
    units: str | None
    original: np.ndarray  # (n, ch) record units
    truth: np.ndarray | None  # (n, ch) noise-free, record units (None for real)
    beats: np.ndarray  # R samples of every beat (for distortions)
    normal: np.ndarray  # R samples of dominant/normal beats (for labels)
    mv_per_unit: float | None  # ECG: mV per record unit (known to the script)
    mains: str = "off"
    noise: np.ndarray | None = None
    group: str = "synthetic-ecg"
    anat: list = field(default_factory=list)  # per channel anatomy dicts

    @property
    def n(self) -> int:
        return self.original.shape[0]

    @property
    def rr_s(self) -> float:
        return float(np.median(np.diff(self.normal))) / self.fs

    def recording(self, values: np.ndarray, source: str = "<memory>") -> Recording:
        names = tuple(f"ch{i + 1}" for i in range(values.shape[1]))
        return Recording(values.astype(np.float64), self.fs, names, units=self.units, kind=self.kind, source=source)

    def reference(self) -> np.ndarray:
        return self.truth if self.truth is not None else self.original


def _smooth(values: np.ndarray, width: int) -> np.ndarray:
    width = max(1, int(width) | 1)
    if width == 1:
        return values.astype(np.float64)
    half = width // 2
    padded = np.concatenate([np.full(half, values[0]), values, np.full(half, values[-1])])
    c = np.concatenate([[0.0], np.cumsum(padded)])
    return (c[width:] - c[:-width]) / width


def _windows(values: np.ndarray, centres: np.ndarray, pre: int, post: int) -> np.ndarray:
    return values[centres[:, None] + np.arange(-pre, post + 1)[None, :]].astype(np.float64)


def _bounds(fs: float, rr_s: float) -> tuple[int, int]:
    return int(round(min(0.30, 0.42 * rr_s) * fs)), int(round(min(0.58, 0.62 * rr_s) * fs))


def _usable(centres: np.ndarray, n: int, fs: float, pre: int, post: int) -> np.ndarray:
    margin = int(0.6 * fs)
    return centres[(centres - pre >= margin) & (centres + post < n - margin)]


def anatomy(ref: np.ndarray, centres: np.ndarray, fs: float, rr_s: float) -> dict:
    """Fiducial offsets (samples from R) on the reference template (this script's own slope rule)."""
    pre, post = _bounds(fs, rr_s)
    rows = _windows(ref, _usable(centres, ref.size, fs, pre, post), pre, post)
    tmpl = np.median(rows - np.median(rows[:, : max(2, int(0.02 * fs))], axis=1, keepdims=True), axis=0)
    c = pre
    reach = max(1, int(0.03 * fs))
    rough = tmpl - np.median(tmpl)
    r = c - reach + int(np.argmax(np.abs(rough[c - reach : c + reach + 1])))
    slope = np.abs(np.gradient(_smooth(tmpl, int(0.008 * fs))))
    steep = float(slope[max(0, r - reach) : r + reach + 1].max())
    thr = 0.05 * steep
    run = max(2, int(round(0.012 * fs)))
    quiet = slope < thr
    # J: first quiet run after R (skip the R apex itself: start 8 ms on).
    j = None
    for i in range(r + max(1, int(0.008 * fs)), min(tmpl.size - run, r + int(0.16 * fs))):
        if quiet[i : i + run].all():
            j = i
            break
    j = j if j is not None else r + int(0.06 * fs)
    on = None
    for i in range(r - max(1, int(0.008 * fs)), max(run, r - int(0.14 * fs)), -1):
        if quiet[i - run + 1 : i + 1].all():
            on = i
            break
    on = on if on is not None else r - int(0.05 * fs)
    w10 = max(2, int(0.01 * fs))
    # P first, against the level at QRS onset; the isoelectric window is then the
    # flattest 10 ms between the P wave and the QRS onset (so at high rates,
    # where the PR segment is short, it does not sit on the P wave).
    p_lo, p_hi = max(0, r - int(min(0.3, 0.4 * rr_s) * fs)), on - int(0.015 * fs)
    rough_dev = _smooth(tmpl - tmpl[on], int(0.02 * fs))
    p = p_lo + int(np.argmax(np.abs(rough_dev[p_lo:p_hi]))) if p_hi - p_lo > 3 else None
    lo_iso = max(0, on - int(0.06 * fs)) if p is None else p + int(round(0.4 * (on - p)))
    cand = np.arange(lo_iso, max(lo_iso + 1, on - int(0.004 * fs) - w10 + 1))
    cost = np.array([slope[k : k + w10].mean() for k in cand])
    iso = int(cand[int(np.argmin(cost))])
    level = float(tmpl[iso : iso + w10].mean())
    dev = _smooth(tmpl - level, int(0.02 * fs))
    t_lo, t_hi = j + int(0.04 * fs), min(tmpl.size - 1, r + int(min(0.45, 0.6 * rr_s) * fs))
    t = t_lo + int(np.argmax(np.abs(dev[t_lo:t_hi]))) if t_hi - t_lo > 3 else None
    r_amp = float(tmpl[r] - level)

    def half_width(k):
        if k is None:
            return None
        a = abs(dev[k])
        left = k
        while left > 0 and abs(dev[left]) > 0.3 * a:
            left -= 1
        right = k
        while right < dev.size - 1 and abs(dev[right]) > 0.3 * a:
            right += 1
        return max(k - left, right - k)

    return {
        "r": r - c,
        "on": on - c,
        "j": j - c,
        "iso": iso - c,
        "isow": w10,
        "t": None if t is None else t - c,
        "p": None if p is None else p - c,
        "t_hw": half_width(t),
        "p_hw": half_width(p),
        "r_amp": r_amp,
        "p_amp": None if p is None else float(dev[p]),
        "t_amp": None if t is None else float(dev[t]),
    }


def _finish(src: Source) -> Source:
    ref = src.reference()
    src.anat = [anatomy(ref[:, c], src.normal, src.fs, src.rr_s) for c in range(ref.shape[1])]
    return src


def _noise(kind: str, n: int, fs: float, truth_mv: np.ndarray, rng: np.random.Generator, seed: int):
    """Noise (mV) of one kind and the mains setting a cleaning should use."""
    mains = "off"
    if kind == "white":
        noise = syn.white_noise(n, rng.uniform(0.01, 0.05), seed=seed)
    elif kind.startswith("muscle"):
        snr = float(kind.split("@")[1])
        raw = syn.muscle_noise(n, fs, 1.0, seed=seed, bursty=bool(rng.integers(2)))
        noise = syn.add_noise_at_snr(truth_mv, raw, snr) - truth_mv
    elif kind == "wander":
        noise = syn.baseline_wander(n, fs, rng.uniform(0.15, 0.5), breathing_hz=rng.uniform(0.15, 0.35), seed=seed)
        noise += syn.white_noise(n, 0.01, seed=seed + 1)
    elif kind.startswith("mains"):
        freq = float(kind[5:])
        noise = syn.mains_hum(n, fs, freq, rng.uniform(0.03, 0.2)) + syn.white_noise(n, 0.01, seed=seed)
        mains = kind[5:]
    elif kind == "motion":
        noise = syn.electrode_motion(n, fs, rng.uniform(0.2, 0.6), events_per_min=rng.uniform(2, 6), seed=seed)
        noise += syn.white_noise(n, 0.015, seed=seed + 1)
    elif kind == "mix":
        raw = syn.muscle_noise(n, fs, 1.0, seed=seed)
        noise = syn.add_noise_at_snr(truth_mv, raw, 20.0) - truth_mv
        noise += syn.baseline_wander(n, fs, 0.25, seed=seed + 1) + syn.mains_hum(n, fs, 50.0, 0.08)
        mains = "50"
    elif kind == "mix60":
        noise = syn.white_noise(n, 0.03, seed=seed) + syn.mains_hum(n, fs, 60.0, 0.1)
        noise += syn.electrode_motion(n, fs, 0.3, seed=seed + 2)
        mains = "60"
    else:
        raise ValueError(kind)
    return noise, mains


def synthetic_ecg_source(fs, noise_kind, seed, units, duration, hr, ectopic, leads=1) -> Source:
    """Synthetic ECG (one or three leads sharing the rhythm) with one noise kind."""
    rng = np.random.default_rng(seed)
    amp = float(rng.uniform(0.6, 2.0))
    rec = syn.synthetic_ecg(duration, fs, heart_rate_bpm=hr, ectopic_every=ectopic, amplitude_mv=amp, seed=seed,
                            hrv_std_bpm=_hrv(seed))
    truths = [rec.signal]
    if leads > 1:
        # Same rhythm arguments as the first lead, so the beats coincide; a
        # smaller lead and an inverted one.
        second = syn.synthetic_ecg(duration, fs, heart_rate_bpm=hr, ectopic_every=ectopic, amplitude_mv=0.5 * amp,
                                   seed=seed, hrv_std_bpm=_hrv(seed))
        truths = [rec.signal, second.signal, -0.7 * rec.signal]
    n = rec.signal.size
    noises, mains = [], "off"
    for k, truth in enumerate(truths):
        nz, mains = _noise(noise_kind, n, fs, truth, rng, seed * 7 + k)
        noises.append(nz)
    gain = {"mV": 1.0, "uV": 1000.0, None: 200.0}[units]
    truth = np.stack(truths, axis=1) * gain
    noise = np.stack(noises, axis=1) * gain
    normal = rec.r_peaks[rec.beat_labels == "N"]
    tag = f"{'3lead-' if leads > 1 else ''}ecg-{fs:g}Hz-{hr:g}bpm-{noise_kind}-{units or 'nounits'}-{duration:g}s" + (
        f"-ect{ectopic}" if ectopic else "") + f"-s{seed}"
    return _finish(
        Source(
            tag,
            fs,
            "ecg",
            units,
            truth + noise,
            truth,
            rec.r_peaks,
            normal,
            1.0 / gain,
            mains,
            noise,
            "multichannel"
            if leads > 1
            else ("synthetic-ecg" if units == "mV" else f"synthetic-ecg-{units or 'nounits'}"),
        )
    )


def _hrv(seed: int) -> float:
    return 0.5 + (seed % 5) * 0.5


def synthetic_mcg_source(fs, seed, units, duration, hr, noise_pt, mains=None, ectopic=None, sensors=1) -> Source:
    """Synthetic MCG (pT or fT) with white sensor noise, optionally mains."""
    rng = np.random.default_rng(seed)
    amp = float(rng.uniform(40, 100))
    rec = syn.synthetic_mcg(duration, fs, heart_rate_bpm=hr, amplitude_pt=amp, seed=seed, ectopic_every=ectopic)
    truths = [rec.signal]
    if sensors > 1:
        other = syn.synthetic_mcg(
            duration, fs, heart_rate_bpm=hr, amplitude_pt=0.6 * amp, seed=seed, ectopic_every=ectopic
        )
        truths.append(-other.signal)
    n = rec.signal.size
    noises = []
    for k in range(len(truths)):
        nz = syn.white_noise(n, noise_pt, seed=seed * 3 + k)
        if mains:
            nz += syn.mains_hum(n, fs, float(mains), 5.0 * noise_pt)
        noises.append(nz)
    gain = {"pT": 1.0, "fT": 1000.0}[units]
    truth = np.stack(truths, axis=1) * gain
    noise = np.stack(noises, axis=1) * gain
    normal = rec.r_peaks[rec.beat_labels == "N"]
    mains_tag = "-mains" + mains if mains else ""
    lead_tag = "2ch-" if sensors > 1 else ""
    tag = f"{lead_tag}mcg-{fs:g}Hz-{hr:g}bpm-{noise_pt:g}pT{mains_tag}-{units}-{duration:g}s-s{seed}"
    return _finish(Source(tag, fs, "mcg", units, truth + noise, truth, rec.r_peaks, normal, None, mains or "off", noise,
                          "multichannel" if sensors > 1 else "synthetic-mcg"))


def reference_beats(x: np.ndarray, fs: float) -> tuple[np.ndarray, np.ndarray]:
    """All beats and dominant-shape beats of a real trace (SciPy find_peaks on a 5-25 Hz band)."""
    sos = sps.butter(3, [5.0, 25.0], btype="band", fs=fs, output="sos")
    band = np.abs(sps.sosfiltfilt(sos, x))
    env = _smooth(band, int(0.05 * fs))
    peaks, _ = sps.find_peaks(env, height=0.3 * np.percentile(env, 99), distance=int(0.25 * fs))
    reach = int(0.05 * fs)
    base = x - sps.medfilt(x, int(0.6 * fs) | 1) if x.size < 400000 else x - np.median(x)
    out = []
    for p in peaks:
        lo, hi = max(0, p - reach), min(x.size, p + reach + 1)
        out.append(lo + int(np.argmax(np.abs(base[lo:hi]))))
    beats = np.unique(np.array(out, dtype=np.int64))
    half = int(0.06 * fs)
    ok = beats[(beats >= half) & (beats < x.size - half)]
    rows = _windows(base, ok, half, half)
    rows -= rows.mean(axis=1, keepdims=True)
    rows /= np.linalg.norm(rows, axis=1, keepdims=True) + 1e-12
    corr = rows @ rows.T
    medoid = int(np.argmax(np.median(corr, axis=1)))
    dominant = ok[corr[medoid] > 0.9]
    # Refine dominant R to the same polarity as the medoid.
    return beats, dominant


def real_source(start_s: float, duration_s: float, fs_out: float | None = None) -> Source:
    """A window of the real MIT-BIH record 208 excerpt, optionally resampled."""
    with np.load(DATA) as data:
        mv = (data["ecg"].astype(np.float64) - 1024.0) / 200.0
    fs = 360.0
    x = mv[int(start_s * fs) : int((start_s + duration_s) * fs)]
    if fs_out is not None and fs_out != fs:
        from math import gcd

        g = gcd(int(fs_out), int(fs))
        x = sps.resample_poly(x, int(fs_out) // g, int(fs) // g)
        fs = float(fs_out)
    beats, dominant = reference_beats(x, fs)
    tag = f"mitdb208-{start_s:g}+{duration_s:g}s-{fs:g}Hz"
    return _finish(Source(tag, fs, "ecg", "mV", x[:, None], None, beats, dominant, 1.0, "60", None,
                          "real-mitdb" if fs == 360.0 else "real-mitdb-resampled"))


# --------------------------------------------------------------------------- cleanings and distortions


def engine(src: Source, overrides: list[str]) -> np.ndarray:
    settings = apply_overrides(DEFAULT_SETTINGS, overrides)
    return clean(src.recording(src.original), settings).samples.astype(np.float64)


def oracle(src: Source, residual: float) -> np.ndarray:
    return src.truth + residual * src.noise


def zero_phase_lowpass(y: np.ndarray, fs: float, fc: float, order: int = 4) -> np.ndarray:
    sos = sps.butter(order, min(fc, 0.45 * fs), fs=fs, output="sos")
    return sps.sosfiltfilt(sos, y, axis=0)


def _region(src: Source, ch: int, start: int, stop: int, taper: int, centres=None) -> np.ndarray:
    """Sum of flat-topped windows (1 on [R+start, R+stop], cosine tapers of ``taper`` samples)."""
    centres = src.beats if centres is None else centres
    taper = max(1, taper)
    offs = np.arange(start - taper, stop + taper + 1)
    shape = np.ones(offs.size)
    ramp = 0.5 - 0.5 * np.cos(np.pi * np.arange(1, taper + 1) / (taper + 1))
    shape[:taper] = ramp
    shape[-taper:] = ramp[::-1]
    w = np.zeros(src.n)
    idx = centres[:, None] + offs[None, :]
    ok = (idx >= 0) & (idx < src.n)
    np.maximum.at(w, idx[ok], np.broadcast_to(shape, idx.shape)[ok])
    return w


def _beat_level(src: Source, y: np.ndarray, ch: int) -> np.ndarray:
    """Per-beat PR level spread over each beat (held between beats)."""
    a = src.anat[ch]
    lo = src.beats + a["iso"]
    ok = (lo >= 0) & (lo + a["isow"] < src.n)
    c = np.concatenate([[0.0], np.cumsum(y)])
    levels = (c[lo[ok] + a["isow"]] - c[lo[ok]]) / a["isow"]
    pos = src.beats[ok]
    return np.interp(np.arange(src.n), pos, levels) if pos.size else np.full(src.n, np.median(y))


def _per_channel(src: Source, y: np.ndarray, fn, channels=None) -> np.ndarray:
    out = y.copy()
    for ch in (range(y.shape[1]) if channels is None else channels):
        out[:, ch] = fn(ch, y[:, ch])
    return out


def scale_qrs(src, y, factor, channels=None):
    def f(ch, v):
        a = src.anat[ch]
        w = _region(src, ch, a["on"] - int(0.004 * src.fs), a["j"] + int(0.004 * src.fs), int(0.008 * src.fs))
        level = _beat_level(src, v, ch)
        return v - (1.0 - factor) * w * (v - level)
    return _per_channel(src, y, f, channels)


def widen_qrs(src, y, sigma_ms, channels=None):
    def f(ch, v):
        a = src.anat[ch]
        w = _region(src, ch, a["on"] - int(0.02 * src.fs), a["j"] + int(0.02 * src.fs), int(0.015 * src.fs))
        g = gaussian_filter1d(v, sigma_ms * src.fs / 1000.0)
        return v + w * (g - v)
    return _per_channel(src, y, f, channels)


def shift_st(src, y, delta_mv_or_rel, channels=None):
    def f(ch, v):
        a = src.anat[ch]
        t = a["t"] if a["t"] is not None else a["j"] + int(0.2 * src.fs)
        w = _region(src, ch, a["j"] + int(0.012 * src.fs), t, int(0.012 * src.fs))
        if src.kind == "ecg":
            delta = delta_mv_or_rel / src.mv_per_unit
        else:
            delta = delta_mv_or_rel * abs(a["r_amp"])
        return v + delta * w
    return _per_channel(src, y, f, channels)


def attenuate_wave(src, y, wave, keep, channels=None):
    def f(ch, v):
        a = src.anat[ch]
        centre, hw = a[wave], a[f"{wave}_hw"]
        if centre is None or hw is None:
            return v
        hw = int(1.6 * hw)
        w = _region(src, ch, centre - hw // 2, centre + hw // 2, hw // 2 + 1)
        level = _beat_level(src, v, ch)
        return v - (1.0 - keep) * w * (v - level)
    return _per_channel(src, y, f, channels)


def causal_filter(y, fs, kind, fc, order):
    sos = sps.butter(order, fc, btype=kind, fs=fs, output="sos")
    zi = sps.sosfilt_zi(sos)[:, :, None] * y[0][None, None, :]
    return sps.sosfilt(sos, y, axis=0, zi=zi)[0]


def time_shift(y, samples):
    out = np.roll(y, samples, axis=0)
    if samples > 0:
        out[:samples] = y[0]
    elif samples < 0:
        out[samples:] = y[-1]
    return out


def add_ringing(src, y, freq, amp_mv_or_rel, tau_s, channels=None):
    def f(ch, v):
        a = src.anat[ch]
        t = np.arange(int(5 * tau_s * src.fs)) / src.fs
        amp = amp_mv_or_rel / src.mv_per_unit if src.kind == "ecg" else amp_mv_or_rel * abs(a["r_amp"])
        kernel = amp * np.exp(-t / tau_s) * np.sin(2 * np.pi * freq * t)
        imp = np.zeros(src.n)
        pos = src.beats + a["j"] + int(0.005 * src.fs)
        imp[pos[(pos >= 0) & (pos < src.n)]] = 1.0
        return v + sps.fftconvolve(imp, kernel)[: src.n]
    return _per_channel(src, y, f, channels)


def clip_top(src, y, fraction=0.8, channels=None):
    """Clip at ``fraction`` of the typical R peak (median over the normal beats) above the median level."""
    def f(ch, v):
        med = float(np.median(v))
        peak = float(np.median(v[src.normal + src.anat[ch]["r"]]))
        if src.anat[ch]["r_amp"] >= 0:
            return np.minimum(v, med + fraction * (peak - med))
        return np.maximum(v, med - fraction * (med - peak))
    return _per_channel(src, y, f, channels)


def corrupt_edges(src, y, how, rng, channels=None):
    m = int(0.5 * src.fs)

    def f(ch, v):
        v = v.copy()
        amp = abs(src.anat[ch]["r_amp"])
        t = np.arange(m) / src.fs
        if how == "step":
            v[:m] += 0.8 * amp * np.exp(-t / 0.12)
            v[-m:] -= 0.8 * amp * np.exp(-t[::-1] / 0.12)
        elif how == "hold":
            v[:m] = v[m]
            v[-m:] = v[-m - 1]
        else:  # burst
            v[:m] += 0.3 * amp * rng.standard_normal(m)
            v[-m:] += 0.3 * amp * rng.standard_normal(m)
        return v
    return _per_channel(src, y, f, channels)


# --------------------------------------------------------------------------- labelling


def true_distortion(src: Source, cleaned: np.ndarray) -> list[dict]:
    """Measured distortion of ``cleaned`` against the reference, per channel."""
    ref = src.reference()
    fs = src.fs
    pre, post = _bounds(fs, src.rr_s)
    centres = _usable(src.normal, src.n, fs, pre, post)
    out = []
    for ch, a in enumerate(src.anat):
        iso = slice(pre + a["iso"], pre + a["iso"] + a["isow"])
        xr = _windows(ref[:, ch], centres, pre, post)
        yr = _windows(cleaned[:, ch], centres, pre, post)
        xw = xr - xr[:, iso].mean(axis=1, keepdims=True)
        yw = yr - yr[:, iso].mean(axis=1, keepdims=True)
        x = np.median(xw, axis=0)
        y = np.median(yw, axis=0)
        # Standard error of the template difference from the beat-to-beat spread
        # (median of N values: sqrt(pi/2) * 1.4826 MAD / sqrt(N); common practice).
        dw = yw - xw
        n_b = dw.shape[0]

        def se_of(rows):
            med = np.median(rows, axis=0)
            return 1.2533 * 1.4826 * np.median(np.abs(rows - med), axis=0) / np.sqrt(max(n_b, 1))

        se = se_of(dw)
        r = pre + a["r"]
        reach = max(1, int(0.025 * fs))
        pol = 1.0 if x[r] >= 0 else -1.0
        r_amp = abs(x[r])
        y_peak = float(np.max(pol * y[r - reach : r + reach + 1]))
        m: dict = {"r": y_peak / r_amp - 1.0}
        scale = 1.0 / r_amp if src.kind != "ecg" else src.mv_per_unit
        err: dict = {"r": float(se[r]) / r_amp}
        # ST at J+80 ms (J+60 ms when RR < 0.6 s), +-10 ms.
        st_at = pre + a["j"] + int(round((0.08 if src.rr_s >= 0.6 else 0.06) * fs))
        h = max(1, int(0.01 * fs))
        m["st"] = float(np.mean(y[st_at - h : st_at + h + 1]) - np.mean(x[st_at - h : st_at + h + 1])) * scale
        err["st"] = float(se_of(dw[:, st_at - h : st_at + h + 1].mean(axis=1, keepdims=True))[0]) * scale
        # QRS width: outermost crossings of 10 % of each template's own peak deviation.
        lo, hi = pre + a["on"] - int(0.03 * fs), pre + a["j"] + int(0.03 * fs)

        def width(t):
            seg = np.abs(t[lo:hi])
            above = np.flatnonzero(seg > 0.1 * seg.max())
            return (above[-1] - above[0]) / fs * 1000.0 if above.size else 0.0

        m["widen"] = width(y) - width(x)
        # Timing: cross-correlation lag over the QRS.
        max_lag = max(2, int(0.03 * fs))
        ref_seg = x[lo:hi] - x[lo:hi].mean()
        scores = []
        for lag in range(-max_lag, max_lag + 1):
            a0, b0 = lo + lag, hi + lag
            if a0 < 0 or b0 > y.size:
                scores.append(-np.inf)
                continue
            seg = y[a0:b0] - y[a0:b0].mean()
            scores.append(float(np.dot(ref_seg, seg)))
        scores = np.array(scores)
        j = int(np.argmax(scores))
        shift = float(j - max_lag)
        if 0 < j < scores.size - 1 and np.all(np.isfinite(scores[j - 1 : j + 2])):
            den = scores[j - 1] - 2 * scores[j] + scores[j + 1]
            if den < 0:
                shift += 0.5 * (scores[j - 1] - scores[j + 1]) / den
        m["shift"] = shift / fs * 1000.0
        # P and T change on 20 ms smoothed templates.
        xs, ys = _smooth(x, int(0.02 * fs)), _smooth(y, int(0.02 * fs))
        sw = max(1, int(0.02 * fs))
        for wave in ("p", "t"):
            k = a[wave]
            m[wave] = None
            if k is not None and abs(xs[pre + k]) > 0.05 * r_amp:
                m[wave] = float(ys[pre + k] / xs[pre + k] - 1.0)
                lo_w, hi_w = max(0, pre + k - sw // 2), pre + k + sw // 2 + 1
                err[wave] = float(se_of(dw[:, lo_w:hi_w].mean(axis=1, keepdims=True))[0]) / abs(xs[pre + k])
        # Ringing: detrended template difference beside the QRS.
        d = y - x
        flank = max(3, int(0.05 * fs))
        gap = max(1, int(0.01 * fs))
        parts = []
        for s0 in (pre + a["on"] - gap - flank, pre + a["j"] + gap):
            seg = d[max(0, s0) : s0 + flank]
            if seg.size >= 3:
                tt = np.arange(seg.size)
                seg = seg - np.polyval(np.polyfit(tt, seg, 1), tt)
                # Template noise subtracted in quadrature.
                noise_sq = float(np.mean(se[max(0, s0) : s0 + flank] ** 2))
                parts.append(float(np.sqrt(max(0.0, np.mean(seg**2) - noise_sq))))
        m["ring"] = (max(parts) if parts else 0.0) * scale
        err["ring"] = float(np.sqrt(np.mean(se[lo:hi] ** 2))) * scale / 2.0
        # Edge artefact (synthetic only): how far the largest error against the
        # truth in the first and last 0.5 s exceeds the same statistic of the
        # interior 0.5 s windows (95th percentile).
        m["edge"] = None
        if src.truth is not None:
            e = cleaned[:, ch] - src.truth[:, ch]
            k = int(0.5 * fs)
            n_in = (e.size - 2 * k) // k
            if n_in >= 4:
                # Each 0.5 s window of the error is detrended (a slow baseline
                # offset is not a shape change); the largest remaining deviation.
                rows = np.vstack([e[:k], e[k : k + n_in * k].reshape(n_in, k), e[-k:]])
                tt = np.arange(k) - (k - 1) / 2.0
                rows = rows - rows.mean(axis=1, keepdims=True)
                rows = rows - (rows @ tt / float(tt @ tt))[:, None] * tt
                peak = np.abs(rows).max(axis=1)
                inner = float(np.percentile(peak[1:-1], 95))
                m["edge"] = (max(peak[0], peak[-1]) - inner) * scale
        m["se"] = {k: float(v) for k, v in err.items()}
        out.append(m)
    return out


def label_of(src: Source, measures: list[dict], forced: str | None = None) -> tuple[str, list[str]]:
    """'distorted', 'faithful' or 'ambiguous', with the reasons."""
    if forced:
        return forced, ["by construction"]
    ecg = src.kind == "ecg"
    reasons, soft = [], []
    for ch, m in enumerate(measures):
        se = m["se"]
        checks = [
            ("r", abs(m["r"]), LABEL["r"]),
            ("st", abs(m["st"]), LABEL["st_mv"] if ecg else LABEL["st_rel"]),
            ("widen", abs(m["widen"]), LABEL["widen"]),
            ("shift", abs(m["shift"]), LABEL["shift"]),
            ("ring", m["ring"], LABEL["ring_mv"] if ecg else LABEL["ring_rel"]),
        ]
        for wave in ("p", "t"):
            if m[wave] is not None:
                checks.append((wave, abs(m[wave]), LABEL["wave"]))
        if m.get("edge") is not None:
            checks.append(("edge", m["edge"], LABEL["edge_mv"] if ecg else LABEL["edge_rel"]))
        # Beyond a bound only when 2 standard errors of the template noise clear it.
        for name, value, (bad, good) in checks:
            e = 2.0 * se.get(name, 0.0)
            if value - e > bad:
                reasons.append(f"ch{ch + 1}:{name}={value:.3g}>{bad:g}")
            elif value + e >= good:
                soft.append(f"ch{ch + 1}:{name}={value:.3g}+-{e:.2g}")
    if reasons:
        return "distorted", reasons
    if soft:
        return "ambiguous", soft
    return "faithful", []


# --------------------------------------------------------------------------- cases


@dataclass
class Case:
    category: str
    name: str
    src: Source
    cleaned: np.ndarray | None
    forced: str | None = None
    error: str | None = None


def faithful_engine_variants(src: Source, rng) -> list[tuple[str, list[str]]]:
    mains = [f"mains={src.mains}"] if src.mains != "off" else []
    pool = [
        ("default", []),
        ("swt-sym8-bayes-soft", ["wavelet=sym8", "rule=bayes", "threshold_mode=soft"]),
        ("dwt-db4-sure-soft", ["transform=dwt", "wavelet=db4", "rule=sure", "threshold_mode=soft"]),
        ("swt-coif3-minimax-soft", ["wavelet=coif3", "rule=minimax", "threshold_mode=soft"]),
        ("dwt-sym4-universal-soft-L3", ["transform=dwt", "rule=universal", "threshold_mode=soft", "level=3"]),
        ("swt-sym4-hybrid-soft-bl0.3", ["threshold_mode=soft", f"baseline_cutoff_hz={rng.choice([0.3, 0.5])}"]),
        ("swt-db4-bayes-garrote-bl0.1", ["wavelet=db4", "rule=bayes", "baseline_cutoff_hz=0.1"]),
    ]
    picks = [pool[0]] + [pool[i] for i in rng.choice(np.arange(1, len(pool)), size=3, replace=False)]
    return [(name, ov + mains) for name, ov in picks]


AGGRESSIVE = [
    ("haar-L8-universal-hard", ["transform=dwt", "wavelet=haar", "level=8", "rule=universal", "threshold_mode=hard"]),
    (
        "db1-L9-perlevel-universal",
        [
            "transform=dwt",
            "wavelet=db1",
            "level=9",
            "rule=universal",
            "noise_estimate=per_level",
            "threshold_mode=soft",
        ],
    ),
    ("sym4-L8-universal-hard", ["wavelet=sym4", "level=8", "rule=universal", "threshold_mode=hard"]),
    ("baseline-2Hz", ["baseline_cutoff_hz=2"]),
    ("baseline-3.5Hz", ["baseline_cutoff_hz=3.5"]),
    ("baseline-5Hz", ["baseline_cutoff_hz=5"]),
    ("perlevel-sure-L8", ["level=8", "noise_estimate=per_level", "rule=sure", "threshold_mode=soft"]),
    (
        "haar-L7-perlevel-bayes",
        ["transform=dwt", "wavelet=haar", "level=7", "noise_estimate=per_level", "rule=bayes", "threshold_mode=soft"],
    ),
]


def cases_for(src: Source, rng: np.random.Generator, quick: bool):
    """Yield the cases of one source (cleaned traces built lazily)."""
    real = src.truth is None
    ecg = src.kind == "ecg"
    mains = [f"mains={src.mains}"] if src.mains != "off" else []
    # Faithful-intended cleanings.
    for name, ov in faithful_engine_variants(src, rng)[: 2 if quick else 4]:
        yield Case("faithful:engine", f"{src.name} | engine {name}", src, _try(lambda ov=ov: engine(src, ov)))
    if not real:
        res = float(rng.uniform(0.05, 0.1))
        yield Case("faithful:oracle", f"{src.name} | oracle residual {res:.2f}", src, oracle(src, res))
    base = oracle(src, float(rng.uniform(0.05, 0.1))) if not real else engine(src, mains)
    for fc in ((40.0,) if quick else (40.0, float(rng.choice([60.0, 100.0, 150.0])))):
        if fc < 0.45 * src.fs:
            yield Case("faithful:lowpass-zero-phase", f"{src.name} | sosfiltfilt low-pass {fc:g} Hz", src,
                       zero_phase_lowpass(base, src.fs, fc))
    # Over-aggressive engine settings.
    picks = rng.choice(len(AGGRESSIVE), size=2 if quick else 4, replace=False)
    for i in picks:
        name, ov = AGGRESSIVE[i]
        yield Case("distorted:engine-aggressive", f"{src.name} | engine {name}", src,
                   _try(lambda ov=ov: engine(src, ov + mains)))
    # Direct distortions of a faithful cleaning (first channel only on multichannel records).
    chans = [0]
    f = float(rng.uniform(0.7, 0.85))
    yield Case("distorted:r-scaled", f"{src.name} | QRS scaled x{f:.2f}", src, scale_qrs(src, base, f, chans))
    sig = float(rng.uniform(4.0, 10.0))
    yield Case(
        "distorted:qrs-widened", f"{src.name} | QRS gaussian sigma {sig:.1f} ms", src, widen_qrs(src, base, sig, chans)
    )
    st = float(rng.uniform(0.12, 0.3)) if ecg else float(rng.uniform(0.10, 0.20))
    st *= rng.choice([-1.0, 1.0])
    yield Case(
        "distorted:st-shift",
        f"{src.name} | ST shift {st:+.3f} {'mV' if ecg else 'of R'}",
        src,
        shift_st(src, base, st, chans),
    )
    wave = "t" if rng.random() < 0.6 or src.anat[0]["p"] is None else "p"
    yield Case(f"distorted:{wave}-attenuated", f"{src.name} | {wave.upper()} wave kept 40 %", src,
               attenuate_wave(src, base, wave, 0.4, chans))
    fc = float(rng.uniform(20.0, 40.0))
    order = int(rng.integers(2, 5))
    yield Case("distorted:causal-lowpass", f"{src.name} | sosfilt low-pass {fc:.0f} Hz order {order}", src,
               causal_filter(base, src.fs, "low", min(fc, 0.45 * src.fs), order))
    fc = float(rng.uniform(0.5, 1.0))
    order = int(rng.integers(1, 3))
    yield Case("distorted:causal-highpass", f"{src.name} | sosfilt high-pass {fc:.2f} Hz order {order}", src,
               causal_filter(base, src.fs, "high", fc, order))
    ms = float(rng.uniform(5.0, 20.0))
    k = max(1, int(round(ms * src.fs / 1000.0))) * int(rng.choice([-1, 1]))
    yield Case("distorted:time-shift", f"{src.name} | shift {1000 * k / src.fs:+.1f} ms", src, time_shift(base, k))
    freq, amp, tau = float(rng.uniform(20, 40)), float(rng.uniform(0.06, 0.15)), float(rng.uniform(0.03, 0.06))
    yield Case(
        "distorted:ringing",
        f"{src.name} | ringing {freq:.0f} Hz amp {amp:.2f}{' mV' if ecg else ' of R'} tau {1000 * tau:.0f} ms",
        src,
        add_ringing(src, base, min(freq, 0.4 * src.fs), amp, tau, chans),
    )
    if not quick or rng.random() < 0.5:
        yield Case(
            "distorted:clipped", f"{src.name} | clipped at 80 % of the typical R", src, clip_top(src, base, 0.8, chans)
        )
        how = str(rng.choice(["step", "hold", "burst"]))
        yield Case(
            "distorted:edge-artefact",
            f"{src.name} | edges {how}",
            src,
            corrupt_edges(src, base, how, rng, chans),
            forced="distorted",
        )


def _try(fn):
    try:
        return fn()
    except SettingsError as exc:
        return exc


def sources(quick: bool):
    """Yield every original (built lazily)."""
    noise_kinds = ["white", "muscle@30", "muscle@20", "muscle@15", "muscle@10", "wander", "mains50", "mains60",
                   "motion", "mix", "mix60"]
    rates = (125.0, 250.0, 360.0, 500.0, 1000.0, 2000.0)
    hrs = (45.0, 58.0, 72.0, 88.0, 105.0, 125.0, 150.0)
    units_cycle = ("mV", "mV", "uV", None)
    seed = 9001
    for i, fs in enumerate(rates):
        kinds = noise_kinds if not quick else noise_kinds[i % 3 :: 4]
        for k, kind in enumerate(kinds):
            seed += 17
            hr = hrs[(i * 3 + k) % len(hrs)]
            ect = (None, 5, None, 8)[(i + k) % 4]
            dur = (10.0, 20.0, 30.0, 45.0, 60.0)[(i + 2 * k) % 5]
            if fs >= 1000 and dur > 30:
                dur = 30.0
            units = units_cycle[(i + k) % len(units_cycle)]
            yield synthetic_ecg_source(fs, kind, seed, units, dur, hr, ect)
    mcg = [(250.0, "pT", 0.5, None, 60.0), (500.0, "fT", 1.5, "50", 75.0), (1000.0, "pT", 1.0, None, 95.0),
           (2000.0, "fT", 0.8, "60", 50.0), (360.0, "pT", 3.0, None, 120.0), (1000.0, "fT", 2.0, "50", 140.0)]
    for j, (fs, units, noise_pt, mains, hr) in enumerate(mcg if not quick else mcg[:2]):
        yield synthetic_mcg_source(fs, 5100 + j, units, (20.0, 30.0, 15.0)[j % 3], hr, noise_pt, mains,
                                   ectopic=7 if j == 4 else None)
    yield synthetic_ecg_source(500.0, "muscle@20", 7301, "mV", 30.0, 70.0, None, leads=3)
    if not quick:
        yield synthetic_ecg_source(1000.0, "mains50", 7302, "uV", 20.0, 95.0, 6, leads=3)
        yield synthetic_mcg_source(1000.0, 7303, "fT", 20.0, 65.0, 1.0, "50", sensors=2)
    windows = [(0.0, 30.0), (40.0, 45.0), (95.0, 20.0), (130.0, 60.0), (200.0, 40.0), (250.0, 50.0)]
    for start, dur in (windows if not quick else windows[:2]):
        yield real_source(start, dur)
    for start, dur, fs in (
        [(40.0, 45.0, 250.0), (130.0, 60.0, 500.0), (200.0, 40.0, 1000.0)] if not quick else [(40.0, 45.0, 500.0)]
    ):
        yield real_source(start, dur, fs)


# --------------------------------------------------------------------------- running


KEY_METRICS = ("heart_rate_bpm", "qrs_width_ms", "r_amplitude_ratio", "st_change", "qrs_width_change_ms",
               "r_timing_shift_ms", "p_amplitude_ratio",
               "t_amplitude_ratio", "ringing_rms", "removed_beat_fraction", "beat_shape_change_percent",
               "edge_deviation", "clipped_runs", "template_noise", "r_amplitude", "beat_count", "dominant_beat_count")


def _fmt_num(v) -> str:
    if v is None:
        return "None"
    if isinstance(v, float):
        return f"{v:.4g}"
    return str(v)


def run_case(case: Case) -> dict:
    row = {"category": case.category, "name": case.name, "group": case.src.group}
    if isinstance(case.cleaned, SettingsError):
        row.update(status="skipped", why=str(case.cleaned))
        return row
    measures = true_distortion(case.src, case.cleaned)
    label, reasons = label_of(case.src, measures, case.forced)
    row.update(label=label, reasons=reasons, measures=measures)
    try:
        result = assess(case.src.recording(case.src.original), case.src.recording(case.cleaned))
    except Exception as exc:  # every exception is a crash
        tb = traceback.extract_tb(exc.__traceback__)[-1]
        row.update(status="crash", why=f"{type(exc).__name__}: {exc} at {Path(tb.filename).name}:{tb.lineno}")
        return row
    flags = [(f.id, f.severity, f.value, f.limit, f.channel) for f in result.flags]
    row.update(status="ok", flags=flags, flagged=bool(flags), failed=any(f[1] == "fail" for f in flags),
               metrics={k: v for k, v in result.metrics.items() if k.split("@")[0] in KEY_METRICS})
    return row


def describe_failure(row: dict) -> str:
    lines = [f"  [{row['category']}] {row['name']}  (label {row['label']}: {', '.join(row['reasons']) or '-'})"]
    truth = "; ".join(
        f"ch{c + 1} " + " ".join(f"{k}={_fmt_num(v)}" for k, v in m.items() if k != "se")
        + " (s.e. " + " ".join(f"{k}={_fmt_num(v)}" for k, v in m["se"].items()) + ")"
        for c, m in enumerate(row["measures"]))
    lines.append(f"      truth: {truth}")
    if row["flags"]:
        lines.append("      flags: " + ", ".join(
            f"{i}/{s} {_fmt_num(v)} vs {_fmt_num(lim)} ({c})" for i, s, v, lim, c in row["flags"]))
    else:
        lines.append("      flags: none")
    lines.append("      metrics: " + " ".join(f"{k}={_fmt_num(v)}" for k, v in row["metrics"].items()))
    return "\n".join(lines)


def cli_contract(quick: bool) -> list[str]:
    """Run ``tracevet assess --json`` on a few pairs; return problems found."""
    problems = []
    env = dict(os.environ, PYTHONPATH=str(ROOT / "src"))
    src = synthetic_ecg_source(360.0, "muscle@20", 4401, "mV", 20.0, 70.0, None)
    mcg = synthetic_mcg_source(1000.0, 4402, "fT", 15.0, 80.0, 1.0, None)
    pairs = [
        ("ecg faithful", src, engine(src, [])),
        ("ecg R scaled 0.7", src, scale_qrs(src, oracle(src, 0.05), 0.7)),
        ("ecg shifted 12 ms", src, time_shift(oracle(src, 0.05), int(0.012 * src.fs))),
        ("mcg faithful", mcg, oracle(mcg, 0.05)),
    ]
    with tempfile.TemporaryDirectory() as tmp:
        for label, s, cleaned in pairs:
            a, b = Path(tmp) / "orig.npz", Path(tmp) / "clean.npz"
            write_recording(s.recording(s.original, str(a)), a)
            write_recording(s.recording(cleaned, str(b)), b)
            proc = subprocess.run([sys.executable, "-m", "tracevet", "assess", str(a), str(b), "--json"],
                                  capture_output=True, text=True, env=env, cwd=tmp, timeout=120)
            try:
                doc = json.loads(proc.stdout)
            except json.JSONDecodeError:
                problems.append(
                    f"{label}: stdout is not exactly one JSON object (exit {proc.returncode}): {proc.stdout[:200]!r}"
                )
                continue
            if not isinstance(doc, dict) or set(doc) != {"metrics", "flags"}:
                problems.append(f"{label}: keys {sorted(doc) if isinstance(doc, dict) else type(doc)}")
                continue
            flag_keys = {"id", "severity", "message", "value", "limit", "source", "where", "where_more",
                         "beats_affected", "beats_measured"}
            bad_flag = [f for f in doc["flags"] if set(f) != flag_keys or f["severity"] not in ("warn", "fail")]
            if bad_flag:
                problems.append(f"{label}: malformed flag {bad_flag[0]}")
            want = 1 if any(f["severity"] == "fail" for f in doc["flags"]) else 0
            if proc.returncode != want:
                problems.append(f"{label}: exit {proc.returncode}, expected {want} from the flags")
            print(
                f"  CLI {label}: exit {proc.returncode}, flags {[f['id'] + '/' + f['severity'] for f in doc['flags']]}"
            )
        # Bad input: different lengths -> exit 2, one line on stderr, nothing on stdout.
        a, b = Path(tmp) / "orig.npz", Path(tmp) / "short.npz"
        write_recording(src.recording(src.original, str(a)), a)
        write_recording(src.recording(src.original[:-100], str(b)), b)
        proc = subprocess.run([sys.executable, "-m", "tracevet", "assess", str(a), str(b), "--json"],
                              capture_output=True, text=True, env=env, cwd=tmp, timeout=120)
        print(f"  CLI length mismatch: exit {proc.returncode}, stderr {proc.stderr.strip()[:120]!r}")
        if proc.returncode != 2 or len(proc.stderr.strip().splitlines()) != 1 or "Traceback" in proc.stderr:
            problems.append(f"length mismatch: exit {proc.returncode}, stderr {proc.stderr[:200]!r}")
    return problems


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="a smaller set (about a quarter)")
    parser.add_argument("--verbose", action="store_true", help="print every case")
    parser.add_argument("--no-cli", action="store_true", help="skip the CLI contract check")
    parser.add_argument("--json-out", help="write every row (labels, truth, flags, metrics) to this JSON file")
    args = parser.parse_args()
    started = time.perf_counter()
    rows = []
    for s_index, src in enumerate(sources(args.quick)):
        rng = np.random.default_rng(31337 + s_index)
        for case in cases_for(src, rng, args.quick):
            row = run_case(case)
            rows.append(row)
            if args.verbose:
                print(f"{row.get('status')} {row.get('label', '-')} flagged={row.get('flagged')} {row['name']}")
    elapsed = time.perf_counter() - started

    def table(key: str, title: str):
        stats = defaultdict(lambda: defaultdict(int))
        for row in rows:
            st = stats[row[key]]
            st["n"] += 1
            if row["status"] == "skipped":
                st["skipped"] += 1
                continue
            if row["status"] == "crash":
                st["crash"] += 1
                continue
            st[row["label"]] += 1
            if row["label"] == "distorted":
                st["det"] += row["flagged"]
                st["det_fail"] += row["failed"]
            elif row["label"] == "faithful":
                st["ff"] += row["flagged"]
                st["ff_fail"] += row["failed"]
            else:
                st["amb_flagged"] += row["flagged"]
        print(f"\n{title}")
        print(f"{'':38s} {'pairs':>5s} {'dist':>5s} {'detected':>9s} {'(fail)':>7s} {'faith':>5s} {'false-flag':>10s} "
              f"{'(fail)':>7s} {'ambig':>5s} {'(flagged)':>9s} {'crash':>5s} {'skip':>4s}")

        def pct(a, b):
            return f"{100.0 * a / b:6.1f}%" if b else "     - "

        for name in sorted(stats):
            st = stats[name]
            print(f"{name:38s} {st['n']:5d} {st['distorted']:5d} {pct(st['det'], st['distorted']):>9s} "
                  f"{pct(st['det_fail'], st['distorted']):>7s} {st['faithful']:5d} "
                  f"{pct(st['ff'], st['faithful']):>10s} "
                  f"{pct(st['ff_fail'], st['faithful']):>7s} {st['ambiguous']:5d} {st['amb_flagged']:9d} "
                  f"{st['crash']:5d} {st['skipped']:4d}")
        return stats

    print(f"held-out fidelity evaluation: {len(rows)} pairs in {elapsed:.1f} s{' (quick)' if args.quick else ''}")
    table("category", "by case category (label measured on the truth; rates over labelled pairs; flagged = any flag)")
    table("group", "by kind of original")
    ok = [r for r in rows if r["status"] == "ok"]
    dist = [r for r in ok if r["label"] == "distorted"]
    faith = [r for r in ok if r["label"] == "faithful"]
    amb = [r for r in ok if r["label"] == "ambiguous"]
    crashes = [r for r in rows if r["status"] == "crash"]
    det = sum(r["flagged"] for r in dist)
    ff = sum(r["flagged"] for r in faith)
    print(f"\nOVERALL distorted flagged: {det}/{len(dist)} = {100.0 * det / max(1, len(dist)):.1f} % (target >= 97 %)")
    print(f"OVERALL faithful flagged:  {ff}/{len(faith)} = {100.0 * ff / max(1, len(faith)):.1f} % (target <= 5 %)")
    print(f"ambiguous (not in rates):  {len(amb)}, of which flagged {sum(r['flagged'] for r in amb)}")
    print(
        f"crashes: {len(crashes)}; skipped (settings refused by the engine): "
        f"{sum(r['status'] == 'skipped' for r in rows)}"
    )
    for row in crashes:
        print(f"  CRASH {row['name']}: {row['why']}")
    counts = defaultdict(int)
    for r in faith:
        for f in r["flags"]:
            counts[f[0]] += 1
    if counts:
        print(
            "flag ids raised on faithful pairs: "
            + ", ".join(f"{k} x{v}" for k, v in sorted(counts.items(), key=lambda kv: -kv[1]))
        )
    print("\nMISSED distorted pairs:")
    for row in dist:
        if not row["flagged"]:
            print(describe_failure(row))
    print("\nFALSE FLAGS on faithful pairs:")
    for row in faith:
        if row["flagged"]:
            print(describe_failure(row))
    if args.verbose:
        print("\nAMBIGUOUS pairs:")
        for row in amb:
            print(describe_failure(row))
    if args.json_out:
        Path(args.json_out).write_text(
            json.dumps(rows, default=lambda o: o.tolist() if hasattr(o, "tolist") else str(o), indent=1)
        )
    if not args.no_cli:
        print("\nCLI contract (tracevet assess --json in a subprocess):")
        problems = cli_contract(args.quick)
        print("  CLI contract: " + ("all pairs as specified" if not problems else f"{len(problems)} problem(s)"))
        for p in problems:
            print("  PROBLEM " + p)
    return 0


if __name__ == "__main__":
    sys.exit(main())
