"""What the record screen does with a decision or a re-run: note prompt, log write, next record.

Kept apart from the drawing and navigation of :mod:`tracevet.app.record_screen`;
:class:`DecisionActions` is mixed into ``RecordScreen`` and uses its state
(``record_id``, ``read_only``, ``summary``, ``shown_run``, ``runs``...). It
never imports the record screen: the next record is opened through
``app.open_record``, so the two modules do not import each other.
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

from rich.text import Text

from tracevet.app import info_text, queue_view
from tracevet.app.display import inert_text
from tracevet.errors import TracevetError
from tracevet.workqueue import DecisionOverride, LastDecision

if TYPE_CHECKING:
    from tracevet.app.app import ReviewApp
    from tracevet.workqueue import RecordSummary, RunInfo

# Actions that change the queue; the record screen shows their keys disabled while read-only.
DECISION_ACTIONS = frozenset({"decide", "rerun", "send_back_with_settings"})


def override_question(record_id: str, previous: LastDecision, decision: str) -> Text:
    """What the override confirmation shows: the standing decision, by whom, when, and its note."""
    text = Text()
    text.append_text(inert_text(record_id, 40, style="bold"))
    text.append(" was ")
    text.append_text(inert_text(previous.past_tense, 30, style="bold"))
    text.append(" by ")
    text.append_text(inert_text(previous.reviewer, 40, style="bold"))
    text.append(f" {queue_view.age_text(previous.time)} (log entry {previous.seq}, ")
    text.append_text(inert_text(previous.run, 20))
    text.append(").\nTheir note: ")
    text.append_text(inert_text(previous.note or "(none)", 300, style="italic"))
    text.append(f"\n\nYour {decision} will be logged as overriding entry {previous.seq}.")
    return text


class DecisionActions:
    """Accept, reject, send back, re-run: the actions of the record screen that change the queue."""

    if TYPE_CHECKING:  # state and methods of the record screen this class is mixed into
        app: ReviewApp
        notify: Any
        record_id: str
        summary: RecordSummary | None
        runs: list[RunInfo]
        current_run_id: str | None
        previous_run_id: str | None
        shown_run_id: str | None
        read_only: bool
        panel: str
        suggestion_state: Any

        @property
        def holder_text(self) -> str: ...

        @property
        def shown_run(self) -> queue_view.RunData | None: ...

        def show_run(self, run_id: str) -> None: ...

        def update_title(self) -> None: ...

        def update_decision_line(self) -> None: ...

    def action_decide(self, decision: str) -> None:
        """Ask for a note, then write ``decision`` for the shown run to the log.

        When another reviewer's decision still stands, ask first whether to
        override it.
        """
        run = self.shown_run
        if self.read_only:
            self.notify(f"read-only: {self.holder_text}", severity="warning")
            return
        if run is None:
            self.notify("nothing to decide on yet: the record has no run", severity="warning")
            return
        previous = self.summary.standing_decision if self.summary is not None else None
        if previous is not None and previous.reviewer != self.app.reviewer:
            self.confirm_override(decision, previous)
        else:
            self.ask_note(decision, override=False)

    def confirm_override(self, decision: str, previous: LastDecision, requested=None) -> None:
        """Show the colleague's standing decision and ask whether to override it."""
        from tracevet.app.confirm_screen import ConfirmScreen

        def answered(yes: bool | None) -> None:
            if yes:
                self.ask_note(decision, override=True, requested=requested)
            else:
                self.notify("not overridden: nothing written")

        body = override_question(self.record_id, previous, decision)
        question = ConfirmScreen("OVERRIDE A COLLEAGUE'S DECISION?", body, f"Override with {decision}?")
        self.app.push_screen(question, answered)

    def action_send_back_with_settings(self) -> None:
        """Send back for a re-run with settings chosen in the re-run form (attached to the decision)."""
        from tracevet.app.rerun_screen import RerunScreen

        run = self.shown_run
        if self.read_only or run is None:
            return
        settings = dict(run.info.settings or {})

        def chosen(requested) -> None:
            if requested is None:
                return
            previous = self.summary.standing_decision if self.summary is not None else None
            if previous is not None and previous.reviewer != self.app.reviewer:
                self.confirm_override("rerun", previous, requested)
            else:
                self.ask_note("rerun", override=False, requested=requested)

        self.app.push_screen(RerunScreen(self.record_id, settings, run.run_id, send_back=True), chosen)

    def ask_note(self, decision: str, override: bool, requested=None) -> None:
        """The note prompt; its answer is written to the log (with ``requested`` settings for a send-back)."""
        from tracevet.app.note_screen import NoteScreen

        run = self.shown_run
        if run is None:
            return
        fail = queue_view.has_fail(run.assessment)
        if decision == "reject":
            reason = "a reject needs a note saying why"
        elif decision == "accept" and fail:
            reason = "this run has a FAIL flag: accepting it needs a note saying why"
        else:
            reason = ""
        last = self.summary.last if self.summary is not None else None
        label = info_text.run_label(run.info, self.runs, self.current_run_id)
        prompt = NoteScreen(decision, self.record_id, label, reason, previous=queue_view.decision_text(last))

        def save(note: str | None) -> None:
            if note is None:
                self.notify("cancelled: nothing written")
                return
            self.save_decision(decision, note, run.run_id, override, requested)

        self.app.push_screen(prompt, save)

    def save_decision(self, decision: str, note: str, run_id: str, override: bool = False, requested=None) -> None:
        """Write the decision (fsynced by the queue) and only then say saved; move on."""
        try:
            entry = self.app.queue.decide(
                self.record_id, decision, note, self.app.reviewer, run_id=run_id, override=override,
                requested_settings=requested,
            )
        except DecisionOverride as exc:
            # someone decided while the note was being typed: show it and ask again
            self.refresh_summary()
            self.notify(f"not saved: {exc.one_line()}", severity="error", timeout=8)
            return
        except TracevetError as exc:
            self.notify(f"not saved: {exc.one_line()}", severity="error", timeout=8)
            return
        self.app.held_claim = None  # the queue ends the claim with the decision
        self.app.last_decided = self.record_id
        overridden = entry.get("overrides")
        what = f" (log entry {entry.seq}" + (f", overrides entry {overridden.get('seq')})" if overridden else ")")
        self.app.notify(f"saved: {decision} {self.record_id} run {run_id}{what}", timeout=5)
        self.move_on()

    def refresh_summary(self) -> None:
        """Re-read the record's summary (last decision, state) from the queue."""
        try:
            self.summary = self.app.queue.record(self.record_id)
        except TracevetError:
            return
        self.update_decision_line()
        self.update_title()

    def move_on(self) -> None:
        """Release this record and open the next one to review (or go back to the worklist)."""
        self.app.release_claim()
        next_id = queue_view.next_record(self.app.queue, self.app.reviewer)
        if next_id is None or next_id == self.record_id:
            self.app.pop_screen()
            if next_id is None:
                self.app.notify("nothing left to review in this queue")
            return
        self.app.open_record(next_id, replace=True)

    def action_rerun(self) -> None:
        """Open the re-run form pre-filled with the shown run's settings."""
        from tracevet.app.suggestion_view import rerun_form

        if self.read_only:
            self.notify(f"read-only: {self.holder_text}", severity="warning")
            return
        run = self.shown_run
        settings = dict(run.info.settings or {}) if run is not None else {}

        def finished(new_run_id: object) -> None:
            if new_run_id:
                self.previous_run_id = self.shown_run_id
                self.panel = "compare" if self.previous_run_id else "flags"
                self.runs = list(self.app.queue.runs(self.record_id))
                self.refresh_summary()
                current = self.summary.current_run_id if self.summary is not None else None
                self.current_run_id = str(current or new_run_id)
                self.show_run(str(new_run_id))

        source_run = run.run_id if run is not None else ""
        self.app.push_screen(rerun_form(self.record_id, settings, source_run, self.suggestion_state), finished)
