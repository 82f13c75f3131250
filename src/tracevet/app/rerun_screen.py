"""The re-run form: new cleaning settings, run in the background, with progress and cancel."""

from __future__ import annotations

from typing import TYPE_CHECKING

import threading

from rich.text import Text
from textual import work
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Grid, Vertical
from textual.screen import ModalScreen
from textual.widgets import Input, ProgressBar, Select, Static

from tracevet.app.display import inert_text
from tracevet.cleaning import DEFAULT_SETTINGS, SETTING_CHOICES, SETTING_HELP, CleaningSettings
from tracevet.errors import TracevetError

if TYPE_CHECKING:
    from tracevet.app.app import ReviewApp


class RerunCancelled(Exception):
    """Raised from the progress callback to stop a re-run the reviewer cancelled."""


class RerunScreen(ModalScreen[object]):
    """Settings pre-filled from the shown run; ctrl+r runs; esc cancels a run or closes.

    Dismisses with the new run's id, or None. With ``send_back`` nothing is
    run: ctrl+r dismisses with the chosen :class:`CleaningSettings`, to be
    attached to a send-back decision.
    """

    if TYPE_CHECKING:
        app: ReviewApp  # the app these screens run in, with its queue and reviewer

    HELP_TITLE = "re-run form"
    BINDINGS = [
        Binding("ctrl+r,f5", "start", "Run", key_display="^r"),
        Binding("escape", "cancel", "Cancel/close", key_display="esc"),
    ]
    KEY_HELP = {
        "start": "clean the record again with these settings (in the background)",
        "cancel": "stop a running re-run (nothing is kept), or close the form",
    }

    def __init__(self, record_id: str, settings: dict, source_run: str = "", send_back: bool = False) -> None:
        super().__init__()
        self.record_id = record_id
        self.source_run = source_run
        self.send_back = send_back
        self.source_has_settings = bool(settings)
        merged = DEFAULT_SETTINGS.to_dict()
        merged.update({k: v for k, v in (settings or {}).items() if k in merged})
        self.initial = merged
        self.source_digest = CleaningSettings.from_dict(merged, source="run").digest() if settings else None
        self.cancel_requested = threading.Event()
        self.running = False

    def compose(self) -> ComposeResult:
        """Title, a two-column grid of settings, the help line, progress and keys."""
        with Vertical(id="rerun-box"):
            word = "SEND BACK WITH SETTINGS " if self.send_back else "RE-RUN "
            title = Text.assemble((word, "bold reverse"), " ", inert_text(self.record_id, 40))
            if self.source_run and self.source_has_settings:
                title.append("  settings start from ", style="dim")
                title.append_text(inert_text(self.source_run, 20))
            elif self.source_run:
                title.append("  settings start from tracevet's defaults (", style="dim")
                title.append_text(inert_text(self.source_run, 20, style="dim"))
                title.append(" was cleaned outside tracevet)", style="dim")
            else:
                title.append("  settings start from tracevet's defaults", style="dim")
            yield Static(title, id="rerun-title")
            with Grid(id="rerun-grid"):
                for name, value in self.initial.items():
                    yield Static(Text(name, style="dim"), classes="rerun-label", id=f"label-{name}")
                    if name in SETTING_CHOICES:
                        options = [(str(choice), str(choice)) for choice in SETTING_CHOICES[name]]
                        current = str(value) if str(value) in SETTING_CHOICES[name] else options[0][1]
                        yield Select(options, value=current, allow_blank=False, compact=True, id=f"set-{name}")
                    else:
                        yield Input(str(value), compact=True, id=f"set-{name}")
            yield Static(id="rerun-help")
            yield ProgressBar(total=1.0, show_eta=False, id="rerun-progress")
            yield Static(id="rerun-status")
            run_word = "attach to the send-back" if self.send_back else "run"
            yield Static(
                Text(f"tab/shift+tab: field  enter: open list  ctrl+r or F5: {run_word}  esc: cancel  * changed",
                     style="dim"),
                id="rerun-keys",
            )

    def on_mount(self) -> None:
        """Focus the first field; the progress bar shows only once a run has started."""
        self.query_one(ProgressBar).display = False
        self.query_one("#rerun-grid").children[1].focus()

    def field_value(self, name: str) -> object:
        """The value in the form's field of setting ``name``."""
        widget = self.query_one(f"#set-{name}")
        assert isinstance(widget, (Input, Select))  # the form's fields, made in compose
        return widget.value

    def changed_fields(self) -> list[str]:
        """Names of the settings whose field differs from the value the form started with."""
        return [name for name, value in self.initial.items() if str(self.field_value(name)) != str(value)]

    def mark_changed(self) -> None:
        """Mark changed fields with ``*`` (and bold), so the reviewer sees what the new run changes."""
        changed = set(self.changed_fields())
        for name in self.initial:
            label = Text(("* " if name in changed else "") + name, style="bold" if name in changed else "dim")
            self.query_one(f"#label-{name}", Static).update(label)

    def on_select_changed(self, event: Select.Changed) -> None:
        """A choice changed: mark it."""
        self.mark_changed()

    def on_input_changed(self, event: Input.Changed) -> None:
        """A typed value changed: mark it."""
        self.mark_changed()

    def on_descendant_focus(self, event) -> None:
        """Explain the focused setting."""
        widget_id = getattr(event.widget, "id", "") or ""
        name = widget_id.removeprefix("set-")
        if name in SETTING_HELP:
            self.query_one("#rerun-help", Static).update(Text(f"{name}: {SETTING_HELP[name]}", style="italic"))

    def collect(self) -> CleaningSettings:
        """Read the form into validated settings (raises SettingsError)."""
        values = {}
        for name in self.initial:
            widget = self.query_one(f"#set-{name}")
            assert isinstance(widget, (Input, Select))  # the form's fields, made in compose
            values[name] = widget.value
        return CleaningSettings.from_dict(values, source="re-run form")

    def on_input_submitted(self, event: Input.Submitted) -> None:
        """Enter in a text field starts the run."""
        self.action_start()

    def action_start(self) -> None:
        """Validate the form and start the re-run in a worker thread."""
        if self.running:
            return
        try:
            settings = self.collect()
        except TracevetError as exc:
            self.show_status(f"not started: {exc.one_line()}", "bold reverse")
            return
        if self.send_back:
            self.dismiss(settings)
            return
        if self.source_digest is not None and settings.digest() == self.source_digest:
            self.show_status(
                f"not started: same settings as {self.source_run}; change a setting first",
                "bold reverse",
            )
            return
        self.running = True
        self.query_one(ProgressBar).display = True
        self.cancel_requested.clear()
        self.query_one("#rerun-grid").disabled = True
        self.show_status("cleaning... esc cancels", "bold")
        self.run_cleaning(settings)

    @work(thread=True, exclusive=True, group="rerun")
    def run_cleaning(self, settings: CleaningSettings) -> None:
        """Run ``queue.add_run`` off the event loop, reporting progress."""

        def progress(fraction: float) -> None:
            if self.cancel_requested.is_set():
                raise RerunCancelled()
            self.app.call_from_thread(self.show_progress, float(fraction))

        try:
            run_id = self.app.queue.add_run(self.record_id, settings, progress=progress, reviewer=self.app.reviewer)
        except RerunCancelled:
            self.app.call_from_thread(self.stopped, "cancelled: no run was added")
            return
        except TracevetError as exc:
            self.app.call_from_thread(self.stopped, f"failed: {exc.one_line()}")
            return
        if self.cancel_requested.is_set():
            # finished before the cancel reached the engine: the run exists; say so and show it
            self.app.call_from_thread(self.app.notify, "the run finished before the cancel took effect; it was kept")
        self.app.call_from_thread(self.dismiss, str(run_id))

    def show_progress(self, fraction: float) -> None:
        """Move the progress bar."""
        self.query_one(ProgressBar).update(progress=min(max(fraction, 0.0), 1.0))

    def show_status(self, message: str, style: str = "") -> None:
        """One status line under the progress bar."""
        self.query_one("#rerun-status", Static).update(Text(message, style=style))

    def stopped(self, message: str) -> None:
        """The run ended without a result: unlock the form."""
        self.running = False
        self.query_one("#rerun-grid").disabled = False
        self.query_one(ProgressBar).update(progress=0)
        self.query_one(ProgressBar).display = False
        self.show_status(message, "bold")

    def action_cancel(self) -> None:
        """Stop a running re-run, or close the form."""
        if self.running:
            self.cancel_requested.set()
            self.show_status("cancelling...", "bold")
        else:
            self.dismiss(None)
