"""Time the synthetic ECG generator (McSharry et al. 2003 model) and the noise generators.

Run: PYTHONPATH=src python benchmarks/bench_synthetic.py
"""

from __future__ import annotations

import time

import numpy as np

from tracevet.synthetic import baseline_wander, mains_hum, muscle_noise, synthetic_ecg


def _timed(fn, *args, **kwargs):
    t0 = time.perf_counter()
    out = fn(*args, **kwargs)
    return out, time.perf_counter() - t0


def main() -> None:
    """Print generation times for 1 h and 24 h records at 250 and 500 Hz."""
    print("synthetic ECG generation (single channel)")
    for hours, fs in ((1, 250.0), (1, 500.0), (24, 250.0), (24, 500.0)):
        rec, dt = _timed(synthetic_ecg, hours * 3600.0, fs, heart_rate_bpm=70.0, ectopic_every=50, seed=1)
        n = rec.signal.size
        print(f"  {hours:2d} h at {fs:5.0f} Hz: {n:>10d} samples, {rec.r_peaks.size:>6d} beats, "
              f"{dt:6.2f} s ({n / dt / 1e6:5.1f} M samples/s)")
    n = int(3600 * 250)
    for name, fn in (
        ("baseline_wander", lambda: baseline_wander(n, 250.0, seed=1)),
        ("muscle_noise", lambda: muscle_noise(n, 250.0, 0.05, seed=1, bursty=True)),
        ("mains_hum", lambda: mains_hum(n, 250.0, 50.0, 0.05)),
        ("numpy standard_normal (bare)", lambda: np.random.default_rng(1).standard_normal(n)),
    ):
        _, dt = _timed(fn)
        print(f"  {name:30s} 1 h at 250 Hz: {dt:6.3f} s")


if __name__ == "__main__":
    main()
