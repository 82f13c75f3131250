"""A whole day of recording through the whole path: denoise, assess, queue, review app, export.

Builds two long synthetic recordings (McSharry model, ``tracevet.synthetic``,
plus muscle noise and baseline wander; float32 ``.npz`` with the rate):

- ``day-1ch``: 24 hours, one channel, 250 Hz (21.6 million samples);
- ``half-2ch``: 12 hours, two channels, 500 Hz (2 x 21.6 million samples).

Then, for each, every step runs in its own child process, so that its wall
time and its own peak resident memory (``os.wait4`` rusage of that child,
which covers the worker processes it waited for) are measured apart:

1. ``tracevet denoise IN OUT``;
2. ``tracevet assess IN OUT`` (original against the cleaned file);
3. ``tracevet init`` + ``tracevet add`` into a fresh queue, ``tracevet clean``;
4. ``tracevet status``;
5. the review app, headless (Textual ``run_test``): from ``enter`` on the
   worklist until the record screen shows its plots, then pan, zoom out,
   zoom in and next-flag presses (time per redraw, and the longest the event
   loop went without running a 10 ms heartbeat timer, i.e. how long the UI
   was blocked), then ``a`` + ``enter`` to accept the run;
6. ``tracevet log --verify``;
7. ``tracevet export``.

Memory is shown as a multiple of the record's float32 size; the bare
interpreter with tracevet, numpy and scipy imported is printed for reference.
Targets: every step under 60 s, under ~4x the float32 size above that base,
no redraw blocking the UI more than ~0.5 s.

Run: ``PYTHONPATH=src python benchmarks/bench_day_long.py [--quick] [--dir PATH]``
(``--quick``: 2 hours and 1 hour instead of 24 and 12, to try the script).
"""

from __future__ import annotations

import argparse
import asyncio
import json
import os
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
PY = sys.executable
ENV = dict(os.environ, PYTHONPATH=str(ROOT / "src"), TRACEVET_REVIEWER="bench", NO_COLOR="1")


def make_recording(path: Path, hours: float, fs: float, channels: int) -> int:
    """Write a float32 ``.npz`` ECG of ``hours`` at ``fs`` with ``channels`` leads; return its float32 bytes."""
    from tracevet.recording import Recording, write_recording
    from tracevet.synthetic import baseline_wander, muscle_noise, synthetic_ecg

    seconds = hours * 3600.0
    leads = []
    for lead in range(channels):
        # the same seed gives the same beats on every lead; amplitude and noise differ per lead
        ecg = synthetic_ecg(seconds, fs, heart_rate_bpm=68.0, seed=7, amplitude_mv=1.0 - 0.35 * lead).signal
        n = ecg.shape[0]
        x = ecg.astype(np.float32)
        del ecg
        x += muscle_noise(n, fs, rms_mv=0.04, seed=11 + lead).astype(np.float32)
        x += baseline_wander(n, fs, amplitude_mv=0.2, seed=21 + lead).astype(np.float32)
        leads.append(x)
    samples = np.stack(leads, axis=1)
    del leads
    names = tuple(("II", "V5")[:channels])
    write_recording(Recording(samples, fs, names, units="mV", kind="ecg"), path)
    return samples.nbytes


def run_child(argv: list[str], timeout: float = 1800.0) -> dict:
    """Run ``argv`` as a child; wall time, exit code and its output."""
    t0 = time.perf_counter()
    proc = subprocess.Popen(argv, env=ENV, stdout=subprocess.PIPE, stderr=subprocess.PIPE, cwd=ROOT)
    out, err = b"", b""
    try:
        out, err = proc.communicate(timeout=timeout)
    except subprocess.TimeoutExpired:
        proc.kill()
        out, err = proc.communicate()
    # communicate() has reaped the child; RUSAGE_CHILDREN would mix all children,
    # so the peak comes from os.wait4 in a dedicated helper (see measured)
    return {"seconds": time.perf_counter() - t0, "rc": proc.returncode, "out": out.decode(errors="replace"),
            "err": err.decode(errors="replace")}


def measured(argv: list[str]) -> dict:
    """Run ``argv`` under a tiny parent that reports the child's own peak RSS (``os.wait4``)."""
    helper = (
        "import os,sys,json,time,subprocess\n"
        "t=time.perf_counter();p=subprocess.Popen(sys.argv[1:],stdout=subprocess.PIPE,stderr=subprocess.PIPE)\n"
        "import threading\n"
        "bufs={}\n"
        "def rd(n,s): bufs[n]=s.read()\n"
        "ts=[threading.Thread(target=rd,args=(n,s)) for n,s in (('o',p.stdout),('e',p.stderr))]\n"
        "[x.start() for x in ts]\n"
        "_,status,ru=os.wait4(p.pid,0);p.returncode=os.waitstatus_to_exitcode(status)\n"
        "[x.join() for x in ts]\n"
        "print(json.dumps({'wall':time.perf_counter()-t,'rc':p.returncode,'maxrss_mb':ru.ru_maxrss/1024,"
        "'out':bufs['o'].decode(errors='replace')[-4000:],'err':bufs['e'].decode(errors='replace')[-2000:]}))\n"
    )
    result = run_child([PY, "-c", helper, *argv])
    try:
        return json.loads(result["out"].strip().splitlines()[-1])
    except (ValueError, IndexError):
        return {
            "wall": result["seconds"],
            "rc": result["rc"],
            "maxrss_mb": float("nan"),
            "out": "",
            "err": result["err"],
        }


def cli(*args: str) -> list[str]:
    return [PY, "-m", "tracevet", *args]


# -- the review app, headless (runs in its own child: --app-child QUEUE) --------------------------
async def _drive_app(queue_path: str) -> dict:
    from tracevet.app.app import ReviewApp
    from tracevet.app.record_screen import RecordScreen
    from tracevet.app.worklist_screen import WorklistScreen
    from tracevet.workqueue import Queue

    queue = Queue.open(queue_path)
    app = ReviewApp(queue, "bench", colour=False)
    gaps = {"max": 0.0}
    state = {"last": None}
    draw_times: list[float] = []
    original_draw = RecordScreen.draw_traces

    def timed_draw(self, run):
        t = time.perf_counter()
        original_draw(self, run)
        draw_times.append(time.perf_counter() - t)

    RecordScreen.draw_traces = timed_draw

    def tick() -> None:
        now = time.perf_counter()
        if state["last"] is not None:
            gaps["max"] = max(gaps["max"], now - state["last"])
        state["last"] = now

    async def wait_for(pilot, condition, timeout: float = 600.0) -> None:
        t = time.perf_counter()
        while not condition():
            if time.perf_counter() - t > timeout:
                raise AssertionError("condition not reached in time")
            await pilot.pause(0.005)

    def ready() -> bool:
        s = app.screen
        return isinstance(s, RecordScreen) and s.shown_run is not None and s.last_plots is not None

    result: dict = {}
    async with app.run_test(size=(120, 36)) as pilot:
        await wait_for(pilot, lambda: isinstance(app.screen, WorklistScreen))
        app.set_interval(0.01, tick)
        await pilot.pause(0.1)
        gaps["max"] = 0.0
        t0 = time.perf_counter()
        await pilot.press("enter")
        await wait_for(pilot, ready)
        result["open_s"] = time.perf_counter() - t0
        result["open_max_block_s"] = gaps["max"]
        screen = app.screen
        per_key = []
        gaps["max"] = 0.0
        draw_times.clear()
        for key in ("right", "right", "minus", "minus", "minus", "minus", "minus", "minus", "minus", "minus",
                    "minus", "minus", "minus", "minus", "plus", "plus", "plus", "right", "right_square_bracket",
                    "right_square_bracket", "end", "home", "c"):
            before = screen.last_plots
            t = time.perf_counter()
            await pilot.press(key)
            try:
                await wait_for(
                    pilot, lambda: screen.last_plots is not before, timeout=5.0 if key.endswith("bracket") else 120.0
                )
            except AssertionError:
                continue  # no flagged region to jump to: nothing redrawn
            per_key.append((key, time.perf_counter() - t))
        result["keys"] = per_key
        result["draw_s"] = draw_times[:]
        result["keys_max_block_s"] = gaps["max"]
        result["window_line"] = str(screen.query_one("#window-line").render())[:100]
        decided_before = len([e for e in queue.log_entries() if e.event == "decision"])
        t = time.perf_counter()
        await pilot.press("a")
        await wait_for(pilot, lambda: type(app.screen).__name__ == "NoteScreen", timeout=30.0)
        for ch in "ok":
            await pilot.press(ch)
        await pilot.press("enter")
        await wait_for(pilot, lambda: len([e for e in queue.log_entries() if e.event == "decision"]) > decided_before,
                       timeout=300.0)
        result["accept_s"] = time.perf_counter() - t
        await pilot.pause(0.2)
    return result


def app_child(queue_path: str) -> None:
    print(json.dumps(asyncio.run(_drive_app(queue_path))))


# -- the benchmark ---------------------------------------------------------------------------------
def bench_one(label: str, work: Path, hours: float, fs: float, channels: int) -> list[tuple]:
    rec = work / f"{label}.npz"
    t0 = time.perf_counter()
    size = make_recording(rec, hours, fs, channels)
    print(f"[{label}] built {hours:g} h x {channels} ch at {fs:g} Hz in {time.perf_counter() - t0:.1f} s; "
          f"float32 size {size / 1e6:.1f} MB", flush=True)
    out = work / f"{label}-clean.npz"
    queue = work / f"{label}-queue"
    rows = []

    def step(name: str, argv: list[str], ok_codes=(0,)) -> dict:
        r = measured(argv)
        status = "ok" if r["rc"] in ok_codes else f"exit {r['rc']}"
        if r["rc"] not in ok_codes:
            print(f"  !! {name}: {r['err'].strip()[-600:]}", flush=True)
        rows.append((label, name, r["wall"], r["maxrss_mb"], r["maxrss_mb"] * 2**20 / size, status))
        print(f"  {name:<26} {r['wall']:8.1f} s  {r['maxrss_mb']:8.0f} MiB  {status}", flush=True)
        return r

    step("denoise", cli("denoise", str(rec), str(out)))
    step("assess orig vs cleaned", cli("assess", str(rec), str(out)), ok_codes=(0, 1))
    step("init + add", [PY, "-c",
                        "import sys;from tracevet.cli.main import main;"
                        "a=main(['init',sys.argv[1]]);b=main(['add',sys.argv[1],sys.argv[2]]);sys.exit(a or b)",
                        str(queue), str(rec)])
    step("clean (queue)", cli("clean", str(queue)))
    step("status", cli("status", str(queue)))
    r = step("review app (open..accept)", [PY, str(Path(__file__).resolve()), "--app-child", str(queue)])
    app = None
    try:
        app = json.loads(r["out"].strip().splitlines()[-1])
    except (ValueError, IndexError):
        print("  !! app child gave no result", flush=True)
    step("log --verify", cli("log", str(queue), "--verify"))
    step("export", cli("export", str(queue), str(work / f"{label}-export")))
    if app:
        keys = [s for _, s in app["keys"]]
        draws = app["draw_s"]
        print(f"  app: enter -> plots {app['open_s']:.2f} s (UI blocked at most {app['open_max_block_s']:.3f} s); "
              f"key -> redraw median {np.median(keys) * 1e3:.0f} ms, max {max(keys) * 1e3:.0f} ms; "
              f"plot build median {np.median(draws) * 1e3:.1f} ms, max {max(draws) * 1e3:.1f} ms; "
              f"UI blocked at most {app['keys_max_block_s']:.3f} s while moving; accept {app['accept_s']:.2f} s",
              flush=True)
        slow = sorted(app["keys"], key=lambda kv: -kv[1])[:3]
        print("  slowest keys: " + ", ".join(f"{k} {s * 1e3:.0f} ms" for k, s in slow), flush=True)
        rows.append((label, "  app: enter -> plots", app["open_s"], float("nan"), float("nan"),
                     f"UI blocked <= {app['open_max_block_s']:.2f} s"))
        rows.append((label, "  app: key -> redraw (med/max)", float(np.median(keys)), float("nan"), float("nan"),
                     f"max {max(keys):.3f} s, blocked <= {app['keys_max_block_s']:.2f} s"))
        rows.append((label, "  app: accept (note, log)", app["accept_s"], float("nan"), float("nan"), "ok"))
    for path in (rec, out):
        path.unlink(missing_ok=True)
    shutil.rmtree(queue, ignore_errors=True)
    shutil.rmtree(work / f"{label}-export", ignore_errors=True)
    return rows, size


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="2 h and 1 h records instead of 24 h and 12 h")
    parser.add_argument("--dir", type=Path, help="work folder (default: a temporary one)")
    parser.add_argument("--only", choices=("day-1ch", "half-2ch"), help="run one of the two records")
    parser.add_argument("--app-child", help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.app_child:
        app_child(args.app_child)
        return
    base = measured([PY, "-c", "import numpy, scipy, pywt, tracevet.cli.main, tracevet.assessment, tracevet.workqueue"])
    print(f"bare interpreter with tracevet, numpy, scipy imported: {base['maxrss_mb']:.0f} MiB peak RSS; "
          f"{os.cpu_count()} cores", flush=True)
    work = Path(tempfile.mkdtemp(prefix="tv-day-", dir=args.dir))
    scale = 1 / 12 if args.quick else 1.0
    plans = [("day-1ch", 24 * scale, 250.0, 1), ("half-2ch", 12 * scale, 500.0, 2)]
    table = []
    try:
        for label, hours, fs, channels in plans:
            if args.only and label != args.only:
                continue
            rows, size = bench_one(label, work, hours, fs, channels)
            table.append((label, hours, fs, channels, size, rows))
    finally:
        shutil.rmtree(work, ignore_errors=True)
    print()
    for label, hours, fs, channels, size, rows in table:
        print(f"{label}: {hours:g} h, {channels} ch, {fs:g} Hz; float32 size {size / 1e6:.1f} MB "
              f"(memory ratio = peak RSS / float32 size; base interpreter {base['maxrss_mb']:.0f} MiB)")
        print("| step | wall (s) | peak RSS (MiB) | x float32 | note |")
        print("|---|---:|---:|---:|---|")
        for _, name, wall, rss, _ratio, note in rows:
            ratio = rss * 2**20 / size if rss == rss else float("nan")
            rss_text = f"{rss:.0f}" if rss == rss else ""
            ratio_text = f"{ratio:.1f}" if ratio == ratio else ""
            print(f"| {name.strip()} | {wall:.2f} | {rss_text} | {ratio_text} | {note} |")
        print()


if __name__ == "__main__":
    main()
