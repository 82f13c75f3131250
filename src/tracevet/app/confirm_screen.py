"""A yes/no question before something that overrides a colleague's work."""

from __future__ import annotations

from rich.text import Text
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Vertical
from textual.screen import ModalScreen
from textual.widgets import Static


class ConfirmScreen(ModalScreen[bool]):
    """Show what would be overridden and ask; ``y`` answers yes, ``n`` or ``esc`` no.

    Dismisses with True (go ahead) or False (nothing is done).
    """

    HELP_TITLE = "confirmation"
    BINDINGS = [
        Binding("y", "answer(True)", "Yes"),
        Binding("n,escape", "answer(False)", "No", key_display="n/esc"),
    ]
    KEY_HELP = {"answer(True)": "yes, go ahead", "answer(False)": "no: nothing is written"}

    def __init__(self, title: str, body: Text, question: str) -> None:
        super().__init__()
        self.title_text = title
        self.body = body
        self.question = question

    def compose(self) -> ComposeResult:
        """Title, what is at stake, the question and its keys."""
        with Vertical(id="confirm-box"):
            yield Static(Text(self.title_text, style="bold reverse"), id="confirm-title")
            yield Static(self.body, id="confirm-body")
            yield Static(Text(self.question, style="bold"), id="confirm-question")
            yield Static(Text("y: yes   n or esc: no (nothing is written)", style="dim"), id="confirm-keys")

    def action_answer(self, yes: bool) -> None:
        """Close with the answer."""
        self.dismiss(bool(yes))
