"""Review app: time from a key press to the redrawn plots, headless (Textual ``run_test``).

Builds a queue with one record (McSharry-model ECG from ``tracevet.synthetic``,
one channel at 250 Hz, ``--minutes`` long, cleaned with the default settings),
opens it in the real app at ``--size`` (default 120x36, the size the README
used), then runs the actions of the pan, zoom and jump keys and times each one
from the action until the record screen holds new plots *and* the screen update that
carries them has been composed and handed to the display (headless: the
terminal encoding itself is not timed). It also times the plot build
alone (``render_trace_plots``) for the same window and size, so the share of
the drawing and of the rest (layout, paint) can be told apart.

Run: ``PYTHONPATH=src python benchmarks/bench_redraw.py [--minutes 60] [--size 120x36]``
"""

from __future__ import annotations

import argparse
import asyncio
import statistics
import tempfile
import time
from pathlib import Path

# The record screen's bindings of these keys (right, left, -, +, end, home).
ACTIONS = {"right": "pan(0.5)", "left": "pan(-0.5)", "minus": "zoom(2)", "plus": "zoom(0.5)",
           "end": "jump_end", "home": "jump_start"}
KEYS = ("right", "right", "left", "minus", "minus", "plus", "plus", "end", "home", "right", "minus", "plus") * 3


def build_queue(folder: Path, minutes: float):
    """A queue holding one cleaned record of ``minutes`` of synthetic ECG."""
    import numpy as np

    from tracevet.cleaning import DEFAULT_SETTINGS
    from tracevet.recording import Recording, write_recording
    from tracevet.synthetic import synthetic_ecg
    from tracevet.workqueue import Queue

    fs = 250.0
    signal = np.asarray(synthetic_ecg(minutes * 60.0, fs, heart_rate_bpm=70.0, seed=3).signal, dtype=np.float32)
    rng = np.random.default_rng(0)
    noisy = signal + 0.03 * rng.standard_normal(signal.size).astype(np.float32)
    path = folder / "long.npz"
    write_recording(Recording(noisy[:, None], fs, ("II",), "mV", "ecg"), path)
    queue = Queue.init(folder / "queue")
    record_id = queue.add_files([path], added_by="bench")[0]
    queue.add_run(record_id, DEFAULT_SETTINGS)
    return queue, record_id


async def measure(queue, record_id: str, size: tuple[int, int]) -> dict:
    """Press the keys in the real app and time each redraw."""
    from tracevet.app.app import ReviewApp
    from tracevet.app.plots import render_trace_plots
    from tracevet.app.record_screen import RecordScreen
    from tracevet.app.worklist_screen import WorklistScreen

    app = ReviewApp(queue, "bench", colour=True)
    per_key: list[float] = []
    builds: list[float] = []
    async with app.run_test(size=size) as pilot:
        while not isinstance(app.screen, WorklistScreen):
            await pilot.pause(0.01)
        app.screen.open_record(record_id)
        while not (isinstance(app.screen, RecordScreen) and app.screen.last_plots is not None):
            await pilot.pause(0.01)
        await pilot.pause(0.2)
        screen = app.screen
        painted = [0.0]
        display = app._display

        def timed_display(shown, renderable) -> None:  # every screen update is handed over here
            if renderable is not None:
                painted[0] = time.perf_counter()
            display(shown, renderable)

        app._display = timed_display  # type: ignore[method-assign]
        for key in KEYS:
            before = screen.last_plots
            await pilot.pause(0.05)  # let the app settle: no pending refresh from the key before
            start = time.perf_counter()
            await screen.run_action(ACTIONS[key])
            while screen.last_plots is before and time.perf_counter() - start < 5.0:
                await asyncio.sleep(0.0005)
            drawn = time.perf_counter()
            while painted[0] < drawn and time.perf_counter() - start < 5.0:
                await asyncio.sleep(0.0005)
            per_key.append(painted[0] - start)
            run = screen.shown_run
            traces = run.pyramids[screen.channel]
            width, rows = screen.plot_geometry()
            each = max(rows // 3, 2)
            heights = (each, each, rows - 2 * each)
            t0 = time.perf_counter()
            render_trace_plots(traces, screen.start_s, screen.span_s, width, heights, True)
            builds.append(time.perf_counter() - t0)
    return {"keys": per_key, "builds": builds}


def main() -> None:
    """Build the queue, run the app, print the medians and maxima."""
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--minutes", type=float, default=60.0)
    parser.add_argument("--size", default="120x36")
    args = parser.parse_args()
    size = tuple(int(v) for v in args.size.lower().split("x"))
    with tempfile.TemporaryDirectory() as tmp:
        t0 = time.perf_counter()
        queue, record_id = build_queue(Path(tmp), args.minutes)
        print(f"queue with one {args.minutes:g}-minute 250 Hz record built in {time.perf_counter() - t0:.1f} s")
        result = asyncio.run(measure(queue, record_id, size))  # type: ignore[arg-type]
    keys, builds = result["keys"], result["builds"]
    print(f"app at {size[0]}x{size[1]}, {len(keys)} keys (pan, zoom, end, home)")
    print(f"key -> redrawn and painted: median {statistics.median(keys) * 1e3:.1f} ms, max {max(keys) * 1e3:.1f} ms")
    print(f"plot build alone (3 plots): median {statistics.median(builds) * 1e3:.1f} ms, "
          f"max {max(builds) * 1e3:.1f} ms")


if __name__ == "__main__":
    main()
