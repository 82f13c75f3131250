"""Colleagues on one queue: overriding a standing decision, the reviewer-name rule, the default queue."""

from __future__ import annotations

import json

from queue_helpers import queue_with_runs

from tracevet.workqueue import DecisionOverride, Queue, RecordState, default_reviewer, resolve_reviewer
from tracevet.workqueue import states as states_mod


def test_deciding_over_a_colleagues_decision_needs_override_and_names_the_entry(run_cli, tmp_path):
    queue, ids = queue_with_runs(tmp_path)
    record = ids[0]
    code, out, err = run_cli("decide", queue.root, record, "reject", "--note", "electrode off", "--reviewer", "mira")
    assert code == 0
    rejected = [e for e in queue.log_entries(record) if e.event == "decision"][-1]

    # jonas accepts without --override: refused, one line naming the standing decision, nothing written
    size = queue.paths.log.stat().st_size
    code, out, err = run_cli("decide", queue.root, record, "accept", "--note", "fine", "--reviewer", "jonas")
    assert code == 2 and err.count("\n") == 1 and "Traceback" not in err
    assert "rejected by mira" in err and f"log entry {rejected.seq}" in err and "--override" in err
    assert queue.paths.log.stat().st_size == size

    # with --override it goes through, and the entry names the one it overrode (seq and hash)
    code, out, err = run_cli(
        "decide", queue.root, record, "accept", "--note", "fine", "--reviewer", "jonas", "--override"
    )
    assert code == 0 and f"overrides entry {rejected.seq}" in out
    entry = [e for e in queue.log_entries(record) if e.event == "decision"][-1]
    assert entry.get("overrides") == {
        "seq": rejected.seq, "hash": rejected.hash, "reviewer": "mira", "decision": "reject", "run": rejected.run,
    }
    summary = queue.record(record)
    assert summary.state == RecordState.ACCEPTED and summary.last.overrides["seq"] == rejected.seq
    code, out, _ = run_cli("log", queue.root, "--record", record)
    assert f"overrides entry {rejected.seq}" in out

    # changing one's own standing decision needs no --override, and still names the entry it replaces
    code, out, err = run_cli("decide", queue.root, record, "reject", "--note", "on second look", "--reviewer", "jonas")
    assert code == 0
    assert [e for e in queue.log_entries(record) if e.event == "decision"][-1].get("overrides")["seq"] == entry.seq

    # the chain still verifies with the new field
    code, out, _ = run_cli("log", queue.root, "--verify")
    assert code == 0 and "log verified" in out


def test_a_decision_no_longer_stands_once_a_new_run_was_added(tmp_path):
    from queue_helpers import StandInAssessment

    from tracevet.cleaning import DEFAULT_SETTINGS

    queue, ids = queue_with_runs(tmp_path, n_records=1)
    queue.decide(ids[0], "rerun", "R peaks low", "mira")
    cleaned = queue.load_original(ids[0])
    queue.store_run(ids[0], cleaned, StandInAssessment(), DEFAULT_SETTINGS)  # what 'tracevet clean' does
    assert queue.record(ids[0]).standing_decision is None
    entry = queue.decide(ids[0], "accept", "fine now", "jonas")  # the new run is unreviewed: no override
    assert entry.get("overrides") is None


def test_the_queue_refuses_an_override_without_consent(tmp_path):
    queue, ids = queue_with_runs(tmp_path, n_records=1)
    queue.decide(ids[0], "accept", "ok", "mira")
    try:
        queue.decide(ids[0], "reject", "no", "jonas")
    except DecisionOverride as exc:
        assert exc.previous.reviewer == "mira" and exc.previous.decision == "accept"
    else:
        raise AssertionError("override without consent went through")


def test_old_logs_without_override_fields_still_verify(run_cli, tmp_path):
    queue, ids = queue_with_runs(tmp_path, n_records=1)
    queue.decide(ids[0], "accept", "ok", "mira")
    # an index written before decisions kept their hash: the override still names the right entry
    index = json.loads(queue.paths.index.read_text()) if queue.paths.index.exists() else None
    journal = queue.paths.journal.read_text().splitlines()
    stripped = []
    for line in journal:
        item = json.loads(line)
        if item.get("summary", {}).get("last_decision"):
            item["summary"]["last_decision"].pop("hash", None)
            item["summary"]["last_decision"].pop("overrides", None)
        stripped.append(json.dumps(item))
    queue.paths.journal.write_text("\n".join(stripped) + "\n")
    assert index is None or isinstance(index, dict)
    first = [e for e in queue.log_entries(ids[0]) if e.event == "decision"][-1]
    entry = queue.decide(ids[0], "reject", "no", "jonas", override=True)
    assert entry.get("overrides")["hash"] == first.hash
    code, out, _ = run_cli("log", queue.root, "--verify")
    assert code == 0


def test_one_reviewer_name_rule_for_cli_and_app(monkeypatch, run_cli, tmp_path):
    import getpass

    monkeypatch.delenv("TRACEVET_REVIEWER", raising=False)
    for variable in ("LOGNAME", "USER", "LNAME", "USERNAME"):
        monkeypatch.delenv(variable, raising=False)

    def no_login():
        raise OSError("no login name")

    monkeypatch.setattr(getpass, "getuser", no_login)
    import os

    expected = f"uid-{os.getuid()}"
    assert default_reviewer() == expected == resolve_reviewer(None)
    queue, ids = queue_with_runs(tmp_path, n_records=1)
    code, out, err = run_cli("decide", queue.root, ids[0], "accept", "--note", "ok")
    assert code == 0 and f"by {expected}" in out
    # the review command takes the same rule (it refuses to start without a terminal, after naming the reviewer)
    from tracevet.cli import review_cmd

    assert review_cmd.resolve_reviewer is resolve_reviewer
    monkeypatch.setenv("TRACEVET_REVIEWER", "mira")
    assert resolve_reviewer(None) == "mira" and resolve_reviewer("jonas") == "jonas"


def test_status_and_log_open_the_same_default_queue_as_review(monkeypatch, run_cli, tmp_path):
    queue, ids = queue_with_runs(tmp_path, n_records=2)
    monkeypatch.setenv("TRACEVET_QUEUE", str(queue.root))
    code, out, err = run_cli("status")
    assert code == 0 and "2 record(s)" in out
    code, out, err = run_cli("log")
    assert code == 0 and "added" in out
    code, out, err = run_cli("log", "--verify")
    assert code == 0
    monkeypatch.setenv("TRACEVET_QUEUE", str(tmp_path / "not-a-queue"))
    code, out, err = run_cli("status")
    assert code == 2 and err.count("\n") == 1


def test_record_states_have_one_owner():
    # every state the queue reports is a RecordState, and the CLI's words come from it
    words = ["to-clean", "to-review", "in-review", "accepted", "rejected", "sent-back"]
    assert [s.value for s in states_mod.STATES] == words
    assert RecordState.SENT_BACK == "sent-back" and json.dumps({"s": RecordState.TO_REVIEW}) == '{"s": "to-review"}'
    from tracevet.app import queue_view
    from tracevet.workqueue import index

    assert index.TO_REVIEW is RecordState.TO_REVIEW and queue_view.DECIDED_STATES is states_mod.DECIDED_STATES


def test_one_caution_text():
    import inspect

    import tracevet.app.help_screen as help_screen
    import tracevet.cli.assess_cmd as assess_cmd
    import tracevet.cli.denoise_cmd as denoise_cmd
    import tracevet.cli.main as cli_main
    import tracevet.workqueue.export as export
    from tracevet.caution import CAUTION

    for module in (help_screen, assess_cmd, denoise_cmd, cli_main, export):
        assert module.CAUTION is CAUTION
        assert "not a medical device" not in inspect.getsource(module)


def test_queue_records_are_typed(tmp_path):
    queue, ids = queue_with_runs(tmp_path, n_records=1)
    queue.decide(ids[0], "accept", "ok", "mira")
    record = Queue.open(queue.root).records()[0]
    assert isinstance(record.state, RecordState) and record.last.reviewer == "mira" and record.last.hash
