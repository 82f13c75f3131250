"""``tracevet clean QUEUE --suggest``: suggested runs beside the flagged ones, and the log says so."""

from __future__ import annotations

import json

import numpy as np

from tracevet import synthetic as syn
from tracevet.recording import Recording, write_recording

AGGRESSIVE = [
    "transform=dwt", "wavelet=haar", "level=7", "rule=universal", "threshold_mode=hard", "noise_estimate=per_level",
]


def _queue(tmp_path, run_cli):
    q = tmp_path / "q"
    assert run_cli("init", q)[0] == 0
    files = []
    for i, seconds in enumerate((20.0, 16.0, 12.0)):
        ecg = syn.synthetic_ecg(seconds, 250.0, heart_rate_bpm=75, seed=20 + i)
        x = ecg.signal + syn.muscle_noise(ecg.signal.size, 250.0, 0.06, seed=30 + i)
        path = tmp_path / f"diver{i}.npz"
        write_recording(Recording(x.astype(np.float32), 250.0, ("II",), "mV", "ecg"), path)
        files.append(path)
    assert run_cli("add", q, *files, "--reviewer", "ann")[0] == 0
    return q


def test_clean_suggest_adds_marked_runs_and_the_log_records_them(tmp_path, run_cli, monkeypatch):
    from tracevet.workqueue import Queue

    monkeypatch.setenv("TRACEVET_REVIEWER", "ann")
    q = _queue(tmp_path, run_cli)
    flagged, other, plain = [r.id for r in Queue.open(q).records()]
    queue = Queue.open(q)
    from tracevet.cleaning import DEFAULT_SETTINGS, apply_overrides

    for record_id in (flagged, other):
        queue.add_run(record_id, apply_overrides(DEFAULT_SETTINGS, AGGRESSIVE))  # a bad cleaning: flagged
    queue.add_run(plain)  # the defaults: no flags
    assert queue.record(flagged).n_flags > 0 and queue.record(plain).n_flags == 0

    # Two flagged records and --workers 2: the suggestions run on the local process pool.
    code, out, err = run_cli("clean", q, "--suggest", "--quiet", "--workers", "2")
    assert code == 0, err
    assert "suggested runs added for 2 of 2 flagged record(s)" in out
    runs = Queue.open(q).runs(flagged)
    assert [r.run_id for r in runs] == ["run-001", "run-002"]  # the original run stays
    assert runs[0].suggestion is None and runs[1].suggestion is not None
    digest = runs[1].suggestion["candidate_set_digest"]
    assert len(digest) == 64 and runs[1].worst_severity != "fail"
    assert Queue.open(q).runs(plain)[-1].suggestion is None and len(Queue.open(q).runs(plain)) == 1

    # Once more: the newest run is a suggested one, nothing is added.
    code, out, _ = run_cli("clean", q, "--suggest", "--quiet")
    assert code == 0 and len(Queue.open(q).runs(flagged)) == 2

    code, out, _ = run_cli("decide", q, flagged, "accept", "--json")
    assert code == 0
    entry = json.loads(out)
    assert entry["run"] == "run-002" and entry["suggested"] is True and entry["candidate_set_digest"] == digest
    code, out, _ = run_cli("decide", q, plain, "accept", "--json")
    assert code == 0 and "suggested" not in json.loads(out)
    assert run_cli("log", q, "--verify")[0] == 0
