"""Fidelity assessment time for 1 hour and 24 hours of one channel at 360 Hz, next to the cleaning time.

The record is the MIT-BIH 208 excerpt (tests/data, mV) repeated, plus white
noise, float32; it is cleaned once with the default settings and the
assessment of (original, cleaned) is timed, split into QRS detection and the
rest (templates, measures, whole-trace checks), with peak memory
(tracemalloc) as a multiple of the record's float32 size.

Targets: 1 hour well under 2 s; 24 hours under 30 s.

Run: ``PYTHONPATH=src python benchmarks/bench_assess.py [--quick]`` (--quick: 1 hour only).
"""

from __future__ import annotations

import argparse
import gc
import time
import tracemalloc
from pathlib import Path

import numpy as np

from tracevet.assessment import assess
from tracevet.assessment.qrs import detect_qrs
from tracevet.cleaning import DEFAULT_SETTINGS, clean
from tracevet.recording import Recording

FS = 360.0
DATA = Path(__file__).resolve().parents[1] / "tests" / "data" / "mitdb-208-excerpt.npz"


def make_record(seconds: float) -> np.ndarray:
    """Real ECG (MIT-BIH 208 excerpt, mV) repeated to ``seconds``, plus white noise, float32."""
    with np.load(DATA) as data:
        mv = ((data["ecg"].astype(np.float32) - 1024) / 200).astype(np.float32)
    n = int(seconds * FS)
    x = np.resize(mv, n)
    x += np.random.default_rng(0).normal(scale=0.05, size=n).astype(np.float32)
    return x


def run(label: str, seconds: float) -> None:
    x = make_record(seconds)
    original = Recording(x, FS, ("MLII",), units="mV", kind="ecg")
    t0 = time.perf_counter()
    cleaned = clean(original, DEFAULT_SETTINGS)
    t_clean = time.perf_counter() - t0
    t0 = time.perf_counter()
    peaks = detect_qrs(x, FS)
    t_detect = time.perf_counter() - t0
    t0 = time.perf_counter()
    result = assess(original, cleaned, detector=lambda s, f: peaks)
    t_measure = time.perf_counter() - t0
    gc.collect()
    tracemalloc.start()
    t0 = time.perf_counter()
    assess(original, cleaned)
    t_total_traced = time.perf_counter() - t0
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    t_total = t_detect + t_measure
    print(
        f"{label:>5s}: {x.size:>10,d} samples, {peaks.size:>6,d} beats | cleaning {t_clean:7.2f} s | "
        f"assessment {t_total:6.2f} s (QRS detection {t_detect:6.2f} s + measures {t_measure:6.2f} s) | "
        f"assessment / cleaning {t_total / t_clean:5.2f} | peak memory {peak / (4 * x.size):4.1f}x float32 record "
        f"(traced run {t_total_traced:.2f} s) | flags: {', '.join(f.id for f in result.flags) or 'none'}"
    )


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__)
    parser.add_argument("--quick", action="store_true", help="1 hour only")
    args = parser.parse_args()
    run("1 h", 3600.0)
    if not args.quick:
        run("24 h", 86400.0)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
