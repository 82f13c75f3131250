"""Helpers for the queue tests: small recordings and queues with runs.

Runs made here go through ``Queue.store_run`` with the real cleaning
engine and assessment when they are importable.
"""

from __future__ import annotations

import numpy as np

from tracevet.recording import Recording, write_recording


def write_small_recording(path, seconds: float = 2.0, fs: float = 250.0, seed: int = 0, channels: int = 1):
    """Write a short noisy sine recording (test input only) and return its path."""
    rng = np.random.default_rng(seed)
    t = np.arange(int(seconds * fs)) / fs
    signal = np.stack(
        [np.sin(2 * np.pi * 1.2 * t + k) + 0.05 * rng.standard_normal(t.size) for k in range(channels)], axis=1
    )
    write_recording(
        Recording(signal.astype(np.float32), fs, tuple(f"ch{k + 1}" for k in range(channels)), "mV", "ecg"), path
    )
    return path


def write_noisy_ecg(path, seed: int, seconds: float = 8.0, fs: float = 250.0):
    """Write a synthetic ECG (McSharry et al. 2003 model) with muscle noise, in mV, and return its path."""
    from tracevet.synthetic import muscle_noise, synthetic_ecg

    n = int(seconds * fs)
    signal = synthetic_ecg(seconds, fs, seed=seed).signal + muscle_noise(n, fs, seed=100 + seed)
    write_recording(Recording(signal.astype(np.float32), fs, ("chest",), "mV", "ecg"), path)
    return path


class StandInAssessment:
    """Duck-typed assessment used to build runs without the assessment layer.

    It holds given flags and saves them the way an assessment is saved
    (``assessment.json`` and ``beats.npz``); queue tests about the log and
    claims do not depend on how flags are computed.
    """

    def __init__(self, flags=()):
        from types import SimpleNamespace

        self.flags = [
            SimpleNamespace(id=i, severity=s, message=f"{i} ({s})", value=1.0, limit=0.5, source="test", channel="ch1")
            for i, s in flags
        ]

    @property
    def worst_severity(self):
        severities = {f.severity for f in self.flags}
        return "fail" if "fail" in severities else "warn" if "warn" in severities else None

    def save(self, folder):
        import json
        from pathlib import Path

        folder = Path(folder)
        (folder / "assessment.json").write_text(json.dumps({"metrics": {}, "flags": [vars(f) for f in self.flags]}))
        np.savez(folder / "beats.npz", channels=np.array(["ch1"]))


def queue_with_runs(tmp_path, n_records: int = 3, flags=(), name: str = "q"):
    """A queue of ``n_records`` small records, each with one tracevet run (stand-in assessment)."""
    from tracevet.cleaning import DEFAULT_SETTINGS
    from tracevet.recording import read_recording
    from tracevet.workqueue import Queue

    queue = Queue.init(tmp_path / name)
    files = [write_small_recording(tmp_path / f"rec{i}.npz", seed=i) for i in range(n_records)]
    ids = queue.add_files(files, added_by="setup")
    for record_id, path in zip(ids, files):
        queue.store_run(record_id, read_recording(path), StandInAssessment(flags), DEFAULT_SETTINGS)
    return queue, ids
