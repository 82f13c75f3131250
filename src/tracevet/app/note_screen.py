"""The note prompt shown before a decision is written."""

from __future__ import annotations

from rich.text import Text
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Vertical
from textual.screen import ModalScreen
from textual.widgets import Input, Static

from tracevet.app.display import inert_text

DECISION_WORDS = {"accept": "ACCEPT", "reject": "REJECT", "rerun": "SEND BACK FOR RE-RUN"}
MAX_NOTE_CHARS = 2000


class NoteScreen(ModalScreen[str | None]):
    """Ask for the decision's note; refuse an empty one when a note is required.

    ``previous`` (one line) shows the record's last decision, so an earlier
    colleague's verdict and note are in view while typing.

    Dismisses with the note (possibly empty when optional), or None when
    cancelled.
    """

    HELP_TITLE = "note prompt"
    BINDINGS = [Binding("escape", "cancel", "Cancel")]
    KEY_HELP = {"cancel": "cancel: nothing is written (enter writes the decision)"}

    def __init__(
        self, decision: str, record_id: str, run_label: str, required_reason: str = "", previous: Text | None = None
    ) -> None:
        super().__init__()
        self.previous = previous
        self.decision = decision
        self.record_id = record_id
        self.run_label = run_label
        self.required_reason = required_reason

    def compose(self) -> ComposeResult:
        """Summary of what will be written, the reason a note is needed, the input."""
        with Vertical(id="note-box"):
            yield Static(
                Text.assemble(
                    (DECISION_WORDS.get(self.decision, self.decision.upper()), "bold reverse"),
                    " ",
                    inert_text(self.record_id, 30),
                    "  ",
                    inert_text(self.run_label, 40),
                ),
                id="note-summary",
            )
            if self.previous is not None:
                yield Static(self.previous, id="note-previous")
            need = self.required_reason or "note (optional): a few words on why"
            yield Static(Text(need, style="bold" if self.required_reason else "dim"), id="note-need")
            yield Input(placeholder="note", id="note-input", max_length=MAX_NOTE_CHARS)
            yield Static(Text("enter: write to the log   esc: cancel (nothing written)", style="dim"), id="note-keys")

    def on_mount(self) -> None:
        """Focus the input."""
        self.query_one(Input).focus()

    def on_input_submitted(self, event: Input.Submitted) -> None:
        """Enter: hand back the note, unless a required note is empty."""
        note = event.value.strip()
        if self.required_reason and not note:
            self.query_one("#note-need", Static).update(Text(f"refused: {self.required_reason}", style="bold reverse"))
            self.notify("not saved: " + self.required_reason, severity="error")
            return
        self.dismiss(note)

    def action_cancel(self) -> None:
        """Esc: nothing is written."""
        self.dismiss(None)
