"""Reading a record at 80 columns, in 16 colours and without colour; flagged stretches (Textual pilot, real app)."""

from __future__ import annotations

import dataclasses

import app_helpers
from rich.color import ColorSystem
from app_helpers import open_from_worklist, screen_text, wait_for

from tracevet.app import palette
from tracevet.app.app import ReviewApp
from tracevet.assessment import Flag
from tracevet.workqueue import Queue

queue_template = app_helpers.queue_template  # the shared queue of four real-ECG records (fixtures)
queue_dir = app_helpers.queue_dir

BRAILLE = range(0x2801, 0x2900)


def _segments(app):
    for strip in app.screen._compositor.render_strips():
        yield from strip


def _standard(colour) -> int:
    """The colour a 16-colour terminal shows (Rich's own downgrade)."""
    return colour.downgrade(ColorSystem.STANDARD).number


def test_palette_keeps_severities_apart_from_traces_on_16_colour_terminals():
    # Rich maps RGB to the nearest of the 16 standard colours; 1 and 9 are red and bright red
    # (ECMA-48 SGR colour numbers, common practice).
    from rich.color import Color

    severity = {k: _standard(s.color) for k, s in palette.COLOUR.severity.items() if s.color is not None}
    traces = {k: _standard(Color.from_rgb(*rgb)) for k, rgb in palette.COLOUR.trace.items()}
    assert severity["fail"] in (1, 9)
    assert len(set(traces.values())) == 3
    assert not set(severity.values()) & set(traces.values())
    assert len(set(severity.values())) == 3


async def test_title_at_80_columns_keeps_id_severity_and_state_even_read_only(queue_dir):
    queue = Queue.open(queue_dir)
    queue.claim("dive-c", "a-colleague-with-a-rather-long-name", bind_process=False)
    app = ReviewApp(Queue.open(queue_dir), "mira", colour=True)
    async with app.run_test(size=(80, 24)) as pilot:
        await open_from_worklist(pilot, app, "dive-c")
        await pilot.pause(0.05)
        title = screen_text(app).split("\n")[0]
        assert "dive-c" in title and "FAIL" in title and "in-review" in title
        assert "READ-ONLY a-colleague" in title  # a short badge, the name cut
        # FAIL drawn in the most urgent colour, which no trace uses, on a 16-colour terminal
        segments = list(_segments(app))
        fail = [s.style.color for s in segments if "FAIL" in s.text and s.style and s.style.color]
        traces = {_standard(s.style.color) for s in segments
                  if s.style and s.style.color and any(ord(c) in BRAILLE for c in s.text)}
        assert fail and {_standard(c) for c in fail} <= {1, 9}
        assert traces and not traces & {1, 9}
        # decision keys are shown disabled while read-only
        assert app.screen.check_action("decide", ("accept",)) is None


async def test_no_color_marks_fail_with_reverse_bold_not_a_dim_grey(queue_dir, monkeypatch):
    monkeypatch.setenv("NO_COLOR", "1")
    app = ReviewApp(Queue.open(queue_dir), "mira")
    async with app.run_test(size=(80, 24)) as pilot:
        await open_from_worklist(pilot, app, "dive-c")
        await pilot.pause(0.05)
        fail = [s.style for s in _segments(app) if "FAIL" in s.text and s.style]
        assert fail and all(style.reverse and style.bold and not style.dim for style in fail)


def _add_run_with_stretches(queue: Queue, record_id: str) -> None:
    """A new run of ``record_id`` whose flags cover two stretches (5-8 s warn, 14-15 s fail)."""
    from tracevet.cleaning import DEFAULT_SETTINGS

    cleaned, assessment = queue.load_run(record_id)
    channel = assessment.channels[0].channel
    flags = [
        Flag("r-peak-change", "fail", "R peaks lower", 0.7, 0.84, "test", channel, where=((14.0, 15.0),)),
        Flag("qrs-widening", "warn", "QRS wider", 7.0, 6.0, "test", channel, where=((5.0, 8.0),)),
    ]
    queue.store_run(record_id, cleaned, dataclasses.replace(assessment, flags=flags), DEFAULT_SETTINGS)


async def test_flag_strip_marks_only_the_stretches_and_next_flag_zooms_to_them(queue_dir):
    queue = Queue.open(queue_dir)
    _add_run_with_stretches(queue, "dive-a")
    app = ReviewApp(Queue.open(queue_dir), "mira", colour=False)
    async with app.run_test(size=(80, 24)) as pilot:
        await open_from_worklist(pilot, app, "dive-a")
        screen = app.screen
        strip = screen.last_plots.flag_strip  # window 0-10 s: only 5-8 s is marked
        marked = [i for i, s in enumerate(strip) if s]
        columns = len(strip)
        assert set(strip) == {"", "warn"}
        assert abs(marked[0] / (columns - 1) * 10 - 5.0) < 0.3 and abs(marked[-1] / (columns - 1) * 10 - 8.0) < 0.3
        # the flags panel lists the stretches, one line per flag
        await wait_for(pilot, lambda: "14.0s-15.0s" in screen_text(app) and "5.0s-8.0s" in screen_text(app))
        await pilot.press("right_square_bracket")
        await wait_for(pilot, lambda: abs(screen.start_s - 4.5) < 1e-6)
        assert screen.span_s == 5.0  # the 3 s stretch with context, not the default 10 s
        await pilot.press("right_square_bracket")
        await wait_for(pilot, lambda: abs(screen.start_s - 13.5) < 1e-6)
        await wait_for(pilot, lambda: "fail" in screen.last_plots.flag_strip)
        # the averaged beat of that stretch only
        await pilot.press("B")
        await wait_for(pilot, lambda: "stretch 14.0s-15.0s avg" in screen_text(app))
        assert "J " in screen_text(app) and "ST" in screen_text(app)  # J point and ST reading point marked
        await pilot.press("d")  # details: message and source
        await wait_for(pilot, lambda: "R peaks lower" in screen_text(app))
