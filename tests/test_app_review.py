"""The review app, driven by Textual's test pilot on a real queue folder.

Recordings are 20-second excerpts of the MIT-BIH record 208 shipped in
tests/data (real ECG), added to a queue made with the queue API and cleaned
with the default settings, so every screen shows real flags and templates.
"""

from __future__ import annotations

import hashlib
import time
from pathlib import Path

import app_helpers
import pytest
from app_helpers import (
    HOSTILE_FILE,
    decision_entries,
    open_from_worklist,
    record_ready,
    screen_text,
    type_text,
    wait_for,
)
from rich.cells import cell_len

from tracevet.app.app import ReviewApp
from tracevet.app.record_screen import RecordScreen
from tracevet.app.rerun_screen import RerunScreen
from tracevet.app.worklist_screen import WorklistScreen
from tracevet.workqueue import Queue

HOSTILE_NOTE = "fine \x1b[2J\x1b]0;pwned\x07 [bold]markup[/]"

queue_template = app_helpers.queue_template  # the shared queue of four real-ECG records (fixtures)
queue_dir = app_helpers.queue_dir


async def test_review_session_writes_exactly_the_decisions_to_the_log(queue_dir):
    queue = Queue.open(queue_dir)
    app = ReviewApp(queue, "mira", colour=False)
    async with app.run_test(size=(80, 24)) as pilot:
        await wait_for(pilot, lambda: isinstance(app.screen, WorklistScreen))
        # step through: open the first row, look, come back, open the second
        await pilot.press("enter")
        await wait_for(pilot, lambda: record_ready(app))
        first = app.screen.record_id
        await pilot.press("right", "plus", "b", "b", "escape")
        await wait_for(pilot, lambda: isinstance(app.screen, WorklistScreen))
        await pilot.press("down", "enter")
        await wait_for(pilot, lambda: record_ready(app) and app.screen.record_id != first)
        await pilot.press("escape")

        # accept one with a note (the next record to review)
        await pilot.press("n")
        await wait_for(pilot, lambda: record_ready(app))
        accepted = app.screen.record_id
        accepted_run = app.screen.shown_run_id
        await pilot.press("a")
        await type_text(pilot, "ok")
        await pilot.press("enter")
        await wait_for(pilot, lambda: record_ready(app) and app.screen.record_id != accepted)
        assert len(decision_entries(queue)) == 1

        # reject: refused without a note, written with one
        rejected = app.screen.record_id
        rejected_run = app.screen.shown_run_id
        await pilot.press("x")
        await wait_for(pilot, lambda: type(app.screen).__name__ == "NoteScreen")
        await pilot.press("enter")
        await wait_for(pilot, lambda: "refused" in screen_text(app))
        assert type(app.screen).__name__ == "NoteScreen"  # still asking
        assert len(decision_entries(queue)) == 1  # nothing written
        await type_text(pilot, "drift")
        await pilot.press("enter")
        await wait_for(pilot, lambda: record_ready(app) and app.screen.record_id != rejected)

        # re-run with another threshold rule, then sign off the new run
        rerun = app.screen.record_id
        old_run = app.screen.shown_run_id
        await pilot.press("r")
        await wait_for(pilot, lambda: isinstance(app.screen, RerunScreen))
        await pilot.press("tab", "tab", "tab", "tab")  # transform -> wavelet -> extension -> level -> rule
        assert app.screen.focused.id == "set-rule"
        await pilot.press("enter", "s", "u", "r", "e", "enter")  # open the list, type to find "sure"
        assert app.screen.query_one("#set-rule").value == "sure"
        await pilot.press("ctrl+r")
        await wait_for(pilot, lambda: record_ready(app) and app.screen.shown_run_id not in (None, old_run))
        new_run = app.screen.shown_run_id
        assert app.screen.panel == "compare"  # shown beside the previous run
        assert queue.runs(rerun)[-1].settings["rule"] == "sure"
        await pilot.press("a")
        await type_text(pilot, "sure ok")
        await pilot.press("enter")
        await wait_for(pilot, lambda: len(decision_entries(queue)) == 3)
        await pilot.press("ctrl+q")

    entries = decision_entries(Queue.open(queue_dir))
    got = [(e.record, e.decision, e.run, e.note, e.reviewer) for e in entries]
    assert got == [
        (accepted, "accept", accepted_run, "ok", "mira"),
        (rejected, "reject", rejected_run, "drift", "mira"),
        (rerun, "accept", new_run, "sure ok", "mira"),
    ]
    assert new_run != old_run
    for entry in entries:
        meta = queue.record_meta(entry.record)
        original = hashlib.sha256((queue_dir / "records" / entry.record / meta["original"]).read_bytes()).hexdigest()
        assert entry.get("original_sha256") == original
        info = next(r for r in queue.runs(entry.record) if r.run_id == entry.run)
        assert entry.get("cleaned_sha256") == info.files[info.cleaned_file]
        assert entry.get("settings_digest") == info.settings_digest
    assert not queue.claims()  # nothing left claimed


async def test_second_reviewer_sees_the_first_ones_claim_read_only(queue_dir):
    first = ReviewApp(Queue.open(queue_dir), "mira", colour=False)
    second = ReviewApp(Queue.open(queue_dir), "jonas", colour=False)
    async with first.run_test(size=(80, 24)) as pilot_a:
        await pilot_a.press("enter")
        await wait_for(pilot_a, lambda: record_ready(first))
        held = first.screen.record_id
        async with second.run_test(size=(80, 24)) as pilot_b:
            await wait_for(pilot_b, lambda: isinstance(second.screen, WorklistScreen))
            assert "mira" in screen_text(second)  # holder column
            await pilot_b.press("enter")
            await wait_for(pilot_b, lambda: record_ready(second))
            assert second.screen.record_id == held
            assert second.screen.read_only
            assert "READ-ONLY mira" in screen_text(second)
            await pilot_b.press("a")  # refused: no prompt, nothing written
            await pilot_b.pause(0.1)
            assert isinstance(second.screen, RecordScreen)
            await pilot_b.press("escape")
            await pilot_b.pause(0.1)
        assert Queue.open(queue_dir).claims()[held].reviewer == "mira"  # jonas leaving did not free it
        await pilot_a.press("escape")
        await pilot_a.pause(0.1)
    assert not Queue.open(queue_dir).claims()
    assert not [e for e in Queue.open(queue_dir).log_entries() if e.event == "decision"]


def _assert_inside(app, selectors, width, height):
    for selector in selectors:
        widget = app.screen.query_one(selector)
        region = widget.region
        assert widget.display and region.width > 0 and region.height > 0, selector
        assert region.x >= 0 and region.y >= 0, selector
        assert region.right <= width and region.bottom <= height, (selector, region)


@pytest.mark.parametrize("size", [(80, 24), (100, 30)])
async def test_every_panel_fits_the_terminal(queue_dir, size):
    width, height = size
    app = ReviewApp(Queue.open(queue_dir), "mira", colour=False)
    async with app.run_test(size=size) as pilot:
        await wait_for(pilot, lambda: isinstance(app.screen, WorklistScreen))
        await pilot.pause(0.1)
        _assert_inside(app, ["#worklist-status", "#worklist-table", "#worklist-detail", "Footer"], width, height)
        await pilot.press("n")
        await wait_for(pilot, lambda: record_ready(app))
        await pilot.pause(0.1)
        panels = [
            "#record-title",
            "#window-line",
            "#plot-original",
            "#plot-cleaned",
            "#plot-removed",
            "#flag-strip",
            "#panel-tabs",
            "#panel",
            "Footer",
        ]
        _assert_inside(app, panels, width, height)
        # panels are stacked without overlap, in this order
        tops = [app.screen.query_one(s).region for s in panels]
        for upper, lower in zip(tops, tops[1:]):
            assert upper.bottom <= lower.y
        # each plot has at least 3 rows and its drawing fits its width
        for name in ("original", "cleaned", "removed"):
            widget = app.screen.query_one(f"#plot-{name}")
            assert widget.region.height >= 3
            lines = app.screen.last_plots.plots[("original", "cleaned", "removed").index(name)].text.split("\n")
            assert len(lines) == widget.region.height
            assert max(cell_len(line) for line in lines) <= widget.region.width
        text = screen_text(app)
        for label in ("orig", "clean", "removed", "flags", "panel", "removed "):
            assert label in text
        assert all(cell_len(line) <= width for line in text.split("\n"))
        await pilot.press("question_mark")
        await wait_for(pilot, lambda: type(app.screen).__name__ == "HelpScreen")
        await pilot.pause(0.1)
        _assert_inside(app, ["#help-box"], width, height)
        assert "Keys: record screen" in screen_text(app)


async def test_hostile_names_and_notes_are_shown_inert(queue_dir):
    queue = Queue.open(queue_dir)
    hostile_id = next(r.id for r in queue.records() if r.source_name == HOSTILE_FILE)
    app = ReviewApp(queue, "mira", colour=False)
    async with app.run_test(size=(100, 30)) as pilot:
        await open_from_worklist(pilot, app, hostile_id)
        text = screen_text(app)
        assert "ch\\x1b[2J[blink]1[/blink]" in text  # channel name, escaped and unstyled
        await pilot.press("i", "i")  # the run panel names the file the record came from
        await wait_for(pilot, lambda: "from evil \\x1b[31m[bold red]x.npz" in screen_text(app))
        await pilot.press("a")
        await wait_for(pilot, lambda: type(app.screen).__name__ == "NoteScreen")
        note_box = app.screen.query_one("#note-input")
        note_box.value = HOSTILE_NOTE  # typed text can hold anything; set it whole
        await pilot.press("enter")
        await wait_for(pilot, lambda: len(decision_entries(queue)) == 1)
        await pilot.press("escape")
        await wait_for(pilot, lambda: isinstance(app.screen, WorklistScreen))
        table = app.screen.query_one("#worklist-table")
        table.move_cursor(row=[r.id for r in app.screen.visible_records()].index(hostile_id))
        await wait_for(pilot, lambda: "pwned" in screen_text(app))
        text = screen_text(app)
        assert "evil \\x1b[31m[bold red]x.npz" in text  # file name shown as typed, ESC made visible
        assert "\\x1b[2J\\x1b]0;pwned\\x07 [bold]markup[/]" in text  # note: escapes visible, markup literal
        strips = app.screen._compositor.render_strips()
        for strip in strips:
            for segment in strip:
                assert "\x1b" not in segment.text and "\x07" not in segment.text
                if "markup" in segment.text:
                    assert not (segment.style and segment.style.bold)  # [bold] was not interpreted
    assert decision_entries(queue)[0].note == HOSTILE_NOTE  # stored exactly as given


def test_review_command_refuses_a_folder_that_is_not_a_queue(run_cli, tmp_path):
    code, out, err = run_cli("review", tmp_path / "missing")
    assert code == 2
    assert err.count("\n") == 1 and "missing" in err and "Traceback" not in err


def test_review_command_needs_a_terminal(run_cli, queue_dir):
    code, out, err = run_cli("review", queue_dir, "--reviewer", "mira")
    assert code == 2
    assert "interactive terminal" in err and err.count("\n") == 1


def test_default_queue_is_taken_from_the_environment(monkeypatch, tmp_path):
    from tracevet.cli import review_cmd

    monkeypatch.setenv("TRACEVET_QUEUE", str(tmp_path / "elsewhere"))
    assert review_cmd.default_queue_path() == tmp_path / "elsewhere"
    monkeypatch.delenv("TRACEVET_QUEUE")
    checkout_queue = Path(__file__).resolve().parents[1] / "queue"
    expected = checkout_queue if checkout_queue.is_dir() else None
    assert review_cmd.default_queue_path() == expected


async def test_rerun_can_be_cancelled_and_leaves_nothing_behind(queue_dir):
    queue = Queue.open(queue_dir)
    real_add_run = queue.add_run

    def slow_add_run(record_id, settings=None, progress=None, reviewer=None):
        def slow(fraction):
            time.sleep(0.3)  # long enough for the reviewer's esc to arrive first
            progress(fraction)

        return real_add_run(record_id, settings, progress=slow, reviewer=reviewer)

    queue.add_run = slow_add_run
    app = ReviewApp(queue, "mira", colour=False)
    async with app.run_test(size=(80, 24)) as pilot:
        await pilot.press("n")
        await wait_for(pilot, lambda: record_ready(app))
        record_id = app.screen.record_id
        runs_before = [r.run_id for r in queue.runs(record_id)]
        await pilot.press("r")
        await wait_for(pilot, lambda: isinstance(app.screen, RerunScreen))
        assert not app.screen.query_one("#rerun-progress").display  # no "0%" before anything runs
        await pilot.press("ctrl+r")  # the same settings as the shown run: refused, with a word
        await wait_for(pilot, lambda: "change a setting first" in screen_text(app))
        assert not app.screen.running and [r.run_id for r in queue.runs(record_id)] == runs_before
        app.screen.query_one("#set-rule").value = "sure"
        await pilot.pause(0.05)
        assert "* rule" in screen_text(app)  # the changed field is marked
        await pilot.press("ctrl+r")
        await wait_for(pilot, lambda: app.screen.running)
        await pilot.press("escape")
        await wait_for(pilot, lambda: not app.screen.running)
        assert "cancelled: no run was added" in screen_text(app)
        assert [r.run_id for r in queue.runs(record_id)] == runs_before
        await pilot.press("escape")  # close the form
        await wait_for(pilot, lambda: isinstance(app.screen, RecordScreen))


async def test_help_lists_every_key_of_the_screen_and_the_caution(queue_dir):
    from tracevet.app.help_screen import binding_lines

    app = ReviewApp(Queue.open(queue_dir), "mira", colour=False)
    async with app.run_test(size=(110, 60)) as pilot:
        await wait_for(pilot, lambda: isinstance(app.screen, WorklistScreen))
        for opener in ([], ["n"]):
            await pilot.press(*opener)
            if opener:
                await wait_for(pilot, lambda: record_ready(app))
            below = app.screen
            await pilot.press("f1")
            await wait_for(pilot, lambda: type(app.screen).__name__ == "HelpScreen")
            await pilot.pause(0.1)
            text = " ".join(screen_text(app).replace("┃", " ").split())
            for keys, what in binding_lines(below) + binding_lines(app):
                assert f"{keys} {' '.join(what.split())}" in text, (keys, what)
            assert "not a medical device and does not diagnose" in text
            await pilot.press("escape")
            await wait_for(pilot, lambda: app.screen is below)


async def test_no_color_keeps_severity_words_and_draws_plain_plots(queue_dir, monkeypatch):
    monkeypatch.setenv("NO_COLOR", "1")
    app = ReviewApp(Queue.open(queue_dir), "mira")
    assert app.colour is False
    async with app.run_test(size=(80, 24)) as pilot:
        await pilot.press("n")
        await wait_for(pilot, lambda: record_ready(app))
        assert all("\x1b" not in plot.text for plot in app.screen.last_plots.plots)
        from tracevet.app import queue_view
        from tracevet.app.display import severity_text

        run = app.screen.shown_run
        word = severity_text(queue_view.worst_severity(run.assessment), len(queue_view.flag_list(run.assessment)))
        assert word.plain in screen_text(app)  # symbol and word, not colour alone


async def test_a_damaged_record_is_refused_and_the_app_stays_up(queue_dir):
    queue = Queue.open(queue_dir)
    record_id = queue.records()[0].id
    meta = queue.record_meta(record_id)
    (queue_dir / "records" / record_id / meta["original"]).write_bytes(b"not a recording")
    app = ReviewApp(queue, "mira", colour=False)
    async with app.run_test(size=(80, 24)) as pilot:
        await wait_for(pilot, lambda: isinstance(app.screen, WorklistScreen))
        app.screen.open_record(record_id)
        await wait_for(pilot, lambda: any(f"cannot open {record_id}" in str(n.message) for n in app._notifications))
        await wait_for(pilot, lambda: isinstance(app.screen, WorklistScreen))
        assert not Queue.open(queue_dir).claims()  # the claim was given back
        await pilot.press("down")  # still answering keys


async def test_a_lapsed_claim_taken_over_turns_the_open_record_read_only(queue_dir):
    import json

    app = ReviewApp(Queue.open(queue_dir), "mira", colour=False)
    async with app.run_test(size=(80, 24)) as pilot:
        await pilot.press("n")
        await wait_for(pilot, lambda: record_ready(app))
        record_id = app.screen.record_id
        claim_file = queue_dir / "claims" / f"{record_id}.json"
        claim = json.loads(claim_file.read_text())
        claim["last_activity"] = "2000-01-01T00:00:00Z"  # mira went idle long ago
        claim_file.write_text(json.dumps(claim))
        Queue.open(queue_dir).claim(record_id, "jonas", bind_process=False)  # the take-over is logged
        app.touch_held_claim()
        await wait_for(pilot, lambda: "READ-ONLY jonas" in screen_text(app))
        await pilot.press("a")
        await pilot.pause(0.1)
        assert isinstance(app.screen, RecordScreen)  # no note prompt: nothing can be decided
    events = [e.event for e in Queue.open(queue_dir).log_entries()]
    assert "takeover" in events and "decision" not in events


async def test_accepting_a_run_with_a_fail_flag_needs_a_note(queue_dir):
    queue = Queue.open(queue_dir)
    failing = [r.id for r in queue.records() if r.worst_severity == "fail"]
    app = ReviewApp(queue, "mira", colour=False)
    async with app.run_test(size=(80, 24)) as pilot:
        await open_from_worklist(pilot, app, failing[0])
        await pilot.press("a")
        await wait_for(pilot, lambda: type(app.screen).__name__ == "NoteScreen")
        assert "FAIL flag" in screen_text(app)  # the prompt says why a note is needed
        await pilot.press("enter")
        await wait_for(pilot, lambda: "refused" in screen_text(app))
        assert not decision_entries(queue)
        await pilot.press("escape")  # cancel: nothing written, back on the record
        await wait_for(pilot, lambda: isinstance(app.screen, RecordScreen))
    assert not decision_entries(queue)
