"""Plot-build time of the review app for windows of a 24-hour record at 250 Hz.

Prints, for 10 s, 10 min, 1 h and 24 h windows, the time to build the three
stacked plots (original, cleaned, removed) through the min/max pyramid, and
the time of a naive plotext call that draws every sample of the same window
(one plot). The naive call is timed for real up to ``--naive-cap`` samples;
above that it is timed on the first ``--naive-cap`` samples and scaled
linearly (plotext's cost grows linearly with the number of points), and the
line says so. Use ``--naive-cap 0`` to time every naive call in full
(the 24 h one takes minutes).

Run: ``PYTHONPATH=src python benchmarks/bench_plots.py``
"""

from __future__ import annotations

import argparse
import statistics
import time

import numpy as np
import plotext

from tracevet.app.plots import TracePyramids, render_trace_plots

FS = 250.0
WIDTH, HEIGHTS = 80, (4, 4, 5)
WINDOWS = (("10 s", 10.0), ("10 min", 600.0), ("1 h", 3600.0), ("24 h", 86400.0))


def make_record(hours: float, fs: float):
    """A 24-hour spiky trace plus hum and noise (float32), and its 'cleaned' version."""
    n = int(hours * 3600 * fs)
    rng = np.random.default_rng(0)
    cleaned = np.zeros(n, dtype=np.float32)
    beats = np.arange(int(0.3 * fs), n, int(0.85 * fs))
    cleaned[beats] = 1.2
    kernel = np.hanning(9).astype(np.float32)
    cleaned = np.convolve(cleaned, kernel, mode="same").astype(np.float32)
    t = np.arange(n, dtype=np.float32) / np.float32(fs)
    original = cleaned + 0.03 * np.sin(2 * np.pi * 50 * t) + 0.02 * rng.standard_normal(n).astype(np.float32)
    return original.astype(np.float32), cleaned


def naive_plot(x: np.ndarray, y: np.ndarray) -> float:
    """Time one plotext plot of every point given (braille, lines)."""
    fig = plotext.figure
    start = time.perf_counter()
    fig.clear()
    fig.plot_size(WIDTH, 5)
    signal = fig.signal(x, y, marker="braille")
    signal.lines()
    fig.draw(signal)
    fig.build().string()
    return time.perf_counter() - start


def main() -> None:
    """Run the benchmark and print one line per window."""
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--hours", type=float, default=24.0)
    parser.add_argument("--naive-cap", type=int, default=1_000_000, help="samples; 0 = no cap")
    parser.add_argument("--repeat", type=int, default=7)
    args = parser.parse_args()

    t0 = time.perf_counter()
    original, cleaned = make_record(args.hours, FS)
    t1 = time.perf_counter()
    traces = TracePyramids.from_arrays(original, cleaned, FS)
    t2 = time.perf_counter()
    print(f"record: {args.hours:g} h at {FS:g} Hz = {original.size:,} samples (made in {t1 - t0:.2f} s)")
    print(f"pyramids for original, cleaned, removed: {t2 - t1:.2f} s (once per record and channel, in a worker)")
    print(f"plot: {WIDTH} columns, heights {HEIGHTS}, three plots per window\n")
    print(f"{'window':>8} {'samples':>12} {'reduced (3 plots)':>18} {'naive plotext (1 plot)':>24} {'ratio':>9}")
    render_trace_plots(traces, 0, 10, WIDTH, HEIGHTS)  # warm-up
    for label, span in WINDOWS:
        span = min(span, original.size / FS)
        start = max(0.0, (original.size / FS - span) / 2)
        times = []
        for i in range(args.repeat):
            a = time.perf_counter()
            render_trace_plots(traces, start + i, span, WIDTH, HEIGHTS)
            times.append(time.perf_counter() - a)
        reduced = statistics.median(times)
        a, n = int(start * FS), int(span * FS)
        cap = n if args.naive_cap <= 0 else min(n, args.naive_cap)
        x = np.arange(a, a + cap) / FS
        naive = naive_plot(x, original[a : a + cap])
        note = ""
        if cap < n:
            naive *= n / cap
            note = f" (scaled from {cap:,})"
        print(f"{label:>8} {n:>12,} {reduced * 1000:>15.1f} ms {naive * 1000:>21.0f} ms {naive / reduced:>8.0f}x{note}")


if __name__ == "__main__":
    main()
