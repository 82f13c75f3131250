"""Work queue at scale: 10,000 records, `status` and opening the queue for the app.

Builds a queue of ``--records`` short synthetic ECG records (default
10,000; 8 s at 250 Hz, McSharry model plus noise, every file different)
through the queue's own API: ``Queue.add_files`` for the originals, then for
every record a real run (``tracevet.cleaning.clean`` with the default
settings and ``tracevet.assessment.assess``, in 2 worker processes, written
with ``Queue.store_run``), then decisions on a third of them and a few
claims. Nothing is faked: every file in the queue is what the commands
would write.

Then it measures, best of ``--repeat``:

- ``tracevet status QUEUE`` as a whole process: wall time and peak
  resident memory (``getrusage`` of the child), target < 1 s and < 300 MB;
- the same work in-process (``Queue.open`` + ``records()`` + counts):
  time and peak Python allocations (tracemalloc);
- opening the queue for the app (``Queue.open``, ``records()``,
  ``next_for_review``): time, and the data files opened (an audit hook
  records every ``open``; target 0);
- the bare alternative without an index: reading every ``record.json`` and
  newest ``run.json`` (the ratio shows what the index saves);
- one decision on the large queue, and ``--verify`` (optional, slow: it
  checksums every file).

Run: ``PYTHONPATH=src python benchmarks/bench_queue.py [--records N] [--dir PATH] [--verify]``
"""

from __future__ import annotations

import argparse
import json
import os
import shutil
import subprocess
import sys
import tempfile
import time
import tracemalloc
from collections import Counter
from concurrent.futures import ProcessPoolExecutor
from pathlib import Path

import numpy as np

SRC = Path(__file__).resolve().parents[1] / "src"
FS = 250.0
SECONDS = 8.0
DATA_SUFFIXES = (".npz", ".npy", ".csv", ".edf")


def _write_inbox(inbox: Path, count: int) -> list[Path]:
    """``count`` different short ECG files: a few model beats patterns plus fresh noise each."""
    from tracevet.recording import Recording, write_recording
    from tracevet.synthetic import baseline_wander, muscle_noise, synthetic_ecg

    n = int(SECONDS * FS)
    bases = [synthetic_ecg(SECONDS, FS, heart_rate_bpm=55 + 3 * k, seed=k).signal for k in range(20)]
    rng = np.random.default_rng(1)
    paths = []
    for i in range(count):
        signal = bases[i % len(bases)] + baseline_wander(n, FS, seed=i) + muscle_noise(n, FS, seed=10_000 + i)
        signal = signal + 0.001 * rng.standard_normal(n)
        path = inbox / f"dive-{i:05d}.npz"
        write_recording(Recording(signal.astype(np.float32), FS, ("chest",), "mV", "ecg"), path)
        paths.append(path)
    return paths


def _run_one(root: str, record_id: str) -> str:
    from tracevet.workqueue.batch import clean_one
    from tracevet.cleaning import DEFAULT_SETTINGS

    outcome = clean_one(root, record_id, DEFAULT_SETTINGS.to_dict())
    if outcome.error:
        raise RuntimeError(f"{record_id}: {outcome.error}")
    return record_id


def build(root: Path, count: int) -> dict:
    """Build the benchmark queue at ``root``; return build timings."""
    from tracevet.workqueue import Queue

    timings = {}
    started = time.perf_counter()
    queue = Queue.init(root)
    inbox = root.parent / "inbox"
    inbox.mkdir(exist_ok=True)
    files = _write_inbox(inbox, count)
    timings["write inputs"] = time.perf_counter() - started
    started = time.perf_counter()
    ids: list[str] = []
    for start in range(0, count, 1000):
        ids += queue.add_files(files[start : start + 1000], added_by="bench")
    timings["add"] = time.perf_counter() - started
    started = time.perf_counter()
    done: list[str] = []
    with ProcessPoolExecutor(max_workers=2) as pool:
        for record_id in pool.map(_run_one, [str(root)] * len(ids), ids, chunksize=50):
            done.append(record_id)
            if len(done) % 1000 == 0:
                queue.refresh_index(done[-1000:])
    queue.refresh_index(done[len(done) - len(done) % 1000 :])
    timings["clean + assess"] = time.perf_counter() - started
    started = time.perf_counter()
    decisions = ("accept", "reject", "rerun")
    for k, record_id in enumerate(ids[: count // 3]):
        queue.decide(record_id, decisions[k % 3], f"bench note {k}", f"reviewer-{k % 4}")
    for record_id in ids[count // 3 : count // 3 + 5]:
        queue.claim(record_id, "mira", bind_process=False)
    timings["decide a third"] = time.perf_counter() - started
    shutil.rmtree(inbox)
    return timings


def status_process(root: Path, repeat: int) -> tuple[float, float]:
    """Best wall time (s) and peak RSS (MB) of ``tracevet status`` in a child process."""
    env = dict(os.environ, PYTHONPATH=str(SRC))
    best, peak = float("inf"), 0.0
    for _ in range(repeat):
        started = time.perf_counter()
        proc = subprocess.Popen(
            [sys.executable, "-m", "tracevet", "status", str(root)],
            stdout=subprocess.DEVNULL,
            stderr=subprocess.PIPE,
            env=env,
        )
        _pid, status, usage = os.wait4(proc.pid, 0)  # this child's own peak RSS, not the pool workers'
        elapsed = time.perf_counter() - started
        proc.returncode = os.waitstatus_to_exitcode(status)
        if proc.returncode != 0:
            raise SystemExit(f"status failed: {proc.stderr.read().decode()}")
        proc.stderr.close()
        best = min(best, elapsed)
        peak = max(peak, usage.ru_maxrss / 1024)
    return best, peak


def python_startup(repeat: int) -> float:
    """Best time of a bare ``python -c pass`` (the floor of any command)."""
    best = float("inf")
    for _ in range(repeat):
        started = time.perf_counter()
        subprocess.run([sys.executable, "-c", "pass"], check=True)
        best = min(best, time.perf_counter() - started)
    return best


def status_in_process(root: Path, repeat: int) -> tuple[float, float, Counter]:
    """Best time (s) and peak traced allocations (MB) of the status work in this process."""
    from tracevet.workqueue import Queue

    def work() -> Counter:
        records = Queue.open(root).records()
        Counter(r.worst_severity for r in records)
        return Counter(r.state for r in records)

    best = float("inf")
    for _ in range(repeat):
        started = time.perf_counter()
        states = work()
        best = min(best, time.perf_counter() - started)
    tracemalloc.start()  # separately: tracing slows allocation-heavy code down
    work()
    peak = tracemalloc.get_traced_memory()[1] / 2**20
    tracemalloc.stop()
    return best, peak, states


def open_for_app(root: Path, repeat: int) -> tuple[float, int, int]:
    """Best time of what the app does on start, and how many files / data files it opened."""
    from tracevet.workqueue import Queue

    opened: list[str] = []

    def hook(event, args):
        if event == "open" and args and isinstance(args[0], (str, bytes, os.PathLike)):
            opened.append(os.fsdecode(args[0]))

    sys.addaudithook(hook)
    best = float("inf")
    for _ in range(repeat):
        opened.clear()
        started = time.perf_counter()
        queue = Queue.open(root)
        queue.records()
        queue.next_for_review("mira")
        best = min(best, time.perf_counter() - started)
    data = [p for p in opened if p.endswith(DATA_SUFFIXES)]
    return best, len(opened), len(data)


def bare_scan(root: Path) -> float:
    """Time to list the queue by reading every record.json and newest run.json (no index)."""
    started = time.perf_counter()
    states = Counter()
    for record in sorted((root / "records").iterdir()):
        json.loads((record / "record.json").read_text())
        runs = sorted((record / "runs").iterdir())
        if runs:
            states[json.loads((runs[-1] / "run.json").read_text()).get("worst_severity")] += 1
    return time.perf_counter() - started


def main() -> None:
    """Build the queue, measure, print the figures."""
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--records", type=int, default=10_000)
    parser.add_argument("--dir", type=Path, help="build (or reuse) the queue here; default a temporary folder")
    parser.add_argument("--repeat", type=int, default=3)
    parser.add_argument("--verify", action="store_true", help="also time 'log --verify' (checksums every file)")
    args = parser.parse_args()
    sys.path.insert(0, str(SRC))
    from tracevet.workqueue import Queue

    temporary = None
    if args.dir is None:
        temporary = Path(tempfile.mkdtemp(prefix="tracevet-bench-"))
        args.dir = temporary
    root = args.dir / "queue"
    try:
        if not (root / "queue.yaml").exists():
            print(f"building a queue of {args.records} records in {root} ...", flush=True)
            for name, seconds in build(root, args.records).items():
                print(f"  {name:<16} {seconds:7.1f} s")
        size = sum(p.stat().st_size for p in root.rglob("*") if p.is_file())
        index_size = (root / "index.json").stat().st_size + (root / "index.journal").stat().st_size
        n = len(Queue.open(root).records())
        print(f"queue: {n} records, {size / 2**20:.0f} MB on disk, index {index_size / 2**20:.1f} MB")
        floor = python_startup(args.repeat)
        wall, rss = status_process(root, args.repeat)
        print(f"tracevet status (whole process): {wall:.2f} s, peak RSS {rss:.0f} MB   [target < 1 s, < 300 MB]")
        print(f"  bare 'python -c pass' on this machine: {floor:.2f} s")
        t_in, mem_in, states = status_in_process(root, args.repeat)
        print(f"status work in-process: {t_in * 1000:.0f} ms, peak Python allocations {mem_in:.0f} MB")
        print(f"  states: {dict(sorted(states.items()))}")
        t_app, n_open, n_data = open_for_app(root, args.repeat)
        print(
            f"open for the app (open + records + next_for_review): {t_app * 1000:.0f} ms, {n_open} files opened, "
            f"{n_data} data files"
        )
        t_bare = bare_scan(root)
        print(
            f"bare listing without the index (every record.json + run.json): {t_bare * 1000:.0f} ms; index is "
            f"{t_bare / t_in:.1f}x faster"
        )
        queue = Queue.open(root)
        target = next(r.id for r in queue.records() if r.state == "to-review")
        started = time.perf_counter()
        queue.decide(target, "accept", "bench", "bench")
        print(
            "one decision on this queue (checksums, fsynced append, index): "
            f"{(time.perf_counter() - started) * 1000:.0f} ms"
        )
        if args.verify:
            started = time.perf_counter()
            problems = queue.verify()
            print(
                f"log --verify (every entry, every file checksummed): {time.perf_counter() - started:.1f} s, "
                f"{len(problems)} problem(s)"
            )
    finally:
        if temporary is not None:
            shutil.rmtree(temporary, ignore_errors=True)


if __name__ == "__main__":
    main()
