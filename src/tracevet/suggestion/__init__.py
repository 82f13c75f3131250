"""Suggested settings for a record: search candidate cleanings, assess each, rank, verify the winner.

Layer: after ``assessment``, before ``workqueue`` (it cleans with
:mod:`tracevet.cleaning` and scores with :mod:`tracevet.assessment`; it never
imports the queue, the app or the command line).

Public API::

    from tracevet.suggestion import suggest, Suggestion, CandidateResult, NoBeats, SuggestionCancelled

    s = suggest(recording, base=None, current=None, limits=None, progress=None, cancel=None)
    s.best.settings, s.best.flags, s.runners_up, s.reason, s.cleaned, s.assessment

See docs/suggest.md.
"""

from tracevet.suggestion.result import CandidateResult, Suggestion, rank_key
from tracevet.suggestion.search import (
    NO_BEATS,
    NoBeats,
    PeakCache,
    SuggestionCancelled,
    flagged_stretches,
    plan_windows,
    suggest,
)

__all__ = [
    "NO_BEATS",
    "CandidateResult",
    "NoBeats",
    "PeakCache",
    "Suggestion",
    "SuggestionCancelled",
    "flagged_stretches",
    "plan_windows",
    "rank_key",
    "suggest",
]
