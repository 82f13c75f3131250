"""What the screens need from the queue and the assessment, in one place.

The screens never reach into queue or assessment objects directly; they go
through these small functions, so the user interface stays thin and these
pure functions can be tested without a terminal.
"""

from __future__ import annotations

from datetime import datetime, timezone
from dataclasses import dataclass, field

from rich.text import Text

from tracevet.app.display import SEVERITY_RANK, inert_text, severity_key
from tracevet.app.plots import Regions, TracePyramids
from tracevet.assessment import Assessment
from tracevet.recording import Recording
from tracevet.workqueue import DECIDED_STATES, REVIEW_STATES, Claim, LastDecision, Queue, RecordSummary, RunInfo

__all__ = ["DECIDED_STATES", "REVIEW_STATES"]


def holder_name(holder: Claim | None) -> str | None:
    """The reviewer holding a record, or None."""
    return None if holder is None else holder.reviewer


def holder_label(record: RecordSummary) -> str:
    """Holder for the worklist column: the reviewer, marked ``(idle)`` when the claim may be taken over."""
    name = holder_name(record.holder)
    if not name:
        return ""
    return f"{name} (idle)" if record.holder_stale else name


def age_text(time_text: str, now: datetime | None = None) -> str:
    """How long ago an ISO UTC time was: ``just now``, ``12 min ago``, ``3 h ago``, ``2 d ago``."""
    try:
        then = datetime.fromisoformat(str(time_text).replace("Z", "+00:00"))
    except ValueError:
        return str(time_text)[:16].replace("T", " ")
    if then.tzinfo is None:
        then = then.replace(tzinfo=timezone.utc)
    seconds = ((now or datetime.now(timezone.utc)) - then).total_seconds()
    if seconds < 60:
        return "just now"
    if seconds < 3600:
        return f"{seconds / 60:.0f} min ago"
    if seconds < 86400 * 2:
        return f"{seconds / 3600:.0f} h ago"
    return f"{seconds / 86400:.0f} d ago"


DECISION_STYLE = {"accept": "bold", "reject": "bold reverse", "rerun": "bold underline"}


def decision_text(last: LastDecision | None, note_chars: int = 200) -> Text:
    """One inert line about a decision: word, who, run, when, entry, overridden entry, note.

    ``note_chars`` 0 leaves the note out.
    """
    text = Text(no_wrap=True, overflow="ellipsis")
    if last is None:
        text.append("no decision yet", style="dim")
        return text
    text.append("last: ", style="dim")
    text.append_text(inert_text(last.past_tense, 24, style=DECISION_STYLE.get(last.decision, "bold")))
    text.append(" by ", style="dim")
    text.append_text(inert_text(last.reviewer, 30, style="bold"))
    text.append(" ")
    text.append(age_text(last.time))
    text.append(" on ", style="dim")
    text.append_text(inert_text(last.run, 20))
    text.append(f" (entry {last.seq}", style="dim")
    if last.overrides:
        text.append(", overrode ", style="dim")
        text.append_text(inert_text(last.overrides.get("reviewer"), 20))
        text.append(f" #{inert_text(last.overrides.get('seq'), 8).plain}", style="dim")
    text.append(")", style="dim")
    if last.note and note_chars > 0:
        text.append("  ")
        text.append_text(inert_text(f"\u201c{last.note}\u201d", note_chars, style="italic"))
    return text


def record_detail(record: RecordSummary | None) -> Text:
    """Three inert lines about a record: file it came from and holder; last decision; its note."""
    if record is None:
        return Text("")
    text = Text(no_wrap=True, overflow="ellipsis")
    text.append_text(inert_text(record.id, 30, style="bold"))
    if record.source_name:
        text.append(" from ", style="dim")
        text.append_text(inert_text(record.source_name, 60))
    if record.holder is not None:
        text.append("  held by ", style="dim")
        text.append_text(inert_text(record.holder.describe(), 80))
    text.append("\n")
    last = record.last
    if last is None:
        text.append("no decision yet", style="dim")
        return text
    text.append_text(decision_text(last, note_chars=0))
    text.append("\nnote: ", style="dim")
    text.append_text(inert_text(last.note or "-", 200))
    return text


def queue_name(queue: Queue) -> str:
    """The queue's folder, for the status line."""
    return str(queue.root)


def is_decided(record: RecordSummary) -> bool:
    """True when the record's current state is a final decision."""
    return record.state in DECIDED_STATES


def matches_filter(record: RecordSummary, chosen: str) -> bool:
    """Whether ``record`` passes the worklist filter ``chosen``."""
    if chosen == "to review":
        return record.state in REVIEW_STATES
    if chosen == "flagged":
        return record.n_flags > 0
    if chosen == "decided":
        return is_decided(record)
    return True


def sort_records(records: list, order: str) -> list:
    """Sort for the worklist.

    Orders: ``flagged first`` (undecided, worst severity, most flags), ``id``, ``duration``, ``state``.
    """
    if order == "id":
        return sorted(records, key=lambda r: str(r.id))
    if order == "duration":
        return sorted(records, key=lambda r: (-(r.duration_s or 0), str(r.id)))
    if order == "state":
        return sorted(records, key=lambda r: (str(r.state), str(r.id)))
    return sorted(
        records,
        key=lambda r: (
            is_decided(r),
            -SEVERITY_RANK[severity_key(r.worst_severity)],
            -(r.n_flags or 0),
            str(r.id),
        ),
    )


def last_decision_cell(record: RecordSummary) -> str:
    """The worklist's ``last`` cell: decision word and who (``reject mira``), or empty."""
    last = record.last
    return "" if last is None else f"{last.decision} {last.reviewer}"


def next_record(queue: Queue, reviewer: str) -> str | None:
    """Id of the next record this reviewer should review, or None."""
    return queue.next_for_review(reviewer)


@dataclass
class RunData:
    """One run of a record, loaded: its info, cleaned recording, assessment, plot pyramids."""

    info: RunInfo
    cleaned: Recording
    assessment: Assessment
    pyramids: dict = field(default_factory=dict)
    regions: dict = field(default_factory=dict)

    @property
    def run_id(self) -> str:
        """The run's id."""
        return str(self.info.run_id)


def load_run(queue: Queue, record_id: str, info: RunInfo) -> RunData:
    """Load one run (cleaned recording and assessment) from the queue."""
    cleaned, assessment = queue.load_run(record_id, info.run_id)
    return RunData(info, cleaned, assessment)


def pyramids_for(run: RunData, original, channel: int) -> TracePyramids:
    """The plot pyramids of one channel of a run (built once, then cached)."""
    if channel not in run.pyramids:
        run.pyramids[channel] = TracePyramids.from_arrays(
            original.channel(channel), run.cleaned.channel(channel), original.fs
        )
    return run.pyramids[channel]


def flag_list(assessment) -> list:
    """The assessment's flags, worst first."""
    flags = list(getattr(assessment, "flags", ()) or ())
    return sorted(flags, key=lambda f: -SEVERITY_RANK[severity_key(f.severity)])


def worst_severity(assessment) -> str:
    """``fail``, ``warn`` or ``none``."""
    return severity_key(getattr(assessment, "worst_severity", None))


def has_fail(assessment) -> bool:
    """True when at least one flag is ``fail`` (accepting then needs a note)."""
    return any(f.severity == "fail" for f in flag_list(assessment))


def metric_items(assessment) -> list[tuple[str, object]]:
    """The assessment's metrics as (name, value) pairs, in name order."""
    metrics = getattr(assessment, "metrics", {}) or {}
    return sorted(metrics.items(), key=lambda kv: str(kv[0]))


def _channel_beats(assessment, channel: int):
    channels = list(getattr(assessment, "channels", ()) or ())
    return channels[channel] if 0 <= channel < len(channels) else None


def flagged_regions(run: "RunData", channel: int) -> Regions:
    """Flagged beats and stretches of one channel, with their flag's severity (cached per run)."""
    if channel in run.regions:
        return run.regions[channel]
    beats = _channel_beats(run.assessment, channel)
    if beats is None:
        run.regions[channel] = Regions.from_items([])
        return run.regions[channel]
    name = beats.channel
    severities: dict[str, str] = {}
    for flag in flag_list(run.assessment):
        if getattr(flag, "channel", name) not in (name, None, ""):
            continue
        if SEVERITY_RANK[severity_key(flag.severity)] > SEVERITY_RANK[severity_key(severities.get(flag.id))]:
            severities[flag.id] = flag.severity
    run.regions[channel] = Regions.from_items(
        (start, end, severities.get(str(flag_id), "warn")) for start, end, flag_id in beats.regions
    )
    return run.regions[channel]


def beat_templates(assessment, channel: int):
    """(time_s, original_template, cleaned_template) of one channel, or None if it has no template."""
    beats = _channel_beats(assessment, channel)
    if beats is None or len(beats.template_time_s) < 2:
        return None
    return beats.template_time_s, beats.template_original, beats.template_cleaned


def beat_count(assessment, channel: int) -> int:
    """Number of R peaks detected in one channel (0 when unknown)."""
    beats = _channel_beats(assessment, channel)
    return 0 if beats is None else int(len(beats.r_peaks))
