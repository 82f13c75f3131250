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
from textual.widgets import Footer, Static

from tracevet.app import info_text, queue_view
from tracevet.app.display import SEVERITY_STYLE, SEVERITY_SYMBOL, format_duration, inert_text, severity_text
from tracevet.app.plots import (
    CANVAS_OFFSET,
    TracePlots,
    format_clock,
    format_value,
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
        Binding("i", "next_panel", "Panel", show=False),
        Binding("v", "next_run", "Run", show=False),
        Binding("pageup", "scroll_panel(-1)", "Panel up", show=False),
        Binding("pagedown", "scroll_panel(1)", "Panel down", show=False),
        Binding("a", "decide('accept')", "Accept"),
        Binding("x", "decide('reject')", "Reject"),
        Binding("s", "decide('rerun')", "Send back", show=False),
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
        "next_flag": "centre the next flagged beat or region",
        "previous_flag": "centre the previous flagged beat or region",
        "next_channel": "next channel",
        "toggle_beats": "averaged beat: original and cleaned overlaid, and their difference",
        "next_panel": "lower panel: flags, metrics, run settings, run comparison",
        "next_run": "show the next run of this record (the one shown is the one you sign)",
        "scroll_panel(-1)": "scroll the lower panel up",
        "scroll_panel(1)": "scroll the lower panel down",
        "decide('accept')": "accept the shown run (note; required when a flag is FAIL)",
        "decide('reject')": "reject the record (a note is required)",
        "decide('rerun')": "send back for re-run (note optional)",
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

    def watch_panel(self) -> None:
        """A new lower panel: fill it."""
        if self.shown_run is not None and self.is_mounted:
            self.update_panel()

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
        if action in DECISION_ACTIONS and (self.read_only or self.shown_run is None):
            return None
        return True

    # -- layout -------------------------------------------------------
    def compose(self) -> ComposeResult:
        """Title line, last decision, window line, the plot stack, the panel, the key footer."""
        yield Static(id="record-title")
        yield Static(id="decision-line")
        yield Static(id="window-line")
        with Vertical(id="plots"):
            for name in PLOT_NAMES:
                yield Static(id=f"plot-{name}", classes="plot")
            yield Static(id="flag-strip")
        yield Static(id="panel-tabs")
        with VerticalScroll(id="panel"):
            yield Static(id="panel-body")
        yield Footer()

    def on_mount(self) -> None:
        """Claim the record (or open it read-only) and load it in the background."""
        self.query_one("#record-title", Static).update(Text.assemble("loading record ", inert_text(self.record_id, 40)))
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
            self.query_one("#window-line", Static).update(Text("this record has no cleaned run yet", style="dim"))
            return
        if self.channel not in run.pyramids:
            self.build_pyramids(run, self.channel)
            return
        if self.view == "beats":
            self.draw_beats(run)
        else:
            self.draw_traces(run)
        self.update_panel()

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
        widget = self.query_one("#record-title", Static)
        width = (widget.content_size.width or self.size.width - 2) if self.is_mounted else 78
        widget.update(info_text.fit_by_priority(parts, max(width, 20)))

    def update_decision_line(self) -> None:
        """The record's last decision (who, what, when, note), or that there is none."""
        last = self.summary.last if self.summary is not None else None
        self.query_one("#decision-line", Static).update(queue_view.decision_text(last))

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
        regions = queue_view.flagged_regions(run, self.channel)
        plots = render_trace_plots(traces, self.start_s, self.span_s, width, heights, self.app.colour, regions)
        self.last_plots = plots
        for plot, height in zip(plots.plots, heights):
            widget = self.query_one(f"#plot-{plot.name}", Static)
            widget.display = True
            widget.styles.height = height
            widget.update(self.plot_text(plot))
        self.query_one("#flag-strip", Static).update(self.flag_strip_text(plots.flag_strip))
        units = inert_text((self.original.units if self.original is not None else None) or "units?", 8)
        removed = plots.plots[2]
        line = Text(no_wrap=True, overflow="ellipsis")
        span = plots.end_s - plots.start_s
        line.append(f"{format_clock(plots.start_s, span)}-{format_clock(plots.end_s, span)}", style="bold")
        line.append(f" of {format_duration(traces.duration_s)}")
        line.append("  removed ", style="dim")
        line.append(f"{format_value(removed.y_low)}..{format_value(removed.y_high)} ", style="bold")
        line.append_text(units)
        line.append(f" = {plots.removed_ratio * 100:.0f}% of original p-p", style="bold")
        self.query_one("#window-line", Static).update(line)

    def draw_beats(self, run) -> None:
        """Averaged beat of original and cleaned overlaid, and their difference."""
        width, rows = self.plot_geometry()
        templates = queue_view.beat_templates(run.assessment, self.channel)
        for name in PLOT_NAMES:
            self.query_one(f"#plot-{name}", Static).display = name != "removed"
        self.query_one("#flag-strip", Static).update("")
        if templates is None:
            self.query_one("#plot-original", Static).update(Text("no beats detected in this channel", style="dim"))
            self.query_one("#plot-cleaned", Static).update("")
            return
        top = max(rows * 2 // 3, 3)
        heights = (top, rows + 1 - top)
        time_s, original_beat, cleaned_beat = templates
        overlay, difference = render_beat_overlay(time_s, original_beat, cleaned_beat, width, heights, self.app.colour)
        for widget_id, plot, height in (("original", overlay, heights[0]), ("cleaned", difference, heights[1])):
            widget = self.query_one(f"#plot-{widget_id}", Static)
            widget.styles.height = height
            widget.update(self.plot_text(plot))
        units = inert_text((self.original.units if self.original is not None else None) or "units?", 8)
        line = Text(no_wrap=True, overflow="ellipsis")
        line.append(f"beat avg ({queue_view.beat_count(run.assessment, self.channel)} R) ", style="bold")
        line.append("orig ", style="dim")
        line.append("━━", style="rgb(230,159,0)")
        line.append(" clean ", style="dim")
        line.append("━━" if self.app.colour else "••", style="rgb(86,180,233)")
        line.append(f" {format_value(overlay.y_low)}..{format_value(overlay.y_high)} ")
        line.append_text(units)
        line.append("  o-c ", style="dim")
        line.append(f"{format_value(difference.y_low)}..{format_value(difference.y_high)} ", style="bold")
        line.append_text(units)
        self.query_one("#window-line", Static).update(line)

    def plot_text(self, plot) -> Text:
        """plotext output as inert Text, with the plot's name written into its label column.

        The ANSI codes come from plotext drawing our own numbers, never from
        user data, so converting them to styles is safe.
        """
        lines = [Text.from_ansi(line, no_wrap=True) for line in plot.text.split("\n")]
        label = PLOT_LABELS.get(plot.name, plot.name)
        if len(lines) >= 3:
            row = len(lines) // 2 if plot.name != "removed" else 1
            tail = lines[row][CANVAS_OFFSET:]
            lines[row] = Text(label.rjust(CANVAS_OFFSET - 1)[: CANVAS_OFFSET - 1] + " ", style="bold") + tail
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
        """Tabs and body of the lower panel."""
        run = self.shown_run
        if run is None:
            return
        previous = self.loaded.get(self.previous_run_id) if self.previous_run_id else None
        if self.panel == "compare" and previous is None:
            self.set_reactive(RecordScreen.panel, "flags")
        self.query_one("#panel-tabs", Static).update(info_text.panel_tabs(self.panel, previous is not None))
        if self.panel == "flags":
            body = info_text.flags_panel(run.assessment)
        elif self.panel == "metrics":
            body = info_text.metrics_panel(run.assessment)
        elif self.panel == "run":
            source = self.summary.source_name if self.summary is not None else ""
            body = info_text.record_line(self.record_id, source, self.original)
            body.append("\n")
            body.append_text(info_text.run_panel(run.info, self.runs, self.current_run_id))
        else:
            body = info_text.compare_panel(previous, run)
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
        centre = self.start_s + self.span_s / 2
        target = regions.next_start(centre, backwards)
        if target is None:
            self.notify(
                "no further flagged region in this channel" if len(regions) else "no flagged regions in this channel"
            )
            return
        self.view = "traces"
        self.start_s = target - self.span_s / 2

    def action_next_flag(self) -> None:
        """Centre the window on the next flagged beat or region."""
        self._jump_flag(False)

    def action_previous_flag(self) -> None:
        """Centre the window on the previous flagged beat or region."""
        self._jump_flag(True)

    def action_next_channel(self) -> None:
        """Show the next channel."""
        if self.original is not None:
            self.channel = (self.channel + 1) % self.original.n_channels

    def action_toggle_beats(self) -> None:
        """Switch between the three traces and the averaged-beat overlay."""
        self.view = "beats" if self.view == "traces" else "traces"

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
