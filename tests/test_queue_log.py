"""The decision log: entry contents, decision rules, hash chain, tampering, torn tails."""

from __future__ import annotations

import json
import os

import pytest
from queue_helpers import queue_with_runs

from tracevet.errors import InputError
from tracevet.workqueue import Queue
from tracevet.workqueue.checksums import canonical_json, sha256_file
from tracevet.workqueue.log import GENESIS, entry_hash


def _lines(queue):
    return queue.paths.log.read_bytes().split(b"\n")[:-1]


def _write_lines(queue, lines):
    queue.paths.log.write_bytes(b"".join(line + b"\n" for line in lines))


def test_a_decision_entry_holds_everything_an_audit_asks_for(tmp_path):
    queue, ids = queue_with_runs(tmp_path, flags=[("r-peak-change", "warn")])
    entry = queue.decide(ids[0], "accept", "looks fine", "mira")
    data = entry.data
    for key in ("time", "reviewer", "host", "record", "run", "decision", "note", "settings", "settings_digest",
                "original_sha256", "cleaned_sha256", "flags", "tracevet_version", "prev", "hash", "seq"):
        assert key in data, key
    assert data["time"].endswith("Z") and data["run"] == "run-001" and data["decision"] == "accept"
    run = queue.runs(ids[0])[0]
    assert data["settings"] == run.settings and data["settings_digest"] == run.settings_digest
    assert data["cleaned_sha256"] == sha256_file(queue.root / "records" / ids[0] / "runs" / "run-001" / "cleaned.npz")
    assert data["flags"][0]["id"] == "r-peak-change"
    # the hash is SHA-256 over the canonical JSON of the entry without 'hash' (FIPS 180-4)
    assert data["hash"] == entry_hash(data)
    line = _lines(queue)[entry.line - 1]
    assert line == canonical_json(data)
    assert queue.log_entries()[0].data["prev"] == GENESIS
    assert queue.verify() == []


def test_decision_rules_need_notes_where_they_matter(tmp_path):
    queue, ids = queue_with_runs(tmp_path, flags=[("qrs-width", "fail")])
    with pytest.raises(InputError, match="rejection needs a note"):
        queue.decide(ids[0], "reject", "  ", "mira")
    with pytest.raises(InputError, match="fail flag"):
        queue.decide(ids[0], "accept", "", "mira")
    with pytest.raises(InputError, match="must be one of"):
        queue.decide(ids[0], "approve", "x", "mira")
    with pytest.raises(InputError, match="has no run"):
        queue.decide(ids[0], "accept", "x", "mira", run_id="run-009")
    with pytest.raises(InputError, match="not a record id"):
        queue.decide("../etc", "accept", "x", "mira")
    assert queue.log_entries(ids[0])[-1].event == "add"
    queue.decide(ids[0], "accept", "QRS widening is the lead placement", "mira")
    assert queue.record(ids[0]).state == "accepted"


def test_states_follow_decisions_and_new_runs(tmp_path):
    from queue_helpers import StandInAssessment

    from tracevet.cleaning import DEFAULT_SETTINGS

    queue, ids = queue_with_runs(tmp_path)
    queue.decide(ids[0], "rerun", "R peaks flattened", "mira")
    queue.decide(ids[1], "reject", "electrode off", "mira")
    states = {r.id: r.state for r in queue.records()}
    assert states == {ids[0]: "sent-back", ids[1]: "rejected", ids[2]: "to-review"}
    run_id = queue.store_run(ids[0], queue.load_original(ids[0]), StandInAssessment(), DEFAULT_SETTINGS)
    assert run_id == "run-002" and queue.record(ids[0]).state == "to-review"
    assert [r.run_id for r in queue.runs(ids[0])] == ["run-001", "run-002"]
    entry = queue.decide(ids[0], "accept", "", "mira")
    assert entry.run == "run-002"  # default: the newest run
    assert queue.record(ids[0]).state == "accepted"


def test_notes_are_stored_as_typed(tmp_path):
    queue, ids = queue_with_runs(tmp_path)
    note = "\x1b[2J\x1b]0;owned\x07[bold red]boom[/] <b>x</b> ‮evil"
    queue.decide(ids[0], "reject", note, "mira\x1b[31m")
    stored = json.loads(_lines(queue)[-1])
    assert stored["note"] == note and stored["reviewer"] == "mira\x1b[31m"
    assert b"\x1b" not in queue.paths.log.read_bytes()  # JSON escapes control characters on disk


def test_changing_one_character_of_a_past_entry_is_reported_with_its_line(tmp_path):
    queue, ids = queue_with_runs(tmp_path)
    queue.decide(ids[0], "accept", "fine", "mira")
    queue.decide(ids[1], "reject", "noisy", "mira")
    lines = _lines(queue)
    target = next(i for i, line in enumerate(lines) if b'"note":"fine"' in line)
    lines[target] = lines[target].replace(b'"note":"fine"', b'"note":"fina"')
    _write_lines(queue, lines)
    problems = queue.verify()
    assert any(p.line == target + 1 and p.record == ids[0] and "changed" in p.message for p in problems)
    assert all(not p.repaired for p in problems if p.line == target + 1)


def test_deleting_an_entry_is_reported(tmp_path):
    queue, ids = queue_with_runs(tmp_path)
    for record_id in ids:
        queue.decide(record_id, "accept", "ok", "mira")
    lines = _lines(queue)
    del lines[4]
    _write_lines(queue, lines)
    problems = queue.verify()
    assert any(p.line == 5 and "removed" in p.message for p in problems)


def test_cutting_entries_off_the_end_is_reported(tmp_path):
    queue, ids = queue_with_runs(tmp_path)
    queue.decide(ids[0], "accept", "ok", "mira")
    _write_lines(queue, _lines(queue)[:-1])
    assert any("cut off the end" in p.message for p in queue.verify())


def test_swapping_a_cleaned_file_is_reported_with_file_and_entry(tmp_path):
    queue, ids = queue_with_runs(tmp_path)
    entry = queue.decide(ids[0], "accept", "ok", "mira")
    cleaned = queue.root / "records" / ids[0] / "runs" / "run-001" / "cleaned.npz"
    os.chmod(cleaned, 0o644)
    cleaned.write_bytes((queue.root / "records" / ids[1] / "runs" / "run-001" / "cleaned.npz").read_bytes())
    problems = queue.verify()
    relative = f"records/{ids[0]}/runs/run-001/cleaned.npz"
    assert any(p.file == relative and p.line is None for p in problems)
    assert any(p.file == relative and p.line == entry.line for p in problems)
    with pytest.raises(InputError, match="no longer match"):
        queue.decide(ids[0], "accept", "again", "mira")


def test_a_torn_last_line_is_reported_and_repair_keeps_every_complete_entry(tmp_path):
    queue, ids = queue_with_runs(tmp_path)
    for record_id in ids:
        queue.decide(record_id, "accept", "ok", "mira")
    complete = _lines(queue)
    with open(queue.paths.log, "ab") as handle:
        handle.write(b'{"seq":7,"event":"decis')
    assert len(queue.log_entries()) == len(complete)
    torn = [p for p in queue.verify() if "torn" in p.message]
    assert torn and torn[0].line == len(complete) + 1
    repair = queue.repair_log("mira")
    assert repair.event == "repair" and repair.get("removed_bytes") == 23
    assert _lines(queue)[: len(complete)] == complete
    assert (queue.root / repair.get("saved_as")).read_text() == '{"seq":7,"event":"decis'
    assert queue.verify() == []
    assert queue.repair_log("mira") is None


def test_the_next_decision_repairs_a_torn_tail_itself_and_says_so(tmp_path):
    queue, ids = queue_with_runs(tmp_path)
    queue.decide(ids[0], "accept", "ok", "mira")
    with open(queue.paths.log, "ab") as handle:
        handle.write(b'{"partial')
    entry = queue.decide(ids[1], "accept", "ok", "jonas")
    events = [e.event for e in queue.log_entries()]
    assert events[-2:] == ["repair", "decision"] and entry.seq == len(events)
    assert queue.verify() == []


def test_a_damaged_index_is_rebuilt_by_verify(tmp_path):
    queue, ids = queue_with_runs(tmp_path)
    queue.decide(ids[0], "accept", "ok", "mira")
    queue.paths.index.write_text("{not json")
    queue.paths.journal.write_text("garbage\n")
    problems = queue.verify()
    assert problems and all(p.repaired and p.where == "index" for p in problems)
    assert Queue.open(queue.root).record(ids[0]).state == "accepted"
    assert {r.id: r.state for r in queue.records()}[ids[0]] == "accepted"
    assert queue.verify() == []


def test_the_index_catches_up_with_decisions_it_missed(tmp_path):
    queue, ids = queue_with_runs(tmp_path)
    queue.decide(ids[0], "accept", "ok", "mira")
    before = queue.paths.journal.read_bytes()
    queue.decide(ids[1], "reject", "bad", "mira")
    queue.paths.journal.write_bytes(before)  # as if the writer died before updating the index
    assert {r.id: r.state for r in queue.records()}[ids[1]] == "rejected"
    assert queue.verify() == []


def test_listing_works_from_the_files_when_the_index_is_gone(tmp_path):
    queue, ids = queue_with_runs(tmp_path)
    queue.decide(ids[2], "reject", "flat line", "mira")
    queue.paths.index.unlink(missing_ok=True)
    queue.paths.journal.unlink(missing_ok=True)
    assert {r.id: r.state for r in queue.records()} == {ids[0]: "to-review", ids[1]: "to-review", ids[2]: "rejected"}
    assert queue.paths.index.exists()  # written back for the next reader
    queue.paths.index.write_text('{"version": 1, "log_size": 0, "records": {}}')
    queue.paths.journal.write_text("")
    assert {r.id: r.state for r in queue.records()}[ids[2]] == "rejected"
