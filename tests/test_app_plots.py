"""Character plots: size, shared time axis, scale labels, no colour when asked."""

from __future__ import annotations

import numpy as np
from rich.cells import cell_len
from rich.text import Text

from tracevet.app.plots import (
    CANVAS_OFFSET,
    Regions,
    TracePyramids,
    flag_strip,
    format_clock,
    format_value,
    render_beat_overlay,
    render_trace_plots,
)


def _spiky(n: int, fs: float):
    t = np.arange(n) / fs
    clean = np.zeros(n, dtype=np.float32)
    clean[(np.arange(n) % int(fs)) == 10] = 1.5  # one narrow "R peak" per second
    noise = 0.02 * np.sin(2 * np.pi * 50 * t).astype(np.float32)
    return clean + noise, clean


def test_three_plots_fill_exactly_the_requested_size():
    orig, clean = _spiky(250 * 120, 250.0)
    traces = TracePyramids.from_arrays(orig, clean, 250.0)
    out = render_trace_plots(traces, 0, 60, 80, (4, 4, 5), colour=False)
    assert [p.name for p in out.plots] == ["original", "cleaned", "removed"]
    for plot, rows in zip(out.plots, (4, 4, 5)):
        lines = plot.text.split("\n")
        assert len(lines) == rows
        assert all(cell_len(line) <= 80 for line in lines)
        assert "\x1b" not in plot.text  # colourless output carries no escape codes
    assert len(out.flag_strip) == out.canvas_columns == 80 - CANVAS_OFFSET


def test_peaks_are_drawn_at_full_height_in_a_long_window():
    orig, clean = _spiky(250 * 3600, 250.0)
    traces = TracePyramids.from_arrays(orig, clean, 250.0)
    out = render_trace_plots(traces, 0, 3600, 80, (4, 4, 5), colour=False)
    # original and cleaned share a y range that reaches the 1.5 peaks
    assert out.plots[0].y_high >= 1.5 and out.plots[1].y_high >= 1.5
    assert (out.plots[0].y_low, out.plots[0].y_high) == (out.plots[1].y_low, out.plots[1].y_high)
    # the removed component is the 50 Hz hum only: its own, much smaller, scale
    assert out.plots[2].y_high < 0.05
    assert out.removed_ratio < 0.05


def test_colour_output_is_rich_text_with_styles_and_no_escape_codes():
    orig, clean = _spiky(2500, 250.0)
    traces = TracePyramids.from_arrays(orig, clean, 250.0)
    out = render_trace_plots(traces, 0, 10, 60, (3, 3, 4), colour=True)
    text = Text("\n").join(out.plots[0].lines)
    assert "\x1b" not in text.plain
    assert text.spans  # colours are styles
    plain = render_trace_plots(traces, 0, 10, 60, (3, 3, 4), colour=False)
    assert not any(span.style for line in plain.plots[0].lines for span in line.spans if "color" in str(span.style))


def test_flag_strip_marks_the_worst_severity_per_column():
    orig, clean = _spiky(2500, 250.0)
    traces = TracePyramids.from_arrays(orig, clean, 250.0)
    regions = Regions.from_items([(2.0, 4.0, "warn"), (3.0, 3.5, "fail")])
    strip = render_trace_plots(traces, 0, 10, 80, (3, 3, 4), colour=False, regions=regions).flag_strip
    assert "fail" in strip and "warn" in strip
    assert strip[0] == "" and strip[-1] == ""
    assert strip.index("warn") < strip.index("fail")


def test_beat_overlay_and_difference():
    t = np.linspace(-0.25, 0.45, 176)
    original = np.exp(-((t / 0.02) ** 2))
    cleaned = 0.8 * original
    overlay, difference = render_beat_overlay(t, original, cleaned, 70, (6, 4), colour=False)
    assert len(overlay.text.split("\n")) == 6
    assert "ms" in difference.text.split("\n")[-1]
    assert abs(difference.y_high - 0.2) < 0.01


def test_clock_labels():
    assert format_clock(12.5, 10) == "12.5s"
    assert format_clock(3725, 3600) == "1:02:05"
    assert format_clock(100.0, 10) == "1:40.0"
    assert format_clock(0.0, 3600) == "0:00:00"  # hour-long views keep one format for every tick
    assert format_clock(80.0, 120) == "1:20"


def test_flag_strip_handles_a_day_of_flagged_beats_and_finds_the_next_one():
    starts = np.arange(0, 86400, 0.8)
    regions = Regions.from_items([(s, s + 0.1, "fail" if i % 50 == 0 else "warn") for i, s in enumerate(starts)])
    strip = flag_strip(regions, 0.0, 86400.0, 72)
    assert set(strip) == {"fail"}  # every column holds a fail at this zoom
    strip = flag_strip(regions, 0.0, 4.0, 72)
    assert strip[0] == "fail" and "warn" in strip and "" in strip
    assert regions.next_start(0.0) == 0.8
    assert regions.next_start(0.8, backwards=True) == 0.0
    assert regions.next_start(86399.9) is None


def test_tick_labels_fit_their_column_for_any_scale():
    orig, clean = _spiky(2500, 250.0)
    for scale in (1e-7, 1e-3, 1.0, 1e4, -1e6):
        traces = TracePyramids.from_arrays(orig * scale, clean * scale, 250.0)
        out = render_trace_plots(traces, 0, 10, 70, (3, 3, 4), colour=False)
        for plot in out.plots:
            for line in plot.text.split("\n"):
                assert cell_len(line) <= 70
                assert line[CANVAS_OFFSET - 1] == " "  # the label column never runs into the canvas
        assert len(format_value(-123456789.0)) <= CANVAS_OFFSET - 1
