"""The review app: one Textual ``App`` holding the queue, the reviewer and the open claim."""

from __future__ import annotations

import os
from pathlib import Path

from textual.app import App
from textual.binding import Binding

from tracevet.app.display import use_palette
from tracevet.app.palette import palette_for
from tracevet.app.worklist_screen import WorklistScreen
from tracevet.errors import TracevetError
from tracevet.workqueue import ClaimedByOther, Queue


# How often an open record's claim is refreshed while the reviewer works on it.
CLAIM_TOUCH_SECONDS = 30.0


class ReviewApp(App):
    """Step through a queue, look at what cleaning did, decide, re-run, sign off.

    Parameters
    ----------
    queue : tracevet.workqueue.Queue
        The open queue.
    reviewer : str
        Name written into claims and decisions.
    colour : bool, optional
        Draw coloured plots; default: on unless ``NO_COLOR`` is set.
    """

    CSS_PATH = Path(__file__).with_name("review.tcss")
    TITLE = "tracevet review"
    ENABLE_COMMAND_PALETTE = False
    BINDINGS = [
        Binding("question_mark,f1", "help", "Keys", key_display="?"),
        Binding("ctrl+q", "quit", "Quit", show=False, priority=True),
    ]
    KEY_HELP = {"help": "this help (keys of the screen you are on)", "quit": "quit from anywhere"}

    def __init__(self, queue: Queue, reviewer: str, colour: bool | None = None):
        super().__init__()
        self.queue = queue
        self.reviewer = reviewer
        self.colour = (os.environ.get("NO_COLOR") is None) if colour is None else bool(colour)
        self.palette = palette_for(self.colour)
        use_palette(self.palette)
        self.held_claim: str | None = None
        self.last_decided: str | None = None  # the worklist puts its cursor after it

    def on_mount(self) -> None:
        """Show the worklist and start refreshing held claims."""
        self.push_screen(WorklistScreen())
        self.set_interval(CLAIM_TOUCH_SECONDS, self.touch_held_claim)

    def action_help(self) -> None:
        """Open the key reference for the screen on top."""
        from tracevet.app.help_screen import HelpScreen

        if not isinstance(self.screen, HelpScreen):
            self.push_screen(HelpScreen(self.screen))

    async def action_quit(self) -> None:
        """Quit, releasing the open record first."""
        self.release_claim()
        self.exit()

    # -- claims -------------------------------------------------------
    def claim(self, record_id: str) -> None:
        """Claim ``record_id`` for this reviewer (raises ClaimedByOther)."""
        self.queue.claim(record_id, self.reviewer)
        self.held_claim = record_id

    def release_claim(self) -> None:
        """Release the record this app holds, if any."""
        record_id, self.held_claim = self.held_claim, None
        if record_id is not None:
            try:
                self.queue.release(record_id, self.reviewer)
            except Exception as exc:  # a lost claim must not trap the reviewer in the screen
                self.notify(f"could not release the claim: {type(exc).__name__}", severity="warning")

    def touch_held_claim(self) -> None:
        """Tell the queue the reviewer is still working on the held record.

        If the claim was taken over meanwhile (it had lapsed), the open
        record turns read-only and says who holds it now.
        """
        if self.held_claim is None:
            return
        try:
            self.queue.touch_claim(self.held_claim, self.reviewer)
        except ClaimedByOther as exc:
            self.held_claim = None
            lose = getattr(self.screen, "lose_claim", None)
            if lose is not None:
                lose(exc.holder)
            self.notify(f"this record was taken over: {exc.holder.describe()}", severity="error", timeout=10)
        except TracevetError as exc:
            self.notify(f"could not refresh the claim: {exc.one_line()}", severity="warning")

    def open_record(self, record_id: str, replace: bool = False) -> None:
        """Show one record (claiming it, or read-only); ``replace`` swaps it for the screen on top."""
        from tracevet.app.record_screen import RecordScreen

        screen = RecordScreen(record_id)
        if replace:
            self.switch_screen(screen)
        else:
            self.push_screen(screen)

    def on_unmount(self) -> None:
        """Leave nothing claimed behind."""
        self.release_claim()
