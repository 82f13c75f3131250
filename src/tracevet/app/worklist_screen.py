"""The worklist: every record of the queue, sortable and filterable, one key to the next."""

from __future__ import annotations

from typing import TYPE_CHECKING

from textual.app import ComposeResult
from textual.binding import Binding
from textual.screen import Screen
from textual.widgets import DataTable, Footer, Static
from rich.text import Text

from tracevet.app import queue_view
from tracevet.app.display import format_duration, inert_text, severity_text
from tracevet.workqueue import REVIEW_STATES, RecordSummary

if TYPE_CHECKING:
    from tracevet.app.app import ReviewApp

SORTS = ("flagged first", "id", "duration", "state")
COLUMNS = (
    ("id", "record"),
    ("state", "state"),
    ("duration", "length"),
    ("channels", "ch"),
    ("flags", "flags"),
    ("holder", "holder"),
    ("last", "last decision"),
)
# Column widths at 80 columns; wider terminals give the extra room to the record id, holder and last decision.
BASE_WIDTHS = {"id": 20, "state": 9, "duration": 7, "channels": 2, "flags": 9, "holder": 8, "last": 11}


def column_widths(total: int) -> dict[str, int]:
    """Widths of the worklist columns for a terminal ``total`` columns wide (cell padding included)."""
    widths = dict(BASE_WIDTHS)
    spare = max(0, total - 80)
    # each column has one cell of padding on both sides; the table's own scrollbar takes two
    widths["id"] += min(spare // 2, 44)  # ids are at most 64 characters
    spare -= widths["id"] - BASE_WIDTHS["id"]
    widths["last"] += min(spare // 2, 24)
    spare -= widths["last"] - BASE_WIDTHS["last"]
    widths["holder"] += min(spare, 16)
    return widths
FILTERS = ("all", "to review", "flagged", "decided")
AUTO_REFRESH_SECONDS = 15.0


class WorklistScreen(Screen):
    """Table of records: state, duration, channels, worst flag, holder, last decision."""

    if TYPE_CHECKING:
        app: ReviewApp  # the app these screens run in, with its queue and reviewer

    HELP_TITLE = "worklist"
    KEY_HELP = {
        "open_selected": "open the record under the cursor (claims it; read-only if someone else holds it)",
        "open_next": "open the next record that needs review (flagged first)",
        "cycle_sort": "sort: flagged first, id, duration, state",
        "cycle_filter": "filter: all, to review, flagged, decided",
        "refresh": "re-read the queue",
        "cursor_first": "first row",
        "cursor_last": "last row",
        "quit_app": "quit (releases any claim)",
    }
    BINDINGS = [
        Binding("enter", "open_selected", "Open"),
        Binding("n", "open_next", "Next to review"),
        Binding("o", "cycle_sort", "Sort"),
        Binding("f", "cycle_filter", "Filter"),
        Binding("u", "refresh", "Update"),
        Binding("home", "cursor_first", "First", show=False, priority=True),
        Binding("end", "cursor_last", "Last", show=False, priority=True),
        Binding("q", "quit_app", "Quit"),
    ]

    def __init__(self) -> None:
        super().__init__()
        self.sort_index = 0
        self.filter_index = 0
        self.records: list[RecordSummary] = []
        self._widths: dict[str, int] | None = None

    def compose(self) -> ComposeResult:
        """Status line, the table, the key footer."""
        yield Static(id="worklist-status")
        yield DataTable(id="worklist-table", cursor_type="row", zebra_stripes=True)
        yield Static(id="worklist-detail")
        yield Footer()

    def on_mount(self) -> None:
        """Fill the table (columns sized to the width) and refresh it every few seconds."""
        self.action_refresh()
        self.set_interval(AUTO_REFRESH_SECONDS, self.poll_queue)

    def on_resize(self) -> None:
        """New width: columns take it."""
        if self._widths != column_widths(self.size.width):
            self.action_refresh()

    def poll_queue(self) -> None:
        """Pick up other reviewers' claims and decisions while the worklist is on screen."""
        if self.is_current:
            self.action_refresh()

    def on_screen_resume(self) -> None:
        """Coming back from a record: show what changed; after a decision, the next record to review."""
        self.action_refresh()
        decided, self.app.last_decided = self.app.last_decided, None
        if decided is not None:
            self.move_after(decided)

    def move_after(self, record_id: str) -> None:
        """Put the cursor on the first record after ``record_id`` (in table order) that needs review."""
        rows = self.visible_records()
        ids = [r.id for r in rows]
        if record_id not in ids:
            return
        start = ids.index(record_id)
        table = self.query_one(DataTable)
        for offset in range(1, len(rows) + 1):
            candidate = rows[(start + offset) % len(rows)]
            held_by_other = candidate.holder_live and queue_view.holder_name(candidate.holder) != self.app.reviewer
            if candidate.state in REVIEW_STATES and not held_by_other:
                table.move_cursor(row=(start + offset) % len(rows))
                return
        table.move_cursor(row=start)

    # -- data ---------------------------------------------------------
    def visible_records(self) -> list:
        """The records after the current filter and sort."""
        chosen = FILTERS[self.filter_index]
        rows = [r for r in self.records if queue_view.matches_filter(r, chosen)]
        return queue_view.sort_records(rows, SORTS[self.sort_index])

    def action_refresh(self) -> None:
        """Re-read the queue and redraw the table, keeping the cursor on the same record."""
        table = self.query_one(DataTable)
        selected = self.selected_id()
        self.records = self.app.queue.records()
        rows = self.visible_records()
        widths = column_widths(self.size.width)
        if widths != self._widths:
            table.clear(columns=True)
            for key, label in COLUMNS:
                table.add_column(label, key=key, width=widths[key])
            self._widths = widths
        else:
            table.clear()
        for record in rows:
            table.add_row(
                inert_text(record.id, widths["id"]),
                inert_text(record.state, widths["state"]),
                Text(format_duration(record.duration_s)),
                Text(str(record.n_channels)),
                severity_text(record.worst_severity, record.n_flags),
                inert_text(queue_view.holder_label(record), widths["holder"]),
                inert_text(queue_view.last_decision_cell(record), widths["last"]),
                key=record.id,
            )
        ids = [r.id for r in rows]
        if selected in ids:
            table.move_cursor(row=ids.index(selected))
        waiting = sum(1 for r in self.records if queue_view.matches_filter(r, "to review"))
        status = Text.assemble(
            ("queue ", "dim"),
            inert_text(queue_view.queue_name(self.app.queue), 50),
            ("  reviewer ", "dim"),
            inert_text(self.app.reviewer, 30),
            "\n",
            (f"{len(rows)} of {len(self.records)} shown, {waiting} to review", "bold"),
            ("  sort: ", "dim"),
            SORTS[self.sort_index],
            ("  filter: ", "dim"),
            FILTERS[self.filter_index],
        )
        self.query_one("#worklist-status", Static).update(status)
        if not rows:
            self.query_one("#worklist-detail", Static).update(
                Text("no record matches this filter (f: next filter)", style="dim")
            )
        if not self.records:
            self.notify("this queue holds no records yet: add some with 'tracevet add'", timeout=8)

    def on_data_table_row_highlighted(self, event: DataTable.RowHighlighted) -> None:
        """Show the highlighted record's file name, holder and last decision below the table."""
        record = next((r for r in self.records if r.id == event.row_key.value), None)
        self.query_one("#worklist-detail", Static).update(queue_view.record_detail(record))

    def selected_id(self) -> str | None:
        """Id of the record under the cursor, or None."""
        table = self.query_one(DataTable)
        if table.row_count == 0:
            return None
        row_key, _ = table.coordinate_to_cell_key(table.cursor_coordinate)
        return row_key.value

    # -- actions ------------------------------------------------------
    def action_cursor_first(self) -> None:
        """Cursor to the first row."""
        self.query_one(DataTable).move_cursor(row=0)

    def action_cursor_last(self) -> None:
        """Cursor to the last row."""
        table = self.query_one(DataTable)
        table.move_cursor(row=max(table.row_count - 1, 0))

    def action_cycle_sort(self) -> None:
        """Next sort order."""
        self.sort_index = (self.sort_index + 1) % len(SORTS)
        self.action_refresh()

    def action_cycle_filter(self) -> None:
        """Next filter."""
        self.filter_index = (self.filter_index + 1) % len(FILTERS)
        self.action_refresh()

    def on_data_table_row_selected(self, event: DataTable.RowSelected) -> None:
        """Enter on a row opens it."""
        if event.row_key.value is not None:
            self.open_record(event.row_key.value)

    def action_open_selected(self) -> None:
        """Open the record under the cursor."""
        record_id = self.selected_id()
        if record_id is not None:
            self.open_record(record_id)

    def action_open_next(self) -> None:
        """Open the next record that needs review (flagged ones first)."""
        record_id = queue_view.next_record(self.app.queue, self.app.reviewer)
        if record_id is None:
            self.notify("nothing left to review in this queue")
            return
        self.open_record(record_id)

    def open_record(self, record_id: str) -> None:
        """Open one record (claiming it, or read-only if someone else holds it)."""
        self.app.open_record(record_id)

    def action_quit_app(self) -> None:
        """Leave the app."""
        self.app.release_claim()
        self.app.exit()
