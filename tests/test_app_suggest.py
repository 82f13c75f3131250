"""The review app's suggestion: computed in the background, compared, taken with one key, never decided by itself."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from tracevet.app.app import ReviewApp
from tracevet.app.record_screen import RecordScreen
from tracevet.cleaning import DEFAULT_SETTINGS, CleaningSettings
from tracevet.recording import Recording, write_recording
from tracevet.workqueue import Queue

DATA = Path(__file__).resolve().parent / "data"


@pytest.fixture
def queue_dir(tmp_path) -> Path:
    """One real 20-s excerpt (MIT-BIH 208), cleaned with a 5 Hz baseline high-pass: fail flags."""
    # MIT-BIH 208 excerpt: (raw - 1024) / 200 gives millivolts (tests/data/README.md)
    raw = np.load(DATA / "mitdb-208-excerpt.npz")["ecg"].astype(np.float64)
    mv = (raw[:7200] - 1024.0) / 200.0
    path = tmp_path / "dive-c.npz"
    write_recording(Recording(mv[:, None], 360.0, ("MLII",), "mV", "ecg"), path)
    queue = Queue.init(tmp_path / "queue")
    (record_id,) = queue.add_files([path], added_by="setup")
    # a 5 Hz high-pass is far above the usual 0.05-0.67 Hz (common practice for ST fidelity)
    harsh = CleaningSettings.from_dict(dict(DEFAULT_SETTINGS.to_dict(), baseline="butterworth", baseline_cutoff_hz=5.0))
    queue.add_run(record_id, harsh)
    assert queue.record(record_id).worst_severity == "fail"
    return tmp_path / "queue"


async def wait_for(pilot, condition, timeout: float = 60.0) -> None:
    waited = 0.0
    while not condition():
        if waited > timeout:
            raise AssertionError("condition not reached in time")
        await pilot.pause(0.05)
        waited += 0.05


def screen_text(app) -> str:
    strips = app.screen._compositor.render_strips()
    return "\n".join("".join(segment.text for segment in strip) for strip in strips)


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
        assert [e for e in queue.log_entries() if e.event == "decision"] == []

        await pilot.press("a")  # the reviewer's own key press signs it off
        await wait_for(pilot, lambda: type(app.screen).__name__ == "NoteScreen")
        await pilot.press("o", "k", "enter")
        await wait_for(pilot, lambda: any(e.event == "decision" for e in queue.log_entries()))
        await pilot.press("ctrl+q")
    (entry,) = [e for e in Queue.open(queue_dir).log_entries() if e.event == "decision"]
    assert entry.run == "run-002" and entry.get("suggested") is True
    assert entry.get("candidate_set_digest") == suggested.candidate_set_digest
