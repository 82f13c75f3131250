"""The review app's suggestion: computed in the background, compared, taken with one key, never decided by itself."""

from __future__ import annotations

import functools
from pathlib import Path

import app_helpers
import pytest
from app_helpers import screen_text

from tracevet.app.app import ReviewApp
from tracevet.app.record_screen import RecordScreen
from tracevet.workqueue import Queue

# The search for a suggestion takes a while on a shared machine: a longer wait than the other app tests.
wait_for = functools.partial(app_helpers.wait_for, timeout=60.0)


@pytest.fixture
def queue_dir(tmp_path) -> Path:
    """One real 20-s excerpt (MIT-BIH 208), cleaned with a 5 Hz baseline high-pass: fail flags."""
    path = app_helpers.write_excerpt(tmp_path / "dive-c.npz")
    queue = Queue.init(tmp_path / "queue")
    (record_id,) = queue.add_files([path], added_by="setup")
    queue.add_run(record_id, app_helpers.harsh_settings())
    assert queue.record(record_id).worst_severity == "fail"
    return tmp_path / "queue"


def suggestion_status(app) -> str | None:
    state = getattr(app.screen, "suggestion_state", None)
    return None if state is None else state.status


async def test_suggestion_is_computed_in_the_background_and_taken_with_one_key(queue_dir):
    queue = Queue.open(queue_dir)
    app = ReviewApp(queue, "mira", colour=False)
    async with app.run_test(size=(100, 40)) as pilot:
        app.open_record("dive-c")
        await wait_for(pilot, lambda: isinstance(app.screen, RecordScreen) and app.screen.shown_run is not None)
        screen = app.screen
        assert suggestion_status(app) in ("computing", "ready")
        # keys keep working while it computes
        before = screen.start_s
        await pilot.press("right")
        await wait_for(pilot, lambda: screen.start_s != before, timeout=5)
        await wait_for(pilot, lambda: suggestion_status(app) == "ready")
        assert "suggestion ready" in screen_text(app)
        suggested = screen.suggestion_state.result
        assert suggested.best.n_fail == 0

        await pilot.press("U")  # current and suggested side by side
        text = screen_text(app)
        assert "current run-001" in text and "suggested" in text and "noise removed" in text

        # the re-run form offers it: ctrl+u fills the form with the suggested settings
        await pilot.press("r")
        await wait_for(pilot, lambda: type(app.screen).__name__ == "SuggestedRerunScreen")
        await pilot.press("ctrl+u")
        for name, value in suggested.best.settings.to_dict().items():
            assert str(app.screen.query_one(f"#set-{name}").value) == str(value)
        await pilot.press("escape")
        await wait_for(pilot, lambda: isinstance(app.screen, RecordScreen))

        await pilot.press("u")  # take it: a new run, marked suggested, shown; nothing decided
        await wait_for(pilot, lambda: len(queue.runs("dive-c")) == 2 and screen.shown_run_id == "run-002")
        run = queue.runs("dive-c")[-1]
        assert run.suggestion is not None and run.suggestion["candidate_set_digest"] == suggested.candidate_set_digest
        assert run.settings_digest == suggested.report.settings.digest() and run.made_by == "mira"
        assert app_helpers.decision_entries(queue) == []

        await pilot.press("a")  # the reviewer's own key press signs it off
        await wait_for(pilot, lambda: type(app.screen).__name__ == "NoteScreen")
        await pilot.press("o", "k", "enter")
        await wait_for(pilot, lambda: any(e.event == "decision" for e in queue.log_entries()))
        await pilot.press("ctrl+q")
    (entry,) = app_helpers.decision_entries(Queue.open(queue_dir))
    assert entry.run == "run-002" and entry.get("suggested") is True
    assert entry.get("candidate_set_digest") == suggested.candidate_set_digest
