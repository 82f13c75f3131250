"""Helpers for the review-app tests: real-ECG queues and driving the app with Textual's test pilot.

Recordings are 20-second excerpts of the MIT-BIH record 208 shipped in
tests/data (real ECG), added to a queue made with the queue API and cleaned,
so every screen shows real flags and templates. A test module takes the
shared queue fixtures by assignment (``queue_dir = app_helpers.queue_dir``).
"""

from __future__ import annotations

import shutil
from pathlib import Path

import numpy as np
import pytest

from mitdb import excerpt_mv
from tracevet.app.record_screen import RecordScreen
from tracevet.cleaning import DEFAULT_SETTINGS, CleaningSettings
from tracevet.recording import Recording, write_recording
from tracevet.workqueue import Queue

FS = 360.0  # MIT-BIH sampling rate (tests/data/README.md)
EXCERPT = 7200  # 20 s at 360 Hz
HOSTILE_FILE = "evil \x1b[31m[bold red]x.npz"
HOSTILE_CHANNEL = "ch\x1b[2J[blink]1[/blink]"


def mitdb_mv() -> np.ndarray:
    """The shipped MIT-BIH 208 excerpt in millivolts (tests/mitdb.py)."""
    return excerpt_mv()


def harsh_settings() -> CleaningSettings:
    """The defaults with a 5 Hz baseline high-pass: a run with fail flags, like a damaging cleaning.

    5 Hz is far above the usual 0.05-0.67 Hz baseline cut-off (common practice for ST-segment fidelity).
    """
    return CleaningSettings.from_dict(dict(DEFAULT_SETTINGS.to_dict(), baseline="butterworth", baseline_cutoff_hz=5.0))


def write_excerpt(path: Path, index: int = 0, channel: str = "MLII") -> Path:
    """Write the ``index``-th 20-s excerpt (one channel, mV) to ``path``."""
    excerpt = mitdb_mv()[index * EXCERPT : (index + 1) * EXCERPT]
    write_recording(Recording(excerpt[:, None], FS, (channel,), "mV", "ecg"), path)
    return path


@pytest.fixture(scope="module")
def queue_template(tmp_path_factory) -> Path:
    """A queue with four cleaned records (one with a hostile file and channel name), built once."""
    root = tmp_path_factory.mktemp("review")
    queue = Queue.init(root / "queue")
    files = []
    for index, name in enumerate(("dive-a.npz", "dive-b.npz", "dive-c.npz", HOSTILE_FILE)):
        channel = HOSTILE_CHANNEL if name == HOSTILE_FILE else "MLII"
        files.append(write_excerpt(root / name, index, channel))
    # dive-c is cleaned with the harsh settings, so it carries fail flags like a damaging run would.
    harsh = harsh_settings()
    for record_id in queue.add_files(files, added_by="setup"):
        queue.add_run(record_id, harsh if record_id == "dive-c" else DEFAULT_SETTINGS)
    assert queue.record("dive-c").worst_severity == "fail"
    return root / "queue"


@pytest.fixture
def queue_dir(queue_template, tmp_path) -> Path:
    """A fresh copy of the template queue for one test."""
    target = tmp_path / "queue"
    shutil.copytree(queue_template, target)
    return target


async def wait_for(pilot, condition, timeout: float = 15.0) -> None:
    """Let the app run until ``condition()`` holds (workers load records in threads)."""
    waited = 0.0
    while not condition():
        if waited > timeout:
            raise AssertionError("condition not reached in time")
        await pilot.pause(0.05)
        waited += 0.05


def record_ready(app) -> bool:
    """The record screen is on top and shows a run."""
    screen = app.screen
    return isinstance(screen, RecordScreen) and screen.shown_run is not None and screen.last_plots is not None


async def open_from_worklist(pilot, app, record_id: str) -> None:
    """Wait for the worklist, open ``record_id`` from it and wait until its record screen shows a run."""
    from tracevet.app.worklist_screen import WorklistScreen

    await wait_for(pilot, lambda: isinstance(app.screen, WorklistScreen))
    app.screen.open_record(record_id)
    await wait_for(pilot, lambda: record_ready(app))


def screen_text(app) -> str:
    """What the terminal would show, as plain text (one line per row)."""
    strips = app.screen._compositor.render_strips()
    return "\n".join("".join(segment.text for segment in strip) for strip in strips)


async def type_text(pilot, text: str) -> None:
    """Type printable text key by key."""
    names = {" ": "space", ",": "comma", ".": "full_stop", "-": "minus"}
    for ch in text:
        await pilot.press(names.get(ch, ch))


def decision_entries(queue: Queue) -> list:
    """The decision entries of the queue's log."""
    return [e for e in queue.log_entries() if e.event == "decision"]
