"""The key reference: every key of the screen below and of the app, plus the caution."""

from __future__ import annotations

from rich.table import Table
from rich.text import Text
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import VerticalScroll
from textual.screen import ModalScreen
from textual.widgets import Static

from tracevet.caution import CAUTION


def _keys(binding: Binding) -> str:
    names = [k.strip() for k in binding.key.split(",")]
    pretty = {
        "question_mark": "?",
        "plus": "+",
        "equals_sign": "=",
        "minus": "-",
        "right_square_bracket": "]",
        "left_square_bracket": "[",
        "escape": "esc",
    }
    return " ".join(pretty.get(n, n) for n in names)


def binding_lines(screen_or_app) -> list[tuple[str, str]]:
    """(keys, description) for every binding declared on the class of ``screen_or_app``."""
    rows = []
    for binding in getattr(type(screen_or_app), "BINDINGS", []):
        if isinstance(binding, Binding):
            long = getattr(screen_or_app, "KEY_HELP", {}).get(binding.action)
            rows.append((_keys(binding), long or binding.description or binding.action))
    return rows


class HelpScreen(ModalScreen[None]):
    """Every key of the screen it was opened from, the app-wide keys and the caution."""

    BINDINGS = [Binding("escape,q,question_mark,f1", "close", "Close")]

    def __init__(self, below) -> None:
        super().__init__()
        self.below = below

    def compose(self) -> ComposeResult:
        """One scrollable text: keys, then the caution."""
        title = getattr(self.below, "HELP_TITLE", type(self.below).__name__)
        keys = Table.grid(padding=(0, 2))
        keys.add_column(style="bold", no_wrap=True)
        keys.add_column()
        keys.add_row(Text(f"Keys: {title}", style="bold underline"), "")
        for key, what in binding_lines(self.below):
            keys.add_row(key, what)
        keys.add_row(Text("Everywhere", style="bold underline"), "")
        for key, what in binding_lines(self.app):
            keys.add_row(key, what)
        keys.add_row("up down pgup pgdn", "move in tables, lists and this help")
        keys.add_row("tab shift+tab", "move between form fields")
        caution = Text.assemble(("Caution: ", "bold"), CAUTION, ("\n\nesc, q or ? closes this help.", "dim"))
        with VerticalScroll(id="help-box"):
            yield Static(keys, id="help-keys")
            yield Static(caution, id="help-caution")

    def action_close(self) -> None:
        """Back to the screen below."""
        self.dismiss(None)
