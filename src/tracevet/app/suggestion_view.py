"""Suggested settings in the review app: computed in the background when a flagged record opens.

:class:`SuggestionActions` is mixed into the record screen (like
``record_decisions.DecisionActions``) and uses its state (``record_id``,
``original``, ``runs``, ``current_run_id``, ``loaded``, ``read_only``...).
When the current run has flags, :func:`tracevet.suggestion.suggest` runs in a
worker thread (one candidate at a time, so the interface stays responsive);
a line under the title shows its progress, then the result: ``U`` shows the
current run and the suggestion side by side (flags and measures), ``u``
stores the suggestion as a new run (marked suggested) and shows it, and the
re-run form (``r``) offers it with ``ctrl+u``. The line is the first line
of the lower panel, so it takes none of the plots' rows. Nothing is decided: the
reviewer still accepts, rejects or sends back with their own key press.
"""

from __future__ import annotations

import threading
import time
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

from rich.text import Text
from textual.binding import Binding
from textual.widgets import Static

from tracevet.app.display import inert_text
from tracevet.errors import TracevetError
from tracevet.workqueue.suggested import severity_counts

if TYPE_CHECKING:
    from tracevet.app.app import ReviewApp
    from tracevet.recording import Recording
    from tracevet.workqueue import RecordSummary, RunInfo

# Key of the record screen that takes the suggestion, and the one that shows the comparison.
TAKE_KEY = "u"
COMPARE_KEY = "U"
# At most this many progress redraws a second.
PROGRESS_HZ = 5.0

# Measures shown side by side: (metric name, label, format).
COMPARE_ROWS = (
    ("r_amplitude_ratio", "R amplitude ratio", "{:.3f}"),
    ("qrs_width_change_ms", "QRS width change", "{:+.1f} ms"),
    ("st_change", "ST level change", "{:+.3f}"),
    ("beat_shape_change_percent", "beat shape change", "{:.1f} %"),
    ("removed_beat_fraction", "beat shape in removed part", "{:.3f}"),
)


@dataclass
class SuggestionState:
    """Where the background suggestion of one record stands.

    ``status`` is ``computing``, ``ready``, ``none`` (nothing to suggest, with
    ``message`` saying why), ``failed`` or ``taken``.
    """

    for_run: str
    status: str = "computing"
    fraction: float = 0.0
    message: str = "starting"
    result: Any = None
    cancel: threading.Event = field(default_factory=threading.Event)
    show_compare: bool = False
    last_draw: float = 0.0


def flags_words(flags) -> str:
    """``none``, or ``2 fail, 1 warn (r-peak-change, ...)``."""
    _any_fail, _any_warn, fails, warns = severity_counts(flags)
    if not fails and not warns:
        return "none"
    ids = sorted({str(f.get("id") if isinstance(f, dict) else f.id) for f in flags})
    parts = ([f"{fails} fail"] if fails else []) + ([f"{warns} warn"] if warns else [])
    return f"{', '.join(parts)} ({', '.join(ids)})"


def _metric(metrics: dict, name: str):
    values = [v for k, v in (metrics or {}).items() if k.split("@")[0] == name and v is not None]
    if not values:
        return None
    return max(values, key=abs) if name != "r_amplitude_ratio" else min(values, key=lambda v: -abs(1 - v))


def compare_table(current_label: str, current_flags, current_metrics: dict, suggestion) -> Text:
    """Current run and suggestion side by side: flags, noise removed (estimated) and shape measures."""
    best = suggestion.best
    rows: list[tuple[str, str, str]] = [("", current_label, "suggested")]
    rows.append(("flags", flags_words(current_flags), flags_words(best.flags)))
    current = suggestion.current
    noise_now = "n/a" if current is None or current.noise_removed_db is None else f"{current.noise_removed_db:.1f} dB"
    noise_new = "n/a" if best.noise_removed_db is None else f"{best.noise_removed_db:.1f} dB"
    rows.append(("noise removed (est.)", noise_now, noise_new))
    suggested_metrics = suggestion.assessment.metrics
    for name, label, fmt in COMPARE_ROWS:
        a, b = _metric(current_metrics, name), _metric(suggested_metrics, name)
        rows.append((label, "—" if a is None else fmt.format(a), "—" if b is None else fmt.format(b)))
    rows.append(("settings changed", "", best.change))
    width0 = max(len(r[0]) for r in rows)
    width1 = min(40, max(len(r[1]) for r in rows))
    text = Text()
    for i, (label, left, right) in enumerate(rows):
        style = "bold" if i == 0 else ""
        text.append(f"  {label:<{width0}}  ", style="dim" if i else "")
        text.append_text(inert_text(left[:width1].ljust(width1), width1, style=style))
        text.append("  ")
        text.append_text(inert_text(right, 200, style=style))
        text.append("\n")
    return text


def rerun_form(record_id: str, settings: dict, source_run: str, state: SuggestionState | None):
    """The re-run form; when a suggestion is ready it offers it (``ctrl+u`` fills the form with it)."""
    from tracevet.app.rerun_screen import RerunScreen

    if state is None or state.status != "ready":
        return RerunScreen(record_id, settings, source_run)
    return _rerun_screen_class()(record_id, settings, source_run, state.result)


_RERUN_CLASS = None


def _rerun_screen_class():
    """The re-run form with the suggestion offered (built on first use: the form's module is heavy)."""
    global _RERUN_CLASS
    if _RERUN_CLASS is not None:
        return _RERUN_CLASS
    from tracevet.app.rerun_screen import RerunScreen

    class SuggestedRerunScreen(RerunScreen):
        """The re-run form, with ``ctrl+u`` filling it with the suggested settings."""

        BINDINGS = [Binding("ctrl+u", "use_suggestion", "Suggestion", key_display="^u")]
        KEY_HELP = dict(RerunScreen.KEY_HELP, use_suggestion="fill the form with the suggested settings")

        def __init__(self, record_id: str, settings: dict, source_run: str, suggestion) -> None:
            super().__init__(record_id, settings, source_run)
            self.suggestion = suggestion

        def on_mount(self) -> None:
            """Say that a suggestion is ready and how to take it."""
            super().on_mount()  # the form's own start: focus, no progress bar before running
            best = self.suggestion.best
            line = Text.assemble(
                ("suggestion ready: ", "bold"),
                f"{flags_words(best.flags)} predicted; ",
                ("ctrl+u", "bold"),
                " fills the form with it, ctrl+r then runs it",
            )
            try:
                self.query_one("#rerun-box").mount(Static(line, id="rerun-suggestion"), after="#rerun-title")
            except Exception:  # the form's layout changed: the key still works
                pass

        def action_use_suggestion(self) -> None:
            """Put every suggested setting into its field."""
            values = self.suggestion.best.settings.to_dict()
            for name, value in values.items():
                try:
                    widget = self.query_one(f"#set-{name}")
                except Exception:
                    continue
                widget.value = str(value)  # type: ignore[attr-defined]  # Select and Input both have it
            self.notify("form filled with the suggested settings; ctrl+r runs them")

    _RERUN_CLASS = SuggestedRerunScreen
    return _RERUN_CLASS


class SuggestionActions:
    """The record screen's suggestion: background search, status line, comparison, take key."""

    suggestion_state: SuggestionState | None = None

    if TYPE_CHECKING:  # state and methods of the record screen this class is mixed into
        app: ReviewApp
        notify: Any
        query_one: Any
        run_worker: Any
        is_attached: bool
        record_id: str
        original: Recording | None
        summary: RecordSummary | None
        runs: list[RunInfo]
        loaded: dict
        current_run_id: str | None
        previous_run_id: str | None
        shown_run_id: str | None
        read_only: bool

        @property
        def holder_text(self) -> str: ...

        def show_run(self, run_id: str) -> None: ...

        def refresh_summary(self) -> None: ...

    # ------------------------------------------------------------------ start
    def start_suggestion(self) -> None:
        """When the current run has flags (and is not itself a suggestion), search in a worker thread."""
        runs = list(getattr(self, "runs", []) or [])
        current_id = getattr(self, "current_run_id", None)
        info = next((r for r in runs if str(r.run_id) == str(current_id)), None)
        state = self.suggestion_state
        if state is not None and state.for_run == str(current_id) and state.status != "failed":
            self.update_suggestion_line()
            return
        if state is not None:
            state.cancel.set()
        self.suggestion_state = None
        if info is None or not info.n_flags or self.original is None:
            self.update_suggestion_line()
            return
        if getattr(info, "suggestion", None) is not None:
            self.suggestion_state = SuggestionState(str(current_id), status="none", message="this run is a suggestion")
            self.update_suggestion_line()
            return
        state = SuggestionState(str(current_id))
        self.suggestion_state = state
        queue = self.app.queue
        base = queue.settings.cleaning_settings()
        limits = queue.settings.limits()
        current = None
        if info.settings:
            from tracevet.cleaning import CleaningSettings

            try:
                current = CleaningSettings.from_dict(dict(info.settings))
            except TracevetError:
                current = None
        run = getattr(self, "loaded", {}).get(str(current_id))
        stretches = []
        if run is not None and getattr(run, "assessment", None) is not None:
            from tracevet.suggestion import flagged_stretches

            stretches = flagged_stretches(run.assessment, self.original.duration_s)
        original = self.original
        self.update_suggestion_line()
        self.run_worker(
            lambda: self._suggest_in_worker(state, original, base, current, limits, stretches),
            thread=True,
            group="suggest",
            exclusive=True,
            exit_on_error=False,
        )

    def _suggest_in_worker(self, state: SuggestionState, original, base, current, limits, stretches) -> None:
        from tracevet.suggestion import NO_BEATS, NoBeats, SuggestionCancelled, suggest

        def stopped() -> bool:
            return state.cancel.is_set() or not self.is_attached

        def progress(fraction: float, message: str) -> None:
            state.fraction, state.message = float(fraction), message
            now = time.monotonic()
            if now - state.last_draw >= 1.0 / PROGRESS_HZ:
                state.last_draw = now
                self._from_thread(self.update_suggestion_line)

        try:
            result = suggest(
                original, base=base, current=current, limits=limits, flagged_stretches_s=stretches,
                progress=progress, cancel=stopped, threads=1,
            )
        except SuggestionCancelled:
            return
        except NoBeats:
            state.status, state.message = "none", NO_BEATS
        except TracevetError as exc:
            state.status, state.message = "failed", exc.one_line()
        except MemoryError:
            state.status, state.message = "failed", "not enough memory"
        else:
            state.result = result
            if current is not None and result.report.settings.digest() == current.digest():
                state.status, state.message = "none", "the current settings are already the best candidate"
            else:
                state.status, state.message = "ready", ""
        self._from_thread(self.update_suggestion_line)

    def _from_thread(self, callback) -> None:
        try:
            self.app.call_from_thread(callback)
        except RuntimeError:  # the app has closed
            pass

    # ---------------------------------------------------------------- display
    def suggestion_text(self) -> Text:
        """The status line (and, when asked, the side-by-side comparison)."""
        state = self.suggestion_state
        if state is None:
            return Text("")
        if state.status == "computing":
            return Text.assemble(
                ("suggestion ", "bold"),
                f"computing {100 * state.fraction:3.0f} %  ",
                (state.message[:70], "dim"),
                ("  (keys keep working)", "dim"),
            )
        if state.status in ("none", "failed"):
            return Text.assemble(("suggestion: ", "bold"), inert_text(state.message, 120))
        if state.status == "taken":
            return Text.assemble(("suggestion ", "bold"), f"taken as {state.message}; decide on it as on any run")
        best = state.result.best
        line = Text.assemble(
            ("suggestion ready: ", "bold"),
            f"{flags_words(best.flags)}; ",
            (TAKE_KEY, "bold"),
            " adds it as a run, ",
            (COMPARE_KEY, "bold"),
            " compares, r offers it in the form",
        )
        if state.show_compare:
            run = getattr(self, "loaded", {}).get(state.for_run)
            info = next((r for r in self.runs if str(r.run_id) == state.for_run), None)
            assessment = getattr(run, "assessment", None)
            if assessment is not None:
                flags, metrics = list(assessment.flags), dict(assessment.metrics or {})
            else:
                flags, metrics = list(info.flags if info else []), {}
            line.append("\n")
            line.append_text(compare_table(f"current {state.for_run}", flags, metrics, state.result))
            line.append_text(Text("  " + state.result.reason, style="italic"))
        return line

    def update_suggestion_line(self) -> None:
        """Redraw the suggestion line, the first line of the lower panel (hidden when there is nothing to say).

        It lives inside the panel's scroll area, so it takes none of the plots' rows.
        """
        try:
            widget = self.query_one("#suggestion-line", Static)
        except Exception:
            try:
                panel = self.query_one("#panel")
            except Exception:
                return
            widget = Static(id="suggestion-line")
            children = list(panel.children)
            panel.mount(widget, before=children[0] if children else None)
        text = self.suggestion_text()
        widget.display = bool(text.plain)
        widget.update(text)

    # ---------------------------------------------------------------- actions
    def action_toggle_suggestion(self) -> None:
        """Show or hide the current run and the suggestion side by side."""
        state = self.suggestion_state
        if state is None or state.status != "ready":
            self.notify("no suggestion to compare yet", severity="warning")
            return
        state.show_compare = not state.show_compare
        self.update_suggestion_line()

    def action_take_suggestion(self) -> None:
        """Store the suggestion as a new run (marked suggested) and show it; nothing is decided."""
        state = self.suggestion_state
        if self.read_only:
            self.notify(f"read-only: {self.holder_text}", severity="warning")
            return
        if state is None or state.status != "ready":
            message = "the suggestion is still being computed" if state and state.status == "computing" else (
                "no suggestion for this record" if state is None else f"no suggestion: {state.message}"
            )
            self.notify(message, severity="warning")
            return
        state.status, state.message = "taken", "…"
        self.update_suggestion_line()
        self.run_worker(
            lambda: self._store_suggestion(state), thread=True, group="suggest-store", exit_on_error=False
        )

    def _store_suggestion(self, state: SuggestionState) -> None:
        result = state.result
        try:
            run_id = self.app.queue.store_run(
                self.record_id, result.cleaned, result.assessment, result.report.settings,
                made_by=self.app.reviewer, report=result.report, extra={"suggested": result.summary()},
            )
        except (TracevetError, OSError) as exc:
            state.status = "ready"
            problem = exc.one_line() if isinstance(exc, TracevetError) else str(exc)
            self._from_thread(lambda: self.notify(f"not stored: {problem}", severity="error"))
            self._from_thread(self.update_suggestion_line)
            return
        state.message = str(run_id)

        def show() -> None:
            self.previous_run_id = self.shown_run_id
            self.runs = list(self.app.queue.runs(self.record_id))
            self.refresh_summary()
            current = self.summary.current_run_id if self.summary is not None else None
            self.current_run_id = str(current or run_id)
            self.show_run(str(run_id))
            self.update_suggestion_line()
            self.notify(f"suggestion stored as {run_id}; nothing decided yet")

        self._from_thread(show)


SUGGESTION_BINDINGS = [
    Binding(TAKE_KEY, "take_suggestion", "Suggestion", show=False),
    Binding(COMPARE_KEY, "toggle_suggestion", "Compare suggestion", show=False),
]
SUGGESTION_KEY_HELP = {
    "take_suggestion": "add the suggested settings' run (computed in the background for a flagged record); "
    "nothing is decided",
    "toggle_suggestion": "show or hide the current run and the suggestion side by side",
}
