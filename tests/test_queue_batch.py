"""Batch cleaning, re-runs and records cleaned elsewhere, with the real engine and assessment."""

from __future__ import annotations

import os
import socket

import pytest
from queue_helpers import write_noisy_ecg

from tracevet.cleaning import DEFAULT_SETTINGS, CleaningSettings, clean
from tracevet.errors import InputError
from tracevet.recording import read_recording, write_recording
from tracevet.workqueue import Queue
from tracevet.workqueue.batch import clean_waiting
from tracevet.workqueue.locking import try_hold


@pytest.fixture
def queue_of_four(tmp_path):
    queue = Queue.init(tmp_path / "q")
    ids = queue.add_files([write_noisy_ecg(tmp_path / f"dive{i}.npz", i) for i in range(4)], added_by="mira")
    return queue, ids


def test_clean_cleans_and_assesses_every_waiting_record(queue_of_four):
    queue, ids = queue_of_four
    seen = []
    outcomes = clean_waiting(queue, workers=2, progress=lambda done, total, outcome: seen.append((done, total)))
    assert sorted(o.record_id for o in outcomes) == ids and all(o.run_id == "run-001" for o in outcomes)
    assert seen[0] == (0, 4) and seen[-1] == (4, 4)
    assert {r.state for r in queue.records()} == {"to-review"}
    run = queue.runs(ids[0])[0]
    # The run records the settings applied: mains auto resolved (no 50/60 Hz line in these records).
    applied = DEFAULT_SETTINGS.to_dict()
    if applied["mains"] == "auto":
        applied["mains"] = "off"
    assert run.origin == "tracevet" and run.settings == applied
    assert run.settings_digest == CleaningSettings.from_dict(applied).digest()
    cleaned, assessment = queue.load_run(ids[0])
    assert cleaned.n_samples == 2000 and hasattr(assessment, "flags")
    assert clean_waiting(queue) == []
    assert queue.verify() == []


def test_an_interrupted_batch_carries_on_without_redoing_finished_records(queue_of_four, tmp_path):
    queue, ids = queue_of_four
    # a worker that died mid-run left a scratch folder; a finished run never reached the index
    dead = subprocess_pid_that_has_ended()
    leftover = queue.root / ".work" / f"{socket.gethostname()}-{dead}-run-deadbeef"
    leftover.mkdir()
    (leftover / "cleaned.npz").write_bytes(b"half")
    original = queue.load_original(ids[0])
    from tracevet.assessment import assess

    cleaned = clean(original, DEFAULT_SETTINGS)
    queue.store_run(ids[0], cleaned, assess(original, cleaned), DEFAULT_SETTINGS, update_index=False)
    outcomes = clean_waiting(queue, workers=2)
    assert sorted(o.record_id for o in outcomes) == ids[1:]
    assert [r.run_id for r in queue.runs(ids[0])] == ["run-001"]
    assert not leftover.exists()
    assert queue.verify() == []


def subprocess_pid_that_has_ended() -> int:
    import subprocess
    import sys

    process = subprocess.Popen([sys.executable, "-c", "pass"])
    process.wait()
    return process.pid


def test_only_one_batch_runs_on_a_queue(queue_of_four):
    queue, _ = queue_of_four
    fd = try_hold(queue.paths.clean_lock)
    try:
        with pytest.raises(InputError, match="already running"):
            clean_waiting(queue)
    finally:
        os.close(fd)


def test_a_record_sent_back_is_re_run_with_the_settings_asked_for(queue_of_four):
    queue, ids = queue_of_four
    clean_waiting(queue, workers=1)
    requested = DEFAULT_SETTINGS.from_dict({"transform": "dwt", "level": 4})
    queue.decide(ids[0], "rerun", "R peaks flattened", "mira", requested_settings=requested)
    assert queue.record(ids[0]).state == "sent-back"
    [outcome] = clean_waiting(queue, workers=2)
    assert (outcome.record_id, outcome.run_id) == (ids[0], "run-002")
    runs = queue.runs(ids[0])
    assert runs[1].settings["transform"] == "dwt" and runs[1].settings["level"] == 4
    assert runs[0].settings["transform"] == "swt"  # the first run is untouched
    assert queue.record(ids[0]).state == "to-review"
    assert queue.decide(ids[0], "accept", "better", "mira").run == "run-002"


def test_add_run_puts_a_new_run_beside_the_old_and_cancelling_leaves_nothing(queue_of_four):
    queue, ids = queue_of_four
    clean_waiting(queue, workers=1)

    def cancel(fraction):
        if fraction > 0.2:
            raise KeyboardInterrupt

    with pytest.raises(KeyboardInterrupt):
        queue.add_run(ids[0], {"transform": "dwt"}, progress=cancel)
    assert [r.run_id for r in queue.runs(ids[0])] == ["run-001"]
    assert os.listdir(queue.root / ".work") == []
    fractions = []
    run_id = queue.add_run(ids[0], {"transform": "dwt"}, progress=fractions.append, reviewer="mira")
    assert run_id == "run-002" and fractions and max(fractions) <= 1.0
    assert queue.runs(ids[0])[1].made_by == "mira"
    queue.claim(ids[1], "jonas")
    from tracevet.workqueue import ClaimedByOther

    with pytest.raises(ClaimedByOther):
        queue.add_run(ids[1], None, reviewer="mira")


def test_a_record_cleaned_elsewhere_is_reviewed_and_can_be_re_run(tmp_path):
    queue = Queue.init(tmp_path / "q")
    raw = write_noisy_ecg(tmp_path / "dive7.npz", 7)
    elsewhere = tmp_path / "other-pipeline.npz"
    write_recording(clean(read_recording(raw), DEFAULT_SETTINGS.from_dict({"transform": "dwt"})), elsewhere)
    record_id = queue.add_pair(raw, elsewhere, added_by="mira")
    item = queue.record(record_id)
    assert item.origin == "pair" and item.state == "to-review"
    [run] = queue.runs(record_id)
    assert run.origin == "external" and run.settings is None and run.settings_digest is None
    assert (
        queue.root / "records" / record_id / "runs" / "run-001" / "cleaned.npz"
    ).read_bytes() == elsewhere.read_bytes()
    entry = queue.decide(record_id, "rerun", "try tracevet's engine", "mira")
    assert entry.get("origin") == "external" and entry.get("settings") is None
    [outcome] = clean_waiting(queue, workers=1)
    runs = queue.runs(record_id)
    assert [r.origin for r in runs] == ["external", "tracevet"] and outcome.run_id == "run-002"
    assert queue.verify() == []


def test_a_pair_that_does_not_match_is_refused(tmp_path):
    queue = Queue.init(tmp_path / "q")
    raw = write_noisy_ecg(tmp_path / "a.npz", 1)
    shorter = write_noisy_ecg(tmp_path / "b.npz", 2, seconds=6.0)
    with pytest.raises(InputError, match="samples"):
        queue.add_pair(raw, shorter, added_by="mira")
    assert queue.records() == [] and os.listdir(queue.root / ".work") == []


def test_clean_and_add_pair_commands(run_cli, tmp_path):
    folder = tmp_path / "q"
    run_cli("init", folder)
    files = [write_noisy_ecg(tmp_path / f"d{i}.npz", i) for i in range(3)]
    assert run_cli("add", folder, *files, "--reviewer", "mira")[0] == 0
    code, out, err = run_cli("clean", folder)
    assert code == 0 and "cleaned 3 record(s)" in out
    assert "cleaning [" in err and "3/3" in err and "Traceback" not in err
    code, out, err = run_cli("clean", folder)
    assert code == 0 and "nothing waiting" in out
    raw, other = write_noisy_ecg(tmp_path / "p.npz", 9), tmp_path / "p-clean.npz"
    write_recording(clean(read_recording(raw), DEFAULT_SETTINGS), other)
    code, out, err = run_cli("add", folder, "--pair", raw, other, "--reviewer", "mira")
    assert code == 0 and "cleaned elsewhere" in out
    code, out, err = run_cli("add", folder, raw, "--pair", raw, other)
    assert code == 2 and err.count("\n") == 1
    code, out, err = run_cli("clean", folder, "--set", "nonsense=1")
    assert code == 2 and "nonsense" in err and err.count("\n") == 1


def test_the_queue_settings_set_cleaning_and_flag_limits(queue_of_four, run_cli):
    queue, ids = queue_of_four
    text = queue.paths.settings.read_text()
    queue.paths.settings.write_text(
        text.replace("cleaning: {}", "cleaning:\n  transform: dwt").replace(
            "flag_limits: {}", "flag_limits:\n  qrs-widening: {warn: 3, fail: 5}"
        )
    )
    queue = Queue.open(queue.root)
    assert queue.settings.limits()["qrs-widening"].fail == 5
    clean_waiting(queue, workers=1)
    assert queue.runs(ids[0])[0].settings["transform"] == "dwt"
    queue.paths.settings.write_text(text.replace("flag_limits: {}", "flag_limits:\n  no-such-flag: {warn: 1}"))
    queue.decide(ids[0], "rerun", "again", "mira")
    code, out, err = run_cli("clean", queue.root)
    assert code == 2 and "queue.yaml" in err and "no-such-flag" in err and err.count("\n") == 1
    assert [p.file for p in Queue.open(queue.root).verify()] == ["queue.yaml"]
