"""QRS detector: detection figures on a labelled synthetic set, and timing at 360 Hz.

Run: PYTHONPATH=src python benchmarks/bench_qrs.py [--quick]

1. Labelled set: McSharry-model records (tracevet.synthetic) with known beats,
   ventricular-like ectopics every 7th beat, heart rates 50-110 bpm, at six
   sampling rates and seven noise conditions; Se and +P by ANSI/AAMI EC57
   matching (150 ms window).
2. Harder conditions at 125 and 360 Hz (EMG at 0 and -6 dB, white noise at
   6 and 0 dB, electrode motion of 0.5 mV 6/min and 1.5 mV 20/min, bigeminy,
   inverted lead, 150 and 40 bpm), to show where detection degrades.
3. Timing: detect_qrs on 1 h and 24 h at 360 Hz, next to a bare SciPy 5-15 Hz
   sosfiltfilt of the same record for scale.
"""

from __future__ import annotations

import sys
import time

import numpy as np
from scipy import signal as sps

from tracevet.assessment.qrs import detect_qrs, match_beats
from tracevet.synthetic import (
    add_noise_at_snr,
    baseline_wander,
    mains_hum,
    muscle_noise,
    synthetic_ecg,
)

RATES = (125.0, 250.0, 360.0, 500.0, 1000.0, 2000.0)
NOISES = ("clean", "wander 0.5 mV", "EMG 12 dB", "EMG 6 dB", "mains 50 Hz", "mains 60 Hz", "all")


def _noisy(x, fs, kind, seed):
    n = x.size
    if kind == "clean":
        return x
    if kind == "wander 0.5 mV":
        return x + baseline_wander(n, fs, 0.5, seed=seed)
    if kind.startswith("EMG"):
        snr = float(kind.split()[1])
        return add_noise_at_snr(x, muscle_noise(n, fs, 1.0, seed=seed, bursty=True), snr)
    if kind.startswith("mains"):
        return x + mains_hum(n, fs, float(kind.split()[1]), 0.2)
    return (
        x + baseline_wander(n, fs, 0.3, seed=seed) + mains_hum(n, fs, 60.0, 0.1) + muscle_noise(n, fs, 0.05, seed=seed)
    )


def labelled_set(duration_s: float, seeds: int) -> None:
    """Print Se/+P per sampling rate and noise condition, and the totals."""
    print(f"labelled synthetic set: {seeds} records x {duration_s:.0f} s per cell, ectopic every 7th beat")
    print(f"{'fs (Hz)':>8} " + " ".join(f"{k:>15}" for k in NOISES))
    grand = np.zeros(3, dtype=int)
    for fs in RATES:
        cells = []
        for kind in NOISES:
            tot = np.zeros(3, dtype=int)
            for seed in range(seeds):
                hr = 50.0 + (seed * 23 + int(fs)) % 60
                rec = synthetic_ecg(duration_s, fs, heart_rate_bpm=hr, hrv_std_bpm=2.0, ectopic_every=7, seed=seed)
                found = detect_qrs(_noisy(rec.signal, fs, kind, seed), fs)
                # R peaks within 50 ms of the record ends (cut QRS) are not scored.
                m = match_beats(rec.r_peaks, found, fs, start_s=0.05, end_s=duration_s - 0.05)
                tot += (m.tp, m.fn, m.fp)
            grand += tot
            se = tot[0] / (tot[0] + tot[1])
            pp = tot[0] / (tot[0] + tot[2])
            cells.append(f"{100 * se:6.2f}/{100 * pp:6.2f}")
        print(f"{fs:8.0f} " + " ".join(f"{c:>15}" for c in cells))
    tp, fn, fp = grand
    print(f"total: {tp + fn} beats, TP {tp}, FN {fn}, FP {fp}: Se {100 * tp / (tp + fn):.3f} %, "
          f"+P {100 * tp / (tp + fp):.3f} %   (cells: Se/+P in %)")


HARD = ("EMG 0 dB", "EMG -6 dB", "white 6 dB", "white 0 dB", "electrode motion", "heavy motion",
        "bigeminy", "inverted lead", "150 bpm", "40 bpm")


def harder_conditions(duration_s: float, seeds: int) -> None:
    """Print Se/+P under harder conditions at 125 and 360 Hz."""
    from tracevet.synthetic import electrode_motion, white_noise

    print(f"harder conditions: {seeds} records x {duration_s:.0f} s per cell")
    print(f"{'fs (Hz)':>8} " + " ".join(f"{k:>15}" for k in HARD))
    for fs in (125.0, 360.0):
        cells = []
        for kind in HARD:
            tot = np.zeros(3, dtype=int)
            for seed in range(seeds):
                hr = {"150 bpm": 150.0, "40 bpm": 40.0}.get(kind, 60.0 + 11 * seed)
                every = 2 if kind == "bigeminy" else 7
                rec = synthetic_ecg(duration_s, fs, heart_rate_bpm=hr, hrv_std_bpm=2.0, ectopic_every=every, seed=seed)
                x, n = rec.signal, rec.signal.size
                if kind.startswith("EMG"):
                    x = add_noise_at_snr(x, muscle_noise(n, fs, 1.0, seed=seed, bursty=True), float(kind.split()[1]))
                elif kind.startswith("white"):
                    x = add_noise_at_snr(x, white_noise(n, 1.0, seed=seed), float(kind.split()[1]))
                elif kind == "electrode motion":
                    x = x + electrode_motion(n, fs, 0.5, events_per_min=6.0, seed=seed)
                elif kind == "heavy motion":
                    x = x + electrode_motion(n, fs, 1.5, events_per_min=20.0, seed=seed)
                elif kind == "inverted lead":
                    x = -x
                m = match_beats(rec.r_peaks, detect_qrs(x, fs), fs, start_s=0.05, end_s=duration_s - 0.05)
                tot += (m.tp, m.fn, m.fp)
            cells.append(f"{100 * tot[0] / (tot[0] + tot[1]):6.2f}/{100 * tot[0] / (tot[0] + tot[2]):6.2f}")
        print(f"{fs:8.0f} " + " ".join(f"{c:>15}" for c in cells))


def timing() -> None:
    """Print detection times for 1 h and 24 h at 360 Hz."""
    fs = 360.0
    for hours in (1, 24):
        rec = synthetic_ecg(hours * 3600.0, fs, heart_rate_bpm=70.0, hrv_std_bpm=3.0, ectopic_every=20, seed=1)
        n = rec.signal.size
        x = rec.signal + baseline_wander(n, fs, 0.2, seed=2)
        x = add_noise_at_snr(x, muscle_noise(n, fs, 1.0, seed=3), 18.0)
        t0 = time.perf_counter()
        peaks = detect_qrs(x, fs)
        dt = time.perf_counter() - t0
        t0 = time.perf_counter()
        sps.sosfiltfilt(sps.butter(2, [5, 15], btype="bandpass", fs=fs, output="sos"), x)
        dt_bp = time.perf_counter() - t0
        m = match_beats(rec.r_peaks, peaks, fs)
        print(f"{hours:2d} h at {fs:.0f} Hz ({n} samples, {rec.r_peaks.size} beats): detect_qrs {dt:6.2f} s "
              f"(bare SciPy 5-15 Hz sosfiltfilt {dt_bp:5.2f} s, ratio {dt / dt_bp:4.1f}); "
              f"Se {m.sensitivity:.4f}, +P {m.positive_predictivity:.4f}")


if __name__ == "__main__":
    quick = "--quick" in sys.argv
    labelled_set(60.0 if quick else 300.0, 2 if quick else 3)
    harder_conditions(60.0 if quick else 300.0, 2 if quick else 3)
    timing()
