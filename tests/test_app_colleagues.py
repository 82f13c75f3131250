"""Two reviewers on one queue, in the real app (Textual pilot): overrides and held records."""

from __future__ import annotations

import app_helpers
from app_helpers import open_from_worklist, record_ready, screen_text, type_text, wait_for

from tracevet.app import record_screen
from tracevet.app.app import ReviewApp
from tracevet.app.record_screen import RecordScreen
from tracevet.app.worklist_screen import WorklistScreen
from tracevet.workqueue import Queue

queue_template = app_helpers.queue_template  # the shared queue of four real-ECG records (fixtures)
queue_dir = app_helpers.queue_dir


def _decisions(queue: Queue, record_id: str) -> list:
    return [e for e in queue.log_entries(record_id) if e.event == "decision"]


async def test_overriding_a_colleagues_decision_asks_first_and_logs_the_override(queue_dir):
    queue = Queue.open(queue_dir)
    record_id = "dive-a"
    first = queue.decide(record_id, "reject", "electrode off at 12 s", "mira")
    app = ReviewApp(Queue.open(queue_dir), "jonas", colour=False)
    async with app.run_test(size=(80, 24)) as pilot:
        await wait_for(pilot, lambda: isinstance(app.screen, WorklistScreen))
        assert "reject" in screen_text(app)  # the worklist shows the last decision
        app.screen.open_record(record_id)
        await wait_for(pilot, lambda: record_ready(app))
        text = screen_text(app)
        assert "rejected by mira" in text and "electrode off" in text  # the record screen shows it
        # answering no writes nothing
        await pilot.press("a")
        await wait_for(pilot, lambda: type(app.screen).__name__ == "ConfirmScreen")
        text = screen_text(app)
        assert "rejected" in text and "mira" in text and "electrode off at 12 s" in text
        assert f"entry {first.seq}" in text
        await pilot.press("n")
        await wait_for(pilot, lambda: isinstance(app.screen, RecordScreen))
        assert len(_decisions(queue, record_id)) == 1
        # yes, then the note prompt (showing the earlier decision), then the entry names the overridden one
        await pilot.press("a")
        await wait_for(pilot, lambda: type(app.screen).__name__ == "ConfirmScreen")
        await pilot.press("y")
        await wait_for(pilot, lambda: type(app.screen).__name__ == "NoteScreen")
        assert "rejected by mira" in screen_text(app)
        await type_text(pilot, "electrode fine")
        await pilot.press("enter")
        await wait_for(pilot, lambda: len(_decisions(queue, record_id)) == 2)
    entry = _decisions(queue, record_id)[-1]
    assert entry.decision == "accept" and entry.reviewer == "jonas"
    assert entry.get("overrides")["seq"] == first.seq and entry.get("overrides")["hash"] == first.hash


async def test_a_held_record_unlocks_when_its_holder_decides(queue_dir, monkeypatch):
    monkeypatch.setattr(record_screen, "FOLLOW_SECONDS", 0.1)
    queue = Queue.open(queue_dir)
    record_id = "dive-b"
    queue.claim(record_id, "mira", bind_process=False)
    app = ReviewApp(Queue.open(queue_dir), "jonas", colour=False)
    async with app.run_test(size=(80, 24)) as pilot:
        await open_from_worklist(pilot, app, record_id)
        assert app.screen.read_only and "READ-ONLY mira" in screen_text(app)
        assert app.screen.check_action("decide", ("accept",)) is None  # shown disabled
        queue.decide(record_id, "reject", "noise", "mira")  # mira decides from the command line
        await wait_for(pilot, lambda: not app.screen.read_only)
        assert any("mira rejected this record" in str(n.message) for n in app._notifications)
        text = screen_text(app)
        assert "READ-ONLY" not in text and "rejected by mira" in text
        assert app.held_claim == record_id and queue.holder(record_id).reviewer == "jonas"
        assert app.screen.check_action("decide", ("accept",)) is True


async def test_a_held_record_unlocks_when_its_holder_releases(queue_dir, monkeypatch):
    monkeypatch.setattr(record_screen, "FOLLOW_SECONDS", 0.1)
    queue = Queue.open(queue_dir)
    queue.claim("dive-b", "mira", bind_process=False)
    app = ReviewApp(Queue.open(queue_dir), "jonas", colour=False)
    async with app.run_test(size=(80, 24)) as pilot:
        await wait_for(pilot, lambda: isinstance(app.screen, WorklistScreen))
        app.screen.open_record("dive-b")
        await wait_for(pilot, lambda: record_ready(app) and app.screen.read_only)
        queue.release("dive-b", "mira")
        await wait_for(pilot, lambda: not app.screen.read_only)
        assert any("mira let go" in str(n.message) for n in app._notifications)
