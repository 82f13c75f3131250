"""Claims: one reviewer per record, take-over of lapsed claims, logged."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest
from queue_helpers import queue_with_runs

from tracevet.workqueue import ClaimedByOther

SRC = Path(__file__).resolve().parents[1] / "src"


def _age_claim(queue, record_id, minutes):
    path = queue.paths.claim_file(record_id)
    data = json.loads(path.read_text())
    data["last_activity"] = "2000-01-01T00:00:00.000000Z" if minutes is None else data["last_activity"]
    path.write_text(json.dumps(data))


def test_a_record_held_by_one_reviewer_is_shown_as_taken_to_others(tmp_path):
    queue, ids = queue_with_runs(tmp_path)
    claim = queue.claim(ids[0], "mira")
    assert claim.reviewer == "mira" and claim.pid > 0
    with pytest.raises(ClaimedByOther) as info:
        queue.claim(ids[0], "jonas")
    assert info.value.holder.reviewer == "mira" and "mira" in str(info.value)
    item = {r.id: r for r in queue.records()}[ids[0]]
    assert item.state == "in-review" and item.holder.reviewer == "mira" and not item.holder_stale
    assert queue.next_for_review("jonas") != ids[0]
    assert queue.next_for_review("mira") == ids[0]


def test_a_decision_by_someone_other_than_the_holder_is_refused(tmp_path):
    queue, ids = queue_with_runs(tmp_path)
    queue.claim(ids[0], "mira")
    with pytest.raises(ClaimedByOther):
        queue.decide(ids[0], "accept", "mine now", "jonas")
    with pytest.raises(ClaimedByOther):
        queue.release(ids[0], "jonas")
    assert [e.event for e in queue.log_entries(ids[0])] == ["add"]
    entry = queue.decide(ids[0], "accept", "fine", "mira")
    assert entry.get("claim")["reviewer"] == "mira"
    assert queue.claims() == {}  # the decision ended the claim


def test_the_same_reviewer_shares_the_claim_and_release_ends_it(tmp_path):
    queue, ids = queue_with_runs(tmp_path)
    first = queue.claim(ids[0], "mira")
    touched = queue.touch_claim(ids[0], "mira")
    assert touched.since == first.since and touched.last_activity >= first.last_activity
    assert queue.release(ids[0], "mira") is True
    assert queue.release(ids[0], "mira") is False
    assert queue.claim(ids[0], "jonas").reviewer == "jonas"


def test_a_claim_whose_process_has_ended_is_taken_over_and_logged(tmp_path):
    queue, ids = queue_with_runs(tmp_path)
    code = (
        "import sys; from tracevet.workqueue import Queue; "
        f"Queue.open(sys.argv[1]).claim({ids[0]!r}, 'mira')"
    )
    subprocess.run([sys.executable, "-c", code, str(queue.root)], check=True, env={"PYTHONPATH": str(SRC)})
    item = queue.record(ids[0])
    assert item.holder.reviewer == "mira" and item.holder_stale and item.state == "to-review"
    claim = queue.claim(ids[0], "jonas")
    assert claim.reviewer == "jonas"
    takeover = queue.log_entries(ids[0])[-1]
    assert takeover.event == "takeover" and takeover.get("previous_claim")["reviewer"] == "mira"
    assert "ended" in takeover.get("reason")


def test_an_idle_claim_is_taken_over_by_a_decision_and_logged(tmp_path):
    queue, ids = queue_with_runs(tmp_path)
    queue.claim(ids[0], "mira", bind_process=False)  # as 'tracevet claim' does: lapses only by idle time
    with pytest.raises(ClaimedByOther):
        queue.decide(ids[0], "accept", "x", "jonas")
    _age_claim(queue, ids[0], None)
    entry = queue.decide(ids[0], "accept", "Mira's connection dropped", "jonas")
    events = [e.event for e in queue.log_entries(ids[0])]
    assert events == ["add", "takeover", "decision"] and entry.reviewer == "jonas"
    assert "idle" in queue.log_entries(ids[0])[1].get("reason")
    assert queue.claims() == {}
