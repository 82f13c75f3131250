"""The record screen: three traces on one time axis, averaged beats, flags, decisions."""

from __future__ import annotations

from typing import TYPE_CHECKING

from rich.text import Text
from textual import work
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Vertical, VerticalScroll
from textual.reactive import var
from textual.screen import Screen
from textual.strip import Strip
from textual.widget import Widget
from textual.widgets import Footer, Static

from tracevet.app import info_text, queue_view
from tracevet.app.display import SEVERITY_STYLE, SEVERITY_SYMBOL, format_duration, inert_text, severity_text
from tracevet.app.plots import (
    CANVAS_OFFSET,
    TracePlots,
    TracePyramids,
    format_stretch,
    format_value,
    format_window,
    render_beat_overlay,
    render_trace_plots,
)
from tracevet.app.record_decisions import DECISION_ACTIONS, DecisionActions
from tracevet.app.suggestion_view import SUGGESTION_BINDINGS, SUGGESTION_KEY_HELP, SuggestionActions
from tracevet.errors import TracevetError
from tracevet.recording import Recording
from tracevet.workqueue import Claim, ClaimedByOther, RecordSummary, RunInfo

if TYPE_CHECKING:
    from tracevet.app.app import ReviewApp

DEFAULT_SPAN_S = 10.0
MIN_SPAN_S = 0.5
# How often a read-only record asks the queue whether its holder has let go.
FOLLOW_SECONDS = 2.0
PLOT_NAMES = ("original", "cleaned", "removed")
PLOT_LABELS = {
    "original": "orig",
    "cleaned": "clean",
    "removed": "removed",
    "beat": "beats",
    "beat difference": "o - c",
}
READ_ONLY_NAME_CHARS = 12
STRETCH_MIN_SPAN_S = 5.0
STRETCH_MAX_SPAN_S = 20.0


class TextBlock(Widget):
    """A fixed-size block of text whose new content is painted without a new layout.

    ``Static.update`` lays the whole screen out again and re-wraps its text;
    the plots, the flag strip and the one-line headers change on every key
    but never change size by themselves, so they only repaint, one
    ready-made strip of segments per row (Textual's line API): part of the
    redraw speed.
    """

    DEFAULT_CSS = "TextBlock { height: 1; width: 100%; }"

    def __init__(self, id: str, classes: str | None = None) -> None:  # noqa: A002 - Textual's name
        super().__init__(id=id, classes=classes)
        self._text = Text("")
        self._strips: list[Strip] = []

    @property
    def text(self) -> Text:
        """The text shown."""
        return self._text

    def update(self, text: Text | str = "") -> None:
        """Show ``text`` (repaint only): each line becomes one strip of segments, cut at the width."""
        self._text = text if isinstance(text, Text) else Text(str(text))
        console = self.app.console
        self._strips = [
            Strip(list(line.render(console)), line.cell_len) for line in self._text.split("\n", allow_blank=True)
        ]
        self.refresh()

    def render_line(self, y: int) -> Strip:
        """Row ``y``: its strip, cut or padded to the widget's width, in the widget's own style."""
        width = self.size.width
        if y >= len(self._strips):
            return Strip.blank(width, self.rich_style)
        return self._strips[y].crop_extend(0, width, self.rich_style).apply_style(self.rich_style)

    def set_height(self, rows: int) -> None:
        """Change the height (this one needs a layout), only when it differs."""
        if self.styles.height is None or self.styles.height.value != rows:
            self.styles.height = rows

    def show(self, shown: bool) -> None:
        """Show or hide, only when that changes."""
        if self.display != shown:
            self.display = shown


def stretch_lead_s(span_s: float) -> float:
    """How much of the window precedes a flagged stretch shown by ``]`` (context before the damage)."""
    return min(1.0, 0.1 * span_s)


def stretch_window(start_s: float, end_s: float, duration_s: float) -> tuple[float, float]:
    """Window (span, start) showing a flagged stretch so that its beats can be told apart.

    The span covers the stretch and a little context, between 5 s and 20 s
    (at 80 columns, 20 s still draws each beat of a normal heart rate several
    dots wide); a longer stretch is shown from its beginning.
    """
    span = min(max(end_s - start_s + 2.0, STRETCH_MIN_SPAN_S), STRETCH_MAX_SPAN_S, duration_s)
    return span, start_s - stretch_lead_s(span)


class RecordScreen(DecisionActions, SuggestionActions, Screen):
    """One record: look, compare runs, decide."""

    if TYPE_CHECKING:
        app: ReviewApp  # the app these screens run in, with its queue and reviewer

    HELP_TITLE = "record screen"
    BINDINGS = [
        Binding("left,h", "pan(-0.5)", "Pan", key_display="←"),
        Binding("right,l", "pan(0.5)", "Pan right", show=False),
        Binding("plus,equals_sign", "zoom(0.5)", "Zoom", key_display="+"),
        Binding("minus", "zoom(2)", "Zoom out", show=False),
        Binding("home,g", "jump_start", "Start", show=False),
        Binding("end,G", "jump_end", "End", show=False),
        Binding("right_square_bracket,n", "next_flag", "Flag", key_display="]"),
        Binding("left_square_bracket,p", "previous_flag", "Previous flag", show=False),
        Binding("c", "next_channel", "Channel", show=False),
        Binding("b", "toggle_beats", "Beat"),
        Binding("B", "stretch_beats", "Stretch beat", show=False),
        Binding("d", "toggle_details", "Details", show=False),
        Binding("i", "next_panel", "Panel", show=False),
        Binding("v", "next_run", "Run", show=False),
        Binding("pageup", "scroll_panel(-1)", "Panel up", show=False),
        Binding("pagedown", "scroll_panel(1)", "Panel down", show=False),
        Binding("a", "decide('accept')", "Accept"),
        Binding("x", "decide('reject')", "Reject"),
        Binding("s", "decide('rerun')", "Send back", show=False),
        Binding("S", "send_back_with_settings", "Send back with settings", show=False),
        Binding("r", "rerun", "Re-run"),
        Binding("escape,q", "back", "Back", key_display="esc"),
        *SUGGESTION_BINDINGS,
    ]
    KEY_HELP = {
        **SUGGESTION_KEY_HELP,
        "pan(-0.5)": "pan back by half a window",
        "pan(0.5)": "pan forward by half a window",
        "zoom(0.5)": "zoom in (half the window)",
        "zoom(2)": "zoom out (twice the window)",
        "jump_start": "jump to the start of the record",
        "jump_end": "jump to the end of the record",
        "next_flag": "next flagged stretch, zoomed so the damage shows",
        "previous_flag": "previous flagged stretch, zoomed so the damage shows",
        "next_channel": "next channel",
        "toggle_beats": "averaged beat of the whole record: original and cleaned overlaid, their difference, J and ST",
        "stretch_beats": "averaged beat of the flagged stretch in view only (b: back to the whole record)",
        "toggle_details": "flags panel: one line per flag, or with message, source and every stretch",
        "next_panel": "lower panel: flags, metrics, run settings, run comparison",
        "next_run": "show the next run of this record (the one shown is the one you sign)",
        "scroll_panel(-1)": "scroll the lower panel up",
        "scroll_panel(1)": "scroll the lower panel down",
        "decide('accept')": "accept the shown run (note; required when a flag is FAIL)",
        "decide('reject')": "reject the record (a note is required)",
        "decide('rerun')": "send back for re-run (note optional)",
        "send_back_with_settings": "send back with settings for the re-run (chosen in the form, then a note)",
        "rerun": "re-run now with other settings; result shown beside the previous run",
        "back": "back to the worklist (releases the record)",
    }

    # View state: Textual reactive attributes; their watchers redraw what depends on them.
    channel: var[int] = var(0, init=False)
    view: var[str] = var("traces", init=False)
    panel: var[str] = var("flags", init=False)
    shown_run_id: var[str | None] = var(None, init=False)
    start_s: var[float] = var(0.0, init=False)
    span_s: var[float] = var(DEFAULT_SPAN_S, init=False)
    read_only: var[bool] = var(False, init=False)
    details: var[bool] = var(False, init=False)
    # averaged beat over the whole record (None) or over one flagged stretch (start_s, end_s)
    beat_scope: var[tuple[float, float] | None] = var(None, init=False)

    def __init__(self, record_id: str) -> None:
        super().__init__()
        self.record_id = record_id
        self.holder: Claim | None = None
        self.summary: RecordSummary | None = None
        self.original: Recording | None = None
        self.runs: list[RunInfo] = []
        self.loaded: dict[str, queue_view.RunData] = {}
        self.current_run_id: str | None = None
        self.previous_run_id: str | None = None
        self.last_plots: TracePlots | None = None
        self._panel_key: tuple | None = None
        self._redraw_pending = False
        self._original_pyramids: dict[int, TracePyramids] = {}
        self._traces_key: tuple | None = None
        self._panel_content_key: tuple | None = None

    @property
    def holder_text(self) -> str:
        """Who holds the record when it is read-only (one inert line)."""
        return self.holder.describe() if self.holder is not None else "another reviewer"

    @property
    def state(self) -> str:
        """The record's state when it was last read from the queue."""
        return str(self.summary.state) if self.summary is not None else ""

    # -- reactive view state ------------------------------------------
    def _watch_redraw(self) -> None:
        self.request_redraw()

    watch_channel = watch_view = watch_shown_run_id = watch_start_s = watch_span_s = _watch_redraw
    watch_beat_scope = _watch_redraw

    def watch_panel(self) -> None:
        """A new lower panel: fill it."""
        if self.shown_run is not None and self.is_mounted:
            self.update_panel()

    def watch_details(self) -> None:
        """Flags panel with or without details."""
        self.watch_panel()

    def watch_read_only(self) -> None:
        """Locked or unlocked: the title badge and the decision keys follow."""
        if self.is_mounted:
            self.update_title()
            self.refresh_bindings()

    def request_redraw(self) -> None:
        """Redraw once after the current batch of changes (several attributes may change together)."""
        if self._redraw_pending or not self.is_mounted:
            return
        self._redraw_pending = True

        def run() -> None:
            self._redraw_pending = False
            self.redraw()

        self.call_later(run)

    def check_action(self, action: str, parameters: tuple[object, ...]) -> bool | None:
        """Decision keys are shown disabled (and do nothing) while read-only or without a run."""
        if action in DECISION_ACTIONS and self.read_only:
            return None
        if action in ("decide", "send_back_with_settings") and self.shown_run is None:
            return None
        return True

    # -- layout -------------------------------------------------------
    def compose(self) -> ComposeResult:
        """Title line, last decision, window line, the plot stack, the panel, the key footer."""
        yield TextBlock(id="record-title")
        yield TextBlock(id="decision-line")
        yield TextBlock(id="window-line")
        with Vertical(id="plots"):
            for name in PLOT_NAMES:
                yield TextBlock(id=f"plot-{name}", classes="plot")
            yield TextBlock(id="flag-strip")
        yield Static(id="panel-tabs")
        with VerticalScroll(id="panel"):
            yield Static(id="panel-body")
        yield Footer()

    def on_mount(self) -> None:
        """Claim the record (or open it read-only) and load it in the background."""
        loading = Text.assemble("loading record ", inert_text(self.record_id, 40))
        self.query_one("#record-title", TextBlock).update(loading)
        try:
            self.app.claim(self.record_id)
        except ClaimedByOther as exc:
            self.holder = exc.holder
            self.read_only = True
            self.notify(f"read-only: {self.holder_text}", timeout=6)
        except TracevetError as exc:
            self.give_up(exc.one_line())
            return
        self.set_interval(FOLLOW_SECONDS, self.follow_holder)
        self.load_record()

    def give_up(self, message: str) -> None:
        """The record cannot be shown: say why (one line) and go back to the worklist."""
        self.app.notify(f"cannot open {self.record_id}: {message}", severity="error", timeout=10)
        if not self.read_only:
            self.app.release_claim()
        if self.is_current:
            self.app.pop_screen()

    def lose_claim(self, holder: Claim) -> None:
        """Another reviewer took the record over: continue read-only."""
        self.holder = holder
        self.read_only = True

    def follow_holder(self) -> None:
        """While read-only, follow the queue: when the holder decides or lets go, say so and unlock.

        Reads one small claim file every :data:`FOLLOW_SECONDS`; the record is
        claimed for this reviewer as soon as nobody holds it any more (or the
        holder's claim may be taken over).
        """
        if not self.read_only or self.app.held_claim is not None or not self.is_current:
            return
        queue = self.app.queue
        try:
            holder = queue.holder(self.record_id)
            if holder is not None and holder.reviewer != self.app.reviewer:
                if holder.takeover_reason(queue.settings.claim_idle_minutes) is None:
                    self.holder = holder
                    return
            before = self.summary.last if self.summary is not None else None
            self.app.claim(self.record_id)
            summary = queue.record(self.record_id)
        except ClaimedByOther as exc:
            self.holder = exc.holder
            return
        except TracevetError:
            return  # tried again at the next tick
        who = self.holder.reviewer if self.holder is not None else "the other reviewer"
        after = summary.last
        if after is not None and (before is None or after.seq != before.seq):
            message = f"{who} {after.past_tense} this record; it is yours to review now"
        else:
            message = f"{who} let go of this record; it is yours to review now"
        self.holder = None
        self.summary = summary
        self.read_only = False
        self.update_decision_line()
        self.notify(message, timeout=8)
        if summary.n_runs != len(self.runs):
            self.load_record()  # the holder made a run meanwhile

    @work(thread=True, exclusive=True, group="load")
    def load_record(self) -> None:
        """Read the original, the runs and the current run (worker thread)."""
        try:
            self._load_record()
        except TracevetError as exc:
            self.app.call_from_thread(self.give_up, exc.one_line())

    def _load_record(self) -> None:
        queue = self.app.queue
        summary = queue.record(self.record_id)
        original = queue.load_original(self.record_id)
        runs = list(queue.runs(self.record_id))
        current = summary.current_run_id or (runs[-1].run_id if runs else None)
        loaded = {}
        if current is not None:
            info = next(r for r in runs if str(r.run_id) == str(current))
            run = queue_view.load_run(queue, self.record_id, info)
            queue_view.pyramids_for(run, original, 0)
            loaded[run.run_id] = run
        self.app.call_from_thread(self.record_loaded, summary, original, runs, current, loaded)

    def record_loaded(self, summary, original, runs, current, loaded) -> None:
        """Show the freshly loaded record (keeping the window when the same record is loaded again)."""
        first = self.original is None
        self.original = original
        self.runs = runs
        self.loaded.update(loaded)
        self.summary = summary
        self.current_run_id = str(current) if current is not None else None
        if first:
            self.span_s = min(DEFAULT_SPAN_S, original.duration_s)
            self.start_s = 0.0
        self.shown_run_id = self.current_run_id
        self.update_decision_line()
        self.refresh_bindings()
        self.redraw()
        self.start_suggestion()

    @property
    def shown_run(self) -> queue_view.RunData | None:
        """The run whose plots, flags and metrics are on screen."""
        return self.loaded.get(self.shown_run_id) if self.shown_run_id else None

    # -- drawing ------------------------------------------------------
    def on_resize(self) -> None:
        """Redraw the plots for the new size."""
        self.call_after_refresh(self.redraw)

    def redraw(self) -> None:
        """Redraw everything from the current state."""
        if not self.is_mounted:
            return
        self.update_title()
        if self.original is None:
            return
        run = self.shown_run
        if run is None:
            self.draw_original_only()
            return
        if self.channel not in run.pyramids:
            self.build_pyramids(run, self.channel)
            return
        if self.view == "beats":
            self.draw_beats(run)
        else:
            self.draw_traces(run)
        self.update_panel()

    def draw_original_only(self) -> None:
        """A record without a cleaned run: its original, with a hint on how to get a run."""
        rec = self.original
        if rec is None:
            return
        if self.channel not in self._original_pyramids:
            samples = rec.channel(self.channel)
            self._original_pyramids[self.channel] = TracePyramids.from_arrays(samples, samples, rec.fs)
        traces = self._original_pyramids[self.channel]
        width, rows = self.plot_geometry()
        plots = render_trace_plots(traces, self.start_s, self.span_s, width, (rows - 2, 1, 1), self.app.colour,
                                   only_original=True)
        self.last_plots = plots
        widget = self.query_one("#plot-original", TextBlock)
        widget.show(True)
        widget.set_height(rows)
        widget.update(self.plot_text(plots.plots[0]))
        for name in ("cleaned", "removed"):
            self.query_one(f"#plot-{name}", TextBlock).show(False)
        self.query_one("#flag-strip", TextBlock).update("")
        line = Text(no_wrap=True, overflow="ellipsis")
        line.append(format_window(plots.start_s, plots.end_s), style="bold")
        line.append(f" of {format_duration(traces.duration_s)}  ")
        line.append("no cleaned run yet: the original is shown; r cleans it now ('tracevet clean' does the queue)",
                    style="bold")
        self.query_one("#window-line", TextBlock).update(line)
        self.query_one("#panel-tabs", Static).update(Text("no run: nothing assessed yet", style="dim"))
        self.query_one("#panel-body", Static).update(
            info_text.record_line(self.record_id, self.summary.source_name if self.summary else "", self.original)
        )

    @work(thread=True, exclusive=True, group="pyramids")
    def build_pyramids(self, run, channel: int) -> None:
        """Build the plot summary of a channel in the background (long records take a moment)."""
        queue_view.pyramids_for(run, self.original, channel)
        self.app.call_from_thread(self.redraw)

    def update_title(self) -> None:
        """Record id, severity and count, state, read-only badge, then channel, run, kind and rate.

        Laid out by priority for the width at hand: what does not fit is left
        out from the least important end, never the id, severity or state.
        """
        parts: list[tuple[int, Text]] = [(0, inert_text(self.record_id, 28, style="bold"))]
        run = self.shown_run
        rec = self.original
        if run is not None:
            count = len(queue_view.flag_list(run.assessment))
            parts.append((1, severity_text(queue_view.worst_severity(run.assessment), count)))
        if self.state:
            parts.append((2, inert_text(self.state, 12, style="bold")))
        if self.read_only:
            badge = Text("READ-ONLY ", style="reverse bold")
            name = queue_view.holder_name(self.holder) or "?"
            badge.append_text(inert_text(name, READ_ONLY_NAME_CHARS, style="reverse"))
            parts.append((2, badge))
        if rec is not None:
            channel = Text(f"ch {self.channel + 1}/{rec.n_channels} ")
            channel.append_text(inert_text(rec.channels[self.channel], 28))
            parts.append((4, channel))
        if run is not None:
            parts.append((5, inert_text(info_text.run_label(run.info, self.runs, self.current_run_id), 40)))
        if rec is not None:
            parts.append((6, Text.assemble(inert_text(rec.kind, 6), f" {rec.fs:g} Hz")))
        widget = self.query_one("#record-title", TextBlock)
        width = (widget.content_size.width or self.size.width - 2) if self.is_mounted else 78
        widget.update(info_text.fit_by_priority(parts, max(width, 20)))

    def update_decision_line(self) -> None:
        """The record's last decision (who, what, when, note), or that there is none."""
        last = self.summary.last if self.summary is not None else None
        self.query_one("#decision-line", TextBlock).update(queue_view.decision_text(last))

    def plot_geometry(self) -> tuple[int, int]:
        """Width and total rows available to the plot stack (the flag strip takes one row)."""
        box = self.query_one("#plots").content_size
        return max(box.width, 20), max(box.height - 1, 6)

    def draw_traces(self, run) -> None:
        """The three stacked plots of the current window, labelled."""
        width, rows = self.plot_geometry()
        each = max(rows // 3, 2)
        heights = (each, each, rows - 2 * each)
        traces = run.pyramids[self.channel]
        span = min(max(self.span_s, MIN_SPAN_S), traces.duration_s)
        self.set_reactive(RecordScreen.span_s, span)  # clamped quietly: this is the redraw already
        self.set_reactive(RecordScreen.start_s, min(max(self.start_s, 0.0), max(traces.duration_s - span, 0.0)))
        key = (run.run_id, self.channel, self.start_s, self.span_s, width, heights, self.app.colour)
        if key == self._traces_key:
            return  # nothing on the plots changed (a panel, the title or a key that moved nothing)
        regions = queue_view.flagged_regions(run, self.channel)
        plots = render_trace_plots(traces, self.start_s, self.span_s, width, heights, self.app.colour, regions)
        self._traces_key = key
        self.last_plots = plots
        for plot, height in zip(plots.plots, heights):
            widget = self.query_one(f"#plot-{plot.name}", TextBlock)
            widget.show(True)
            widget.set_height(height)
            widget.update(self.plot_text(plot))
        self.query_one("#flag-strip", TextBlock).update(self.flag_strip_text(plots.flag_strip))
        units = inert_text((self.original.units if self.original is not None else None) or "units?", 8)
        removed = plots.plots[2]
        line = Text(no_wrap=True, overflow="ellipsis")
        span = plots.end_s - plots.start_s
        line.append(format_window(plots.start_s, plots.end_s), style="bold")
        line.append(f" of {format_duration(traces.duration_s)}")
        line.append("  removed ", style="dim")
        line.append(f"{format_value(removed.y_low)}..{format_value(removed.y_high)} ", style="bold")
        line.append_text(units)
        line.append(f" = {plots.removed_ratio * 100:.0f}% of original p-p", style="bold")
        self.query_one("#window-line", TextBlock).update(line)

    def draw_beats(self, run) -> None:
        """Averaged beat (whole record, or the flagged stretch chosen with B) of original and cleaned
        overlaid, their difference, and the J point and ST reading point marked."""
        rec = self.original
        if rec is None:
            return
        width, rows = self.plot_geometry()
        for name in PLOT_NAMES:
            self.query_one(f"#plot-{name}", TextBlock).show(name != "removed")
        self.query_one("#flag-strip", TextBlock).update("")
        scope = self.beat_scope
        if scope is None:
            found = queue_view.beat_templates(run.assessment, self.channel)
            count = queue_view.beat_count(run.assessment, self.channel)
            templates = found
        else:
            found = queue_view.stretch_templates(run, rec, self.channel, *scope)
            templates = found[:3] if found is not None else None
            count = found[3] if found is not None else 0
        if templates is None:
            where = "in this channel" if scope is None else f"in {format_stretch(*scope, rec.duration_s)}"
            self.query_one("#plot-original", TextBlock).update(Text(f"no measured beats {where}", style="dim"))
            self.query_one("#plot-cleaned", TextBlock).update("")
            self._traces_key = None
            return
        top = max(rows * 2 // 3, 3)
        heights = (top, rows + 1 - top)
        time_s, original_beat, cleaned_beat = templates
        rr_s = queue_view.median_rr_s(run.assessment, self.channel, rec.fs)
        marks = queue_view.fiducial_marks(time_s, original_beat, rr_s, rec.fs)
        overlay, difference = render_beat_overlay(
            time_s, original_beat, cleaned_beat, width, heights, self.app.colour,
            marks or (), ("J", "ST") if marks else (),
        )
        for widget_id, plot, height in (("original", overlay, heights[0]), ("cleaned", difference, heights[1])):
            widget = self.query_one(f"#plot-{widget_id}", TextBlock)
            widget.set_height(height)
            widget.update(self.plot_text(plot))
        self._traces_key = None
        units = inert_text(rec.units or "units?", 8)
        line = Text(no_wrap=True, overflow="ellipsis")
        what = "beat avg" if scope is None else f"stretch {format_stretch(*scope, rec.duration_s)} avg"
        line.append(f"{what} ({count} beats) ", style="bold")
        line.append("orig ", style="dim")
        line.append("━━", style=self.app.palette.trace_style("original"))
        line.append(" clean ", style="dim")
        line.append("━━" if self.app.colour else "••", style=self.app.palette.trace_style("cleaned"))
        line.append(f" {format_value(overlay.y_low)}..{format_value(overlay.y_high)} ")
        line.append_text(units)
        line.append("  o-c ", style="dim")
        line.append(f"{format_value(difference.y_low)}..{format_value(difference.y_high)} ", style="bold")
        line.append_text(units)
        if marks:
            line.append(f"  J {marks[0] * 1000:+.0f} ms, ST J+{(marks[1] - marks[0]) * 1000:.0f}", style="dim")
        self.query_one("#window-line", TextBlock).update(line)

    def plot_text(self, plot) -> Text:
        """The plot's rows as one Text, with the plot's name written into its label column."""
        lines = list(plot.lines)
        label = PLOT_LABELS.get(plot.name, plot.name)
        if len(lines) >= 3:
            row = len(lines) // 2 if plot.name != "removed" else 1
            name = Text(label.rjust(CANVAS_OFFSET - 1)[: CANVAS_OFFSET - 1] + " ", style="bold")
            lines[row] = name + lines[row][CANVAS_OFFSET:]
        return Text("\n", no_wrap=True).join(lines)

    def flag_strip_text(self, strip) -> Text:
        """One row under the plots marking flagged stretches (symbol and colour per severity)."""
        text = Text(no_wrap=True, overflow="crop")
        text.append("flags".rjust(CANVAS_OFFSET - 1) + " ", style="dim")
        for severity in strip:
            if severity:
                text.append(SEVERITY_SYMBOL[severity], style=SEVERITY_STYLE[severity])
            else:
                text.append("─", style="dim")
        return text

    def update_panel(self) -> None:
        """Tabs and body of the lower panel (rebuilt only when what it shows changed)."""
        run = self.shown_run
        rec = self.original
        if run is None or rec is None:
            return
        previous = self.loaded.get(self.previous_run_id) if self.previous_run_id else None
        if self.panel == "compare" and previous is None:
            self.set_reactive(RecordScreen.panel, "flags")
        content_key = (self.panel, self.shown_run_id, self.previous_run_id, self.channel, self.details)
        if content_key == self._panel_content_key:
            return
        self._panel_content_key = content_key
        self.query_one("#panel-tabs", Static).update(info_text.panel_tabs(self.panel, previous is not None))
        name = queue_view.channel_name(run.assessment, self.channel) or rec.channels[self.channel]
        if self.panel == "flags":
            body = info_text.flags_panel(run.assessment, name, self.details, rec.duration_s)
        elif self.panel == "metrics":
            body = info_text.metrics_panel(run.assessment, name, rec.n_channels > 1, rec.units)
        elif self.panel == "run":
            source = self.summary.source_name if self.summary is not None else ""
            body = info_text.record_line(self.record_id, source, rec)
            body.append("\n")
            body.append_text(info_text.run_panel(run.info, self.runs, self.current_run_id))
        else:
            # always the older run on the left, whichever of the two is shown (v does not flip it)
            order = [str(r.run_id) for r in self.runs]
            pair = [r for r in (previous, run) if r is not None]
            older, newer = sorted(pair, key=lambda r: order.index(r.run_id) if r.run_id in order else 0)
            body = info_text.compare_panel(older, newer, shown_id=run.run_id)
        self.query_one("#panel-body", Static).update(body)
        shown_key = (self.panel, self.shown_run_id, self.previous_run_id)
        if shown_key != self._panel_key:
            self._panel_key = shown_key
            self.query_one("#panel", VerticalScroll).scroll_home(animate=False)

    # -- navigation ---------------------------------------------------
    def action_pan(self, fraction: float) -> None:
        """Move the window by a fraction of its width."""
        self.start_s += float(fraction) * self.span_s

    def action_zoom(self, factor: float) -> None:
        """Narrow (factor < 1) or widen the window around its centre."""
        centre = self.start_s + self.span_s / 2
        limit = self.original.duration_s if self.original is not None else self.span_s
        self.span_s = min(max(self.span_s * float(factor), MIN_SPAN_S), limit)
        self.start_s = centre - self.span_s / 2

    def action_jump_start(self) -> None:
        """Go to the start of the record."""
        self.start_s = 0.0

    def action_jump_end(self) -> None:
        """Go to the end of the record."""
        if self.original is not None:
            self.start_s = self.original.duration_s - self.span_s

    def _jump_flag(self, backwards: bool) -> None:
        run = self.shown_run
        if run is None:
            return
        regions = queue_view.flagged_regions(run, self.channel)
        reference = self.start_s + stretch_lead_s(self.span_s)  # where the stretch in view begins
        index = regions.next_index(reference, backwards)
        if index is None:
            self.notify(
                "no further flagged stretch in this channel" if len(regions) else "no flagged stretches in this channel"
            )
            return
        start, end = float(regions.start_s[index]), float(regions.end_s[index])
        duration = self.original.duration_s if self.original is not None else end
        span, window_start = stretch_window(start, end, duration)
        self.view = "traces"
        self.span_s = span
        self.start_s = window_start

    def action_next_flag(self) -> None:
        """Show the next flagged stretch, zoomed so the damage is visible."""
        self._jump_flag(False)

    def action_previous_flag(self) -> None:
        """Show the previous flagged stretch, zoomed so the damage is visible."""
        self._jump_flag(True)

    def action_next_channel(self) -> None:
        """Show the next channel."""
        if self.original is not None:
            self.channel = (self.channel + 1) % self.original.n_channels

    def action_toggle_beats(self) -> None:
        """Switch between the three traces and the averaged beat of the whole record."""
        self.beat_scope = None
        self.view = "beats" if self.view == "traces" else "traces"

    def action_stretch_beats(self) -> None:
        """Averaged beat of the flagged stretch in view (its beats only), instead of the whole record."""
        run = self.shown_run
        if run is None:
            return
        regions = queue_view.flagged_regions(run, self.channel)
        found = regions.overlapping(self.start_s, self.start_s + self.span_s)
        if found is None:
            self.notify("no flagged stretch in view: ] goes to the next one")
            return
        self.beat_scope = (float(regions.start_s[found]), float(regions.end_s[found]))
        self.view = "beats"

    def action_toggle_details(self) -> None:
        """Flags panel: one line per flag, or each with its message, source and every stretch."""
        self.details = not self.details
        if self.panel != "flags":
            self.panel = "flags"

    def action_next_panel(self) -> None:
        """Cycle the lower panel: flags, metrics, run settings, comparison."""
        panels = [p for p in info_text.PANELS if p != "compare" or self.previous_run_id]
        self.panel = panels[(panels.index(self.panel) + 1) % len(panels)] if self.panel in panels else panels[0]

    def action_scroll_panel(self, direction: int) -> None:
        """Scroll the lower panel by a page."""
        panel = self.query_one("#panel", VerticalScroll)
        panel.scroll_page_down() if int(direction) > 0 else panel.scroll_page_up()

    def action_next_run(self) -> None:
        """Show the next run of this record (its plots, flags and settings)."""
        if len(self.runs) < 2:
            self.notify("this record has one run; press r to make another")
            return
        ids = [str(r.run_id) for r in self.runs]
        index = ids.index(self.shown_run_id) if self.shown_run_id in ids else -1
        target = ids[(index + 1) % len(ids)]
        self.previous_run_id = self.shown_run_id
        self.show_run(target)

    def show_run(self, run_id: str) -> None:
        """Display ``run_id`` (loading it first if needed)."""
        if run_id in self.loaded:
            self.shown_run_id = run_id
        else:
            self.load_other_run(run_id)

    @work(thread=True, exclusive=True, group="load")
    def load_other_run(self, run_id: str) -> None:
        """Load another run in the background, then show it."""
        info = next(r for r in self.runs if str(r.run_id) == run_id)
        try:
            run = queue_view.load_run(self.app.queue, self.record_id, info)
        except TracevetError as exc:
            self.app.call_from_thread(self.app.notify, f"cannot load {run_id}: {exc.one_line()}", severity="error")
            return
        queue_view.pyramids_for(run, self.original, self.channel)

        def done() -> None:
            self.loaded[run.run_id] = run
            self.shown_run_id = run.run_id

        self.app.call_from_thread(done)

    def action_back(self) -> None:
        """Back to the worklist, releasing the claim."""
        if not self.read_only:
            self.app.release_claim()
        self.app.pop_screen()
