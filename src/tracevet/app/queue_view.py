"""What the screens need from the queue and the assessment, in one place.

The screens never reach into queue or assessment objects directly; they go
through these small functions, so the user interface stays thin and these
pure functions can be tested without a terminal.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from datetime import datetime, timezone

import numpy as np
from rich.text import Text

from tracevet.app.display import SEVERITY_RANK, inert_text, severity_key
from tracevet.app.plots import Regions, TracePyramids
from tracevet.assessment import Assessment
from tracevet.recording import Recording
from tracevet.workqueue import DECIDED_STATES, REVIEW_STATES, Claim, LastDecision, Queue, RecordSummary, RunInfo

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


def flagged_regions(run: RunData, channel: int) -> Regions:
    """The flagged stretches of one channel, with their flag's severity (cached per run).

    Taken from each flag's ``where`` (the stretches the damage covers); an
    assessment stored before flags said where falls back to the flagged
    beats kept in its beat data.
    """
    if channel in run.regions:
        return run.regions[channel]
    beats = _channel_beats(run.assessment, channel)
    name = beats.channel if beats is not None else None
    flags = [f for f in flag_list(run.assessment) if name is None or f.channel in (name, "")]
    items = [(a, b, f.severity) for f in flags for a, b in f.where]
    if not items and beats is not None:
        severities: dict[str, str] = {}
        for flag in flags:
            if SEVERITY_RANK[severity_key(flag.severity)] > SEVERITY_RANK[severity_key(severities.get(flag.id))]:
                severities[flag.id] = flag.severity
        items = [(start, end, severities.get(str(flag_id), "warn")) for start, end, flag_id in beats.regions]
    run.regions[channel] = Regions.from_items(items)
    return run.regions[channel]


def channel_name(assessment: Assessment, channel: int) -> str | None:
    """Name of channel ``channel`` in the assessment (None when it has no beat data for it)."""
    beats = _channel_beats(assessment, channel)
    return None if beats is None else beats.channel


def stretch_templates(run: RunData, original: Recording, channel: int, start_s: float, end_s: float):
    """Averaged beat of the beats inside one stretch: (time_s, original, cleaned, n_beats), or None.

    The median, sample by sample, of the beat windows of every dominant-shape
    beat whose R peak lies in ``[start_s, end_s]``, on the same time axis as
    the whole-record template (the template is the median beat; common
    practice). Vectorised: one fancy-index gather of the windows.
    """
    beats = _channel_beats(run.assessment, channel)
    if beats is None or len(beats.template_time_s) < 2:
        return None
    fs = original.fs
    offsets = np.round(np.asarray(beats.template_time_s) * fs).astype(np.int64)
    peaks = np.asarray(beats.r_peaks, dtype=np.int64)
    labels = np.asarray(beats.beat_labels)
    times = peaks / fs
    chosen = peaks[(times >= start_s) & (times <= end_s) & (labels[: peaks.size] == 0)]
    n = original.n_samples
    chosen = chosen[(chosen + offsets[0] >= 0) & (chosen + offsets[-1] < n)]
    if chosen.size == 0:
        return None
    index = chosen[:, None] + offsets[None, :]
    orig = np.median(np.asarray(original.channel(channel))[index], axis=0)
    clean = np.median(np.asarray(run.cleaned.channel(channel))[index], axis=0)
    return np.asarray(beats.template_time_s), orig, clean, int(chosen.size)


def fiducial_marks(time_s, original_template, rr_s: float, fs: float) -> tuple[float, float] | None:
    """(J point, ST reading point) in seconds relative to R, located on the original template.

    Uses the assessment's own delineation (:func:`tracevet.assessment.fiducials.find_fiducials`):
    J where the QRS slope falls quiet, ST at J+80 ms (J+60 ms when RR < 0.6 s).
    """
    from tracevet.assessment.fiducials import find_fiducials

    t = np.asarray(time_s, dtype=np.float64)
    template = np.asarray(original_template, dtype=np.float64)
    if t.size < 8 or not np.all(np.isfinite(template)):
        return None
    centre = int(np.argmin(np.abs(t)))
    try:
        points = find_fiducials(template, centre, fs, rr_s, 0.0)
    except (ValueError, IndexError):
        return None
    j_s = float(np.interp(points.offset, np.arange(t.size), t))
    return j_s, j_s + points.st_delay_ms / 1000.0


def median_rr_s(assessment: Assessment, channel: int, fs: float) -> float:
    """Median RR interval of one channel in seconds (0.8 s when fewer than two beats)."""
    beats = _channel_beats(assessment, channel)
    if beats is None or len(beats.r_peaks) < 2:
        return 0.8
    return float(np.median(np.diff(np.asarray(beats.r_peaks, dtype=np.float64)))) / fs


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
