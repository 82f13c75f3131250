"""What the screens need from the queue and the assessment, in one place.

The screens never reach into queue or assessment objects directly; they go
through these small functions, so the user interface stays thin and these
pure functions can be tested without a terminal.
"""

from __future__ import annotations

from dataclasses import dataclass, field

from rich.text import Text

from tracevet.app.display import SEVERITY_RANK, inert_text, severity_key
from tracevet.app.plots import Regions, TracePyramids

# States of tracevet.workqueue records, as the worklist groups them.
DECIDED_STATES = ("accepted", "rejected", "sent-back")
REVIEW_STATES = ("to-review", "in-review")


def holder_name(holder) -> str | None:
    """The reviewer holding a record (from a claim object, a dict or a name), or None."""
    if holder is None or holder == "":
        return None
    for attr in ("reviewer", "name"):
        if hasattr(holder, attr):
            return str(getattr(holder, attr))
    if isinstance(holder, dict):
        return str(holder.get("reviewer", ""))
    return str(holder)


def holder_label(record) -> str:
    """Holder for the worklist column: the reviewer, marked ``(idle)`` when the claim may be taken over."""
    name = holder_name(getattr(record, "holder", None))
    if not name:
        return ""
    return f"{name} (idle)" if getattr(record, "holder_stale", False) else name


def record_detail(record) -> Text:
    """Three inert lines about a record: file it came from and holder; last decision; its note."""
    if record is None:
        return Text("")
    text = Text(no_wrap=True, overflow="ellipsis")
    text.append_text(inert_text(record.id, 30, style="bold"))
    source = getattr(record, "source_name", "")
    if source:
        text.append(" from ", style="dim")
        text.append_text(inert_text(source, 60))
    holder = getattr(record, "holder", None)
    if holder is not None:
        text.append("  held by ", style="dim")
        text.append_text(inert_text(holder.describe() if hasattr(holder, "describe") else holder_name(holder), 80))
    text.append("\n")
    last = getattr(record, "last_decision", None)
    if isinstance(last, dict) and last:
        text.append("last: ", style="dim")
        text.append_text(inert_text(last.get("decision"), 10, style="bold"))
        text.append(" by ", style="dim")
        text.append_text(inert_text(last.get("reviewer"), 30))
        text.append(" on ", style="dim")
        text.append_text(inert_text(last.get("run"), 20))
        text.append("  ")
        text.append_text(inert_text(str(last.get("time", ""))[:16].replace("T", " "), 16, style="dim"))
        text.append("\nnote: ", style="dim")
        text.append_text(inert_text(last.get("note") or "-", 200))
    else:
        text.append("no decision yet", style="dim")
    return text


def queue_name(queue) -> str:
    """The queue's folder, for the status line."""
    return str(getattr(queue, "root", getattr(queue, "path", "")))


def is_decided(record) -> bool:
    """True when the record's current state is a final decision."""
    return str(record.state) in DECIDED_STATES


def matches_filter(record, chosen: str) -> bool:
    """Whether ``record`` passes the worklist filter ``chosen``."""
    if chosen == "to review":
        return str(record.state) in REVIEW_STATES
    if chosen == "flagged":
        return (record.n_flags or 0) > 0
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


def last_decision_word(record) -> str:
    """The last decision's word (``accept``, ``reject``, ``rerun``) or an empty string."""
    last = getattr(record, "last_decision", None)
    if not last:
        return ""
    if isinstance(last, dict):
        return str(last.get("decision") or "")
    return str(last)


def next_record(queue, reviewer: str) -> str | None:
    """Id of the next record this reviewer should review, or None."""
    found = queue.next_for_review(reviewer)
    if found is None:
        return None
    return str(getattr(found, "id", found))


@dataclass
class RunData:
    """One run of a record, loaded: its info, cleaned recording, assessment, plot pyramids."""

    info: object
    cleaned: object
    assessment: object
    pyramids: dict = field(default_factory=dict)
    regions: dict = field(default_factory=dict)

    @property
    def run_id(self) -> str:
        """The run's id."""
        return str(self.info.run_id)


def load_run(queue, record_id: str, info) -> RunData:
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
