"""Record states of a work queue: one owner for their names, words and groups.

Every layer that shows or tests a state (index, :class:`~tracevet.workqueue.Queue`,
the CLI, the review app) imports :class:`RecordState` from here. It is a
``StrEnum``: a member *is* its text (``RecordState.TO_REVIEW == "to-review"``),
so JSON output and stored index files keep the plain words.
"""

from __future__ import annotations

from enum import StrEnum


class RecordState(StrEnum):
    """Where a record is in the queue's work (plain words of our own)."""

    TO_CLEAN = "to-clean"
    TO_REVIEW = "to-review"
    IN_REVIEW = "in-review"
    ACCEPTED = "accepted"
    REJECTED = "rejected"
    SENT_BACK = "sent-back"

    @property
    def meaning(self) -> str:
        """A few words saying what the state means (for ``tracevet status`` and the app)."""
        return _MEANINGS[self]

    @property
    def decided(self) -> bool:
        """True for the states a decision leaves (accepted, rejected, sent back)."""
        return self in DECIDED_STATES


_MEANINGS = {
    RecordState.TO_CLEAN: "waiting to be cleaned",
    RecordState.TO_REVIEW: "ready for review",
    RecordState.IN_REVIEW: "being reviewed",
    RecordState.ACCEPTED: "accepted",
    RecordState.REJECTED: "rejected",
    RecordState.SENT_BACK: "sent back for a re-run",
}

STATES = tuple(RecordState)
DECIDED_STATES = (RecordState.ACCEPTED, RecordState.REJECTED, RecordState.SENT_BACK)
REVIEW_STATES = (RecordState.TO_REVIEW, RecordState.IN_REVIEW)
# The state each decision word leaves a record in.
STATE_AFTER = {"accept": RecordState.ACCEPTED, "reject": RecordState.REJECTED, "rerun": RecordState.SENT_BACK}
# Past-tense words of each decision, for messages ("rejected by mira").
DECISION_PAST = {"accept": "accepted", "reject": "rejected", "rerun": "sent back for a re-run"}
