"""What the record screen does with a decision or a re-run: note prompt, log write, next record.

Kept apart from the drawing and navigation of :mod:`tracevet.app.record_screen`;
:class:`DecisionActions` is mixed into ``RecordScreen`` and uses its state
(``record_id``, ``read_only``, ``shown_run``, ``runs``...).
"""

from __future__ import annotations

from tracevet.app import info_text, queue_view
from tracevet.errors import TracevetError


class DecisionActions:
    """Accept, reject, send back, re-run: the actions of the record screen that change the queue."""

    def action_decide(self, decision: str) -> None:
        """Ask for a note, then write ``decision`` for the shown run to the log."""
        from tracevet.app.note_screen import NoteScreen

        run = self.shown_run
        if self.read_only:
            self.notify(f"read-only: {self.holder_text}", severity="warning")
            return
        if run is None:
            self.notify("nothing to decide on yet: the record has no run", severity="warning")
            return
        fail = queue_view.has_fail(run.assessment)
        if decision == "reject":
            reason = "a reject needs a note saying why"
        elif decision == "accept" and fail:
            reason = "this run has a FAIL flag: accepting it needs a note saying why"
        else:
            reason = ""
        prompt = NoteScreen(
            decision, self.record_id, info_text.run_label(run.info, self.runs, self.current_run_id), reason
        )

        def save(note: str | None) -> None:
            if note is None:
                self.notify("cancelled: nothing written")
                return
            self.save_decision(decision, note, run.run_id)

        self.app.push_screen(prompt, save)

    def save_decision(self, decision: str, note: str, run_id: str) -> None:
        """Write the decision (fsynced by the queue) and only then say saved; move on."""
        try:
            entry = self.app.queue.decide(self.record_id, decision, note, self.app.reviewer, run_id=run_id)
        except TracevetError as exc:
            self.notify(f"not saved: {exc.one_line()}", severity="error", timeout=8)
            return
        self.app.held_claim = None  # the queue ends the claim with the decision
        seq = getattr(entry, "seq", None)
        where = f" (log entry {seq})" if seq else ""
        self.app.notify(f"saved: {decision} {self.record_id} run {run_id}{where}", timeout=5)
        self.move_on()

    def move_on(self) -> None:
        """Release this record and open the next one to review (or go back to the worklist)."""
        self.app.release_claim()
        next_id = queue_view.next_record(self.app.queue, self.app.reviewer)
        if next_id is None or next_id == self.record_id:
            self.app.pop_screen()
            if next_id is None:
                self.app.notify("nothing left to review in this queue")
            return
        from tracevet.app.record_screen import RecordScreen

        self.app.switch_screen(RecordScreen(next_id))

    def action_rerun(self) -> None:
        """Open the re-run form pre-filled with the shown run's settings."""
        from tracevet.app.rerun_screen import RerunScreen

        if self.read_only:
            self.notify(f"read-only: {self.holder_text}", severity="warning")
            return
        run = self.shown_run
        settings = dict(getattr(run.info, "settings", None) or {}) if run is not None else {}

        def finished(new_run_id: str | None) -> None:
            if new_run_id:
                self.previous_run_id = self.shown_run_id
                self.panel = "compare" if self.previous_run_id else "flags"
                self.runs = list(self.app.queue.runs(self.record_id))
                self.current_run_id = str(
                    getattr(self.app.queue.record(self.record_id), "current_run_id", None) or new_run_id
                )
                self.show_run(str(new_run_id))

        source_run = run.run_id if run is not None else ""
        self.app.push_screen(RerunScreen(self.record_id, settings, source_run), finished)

