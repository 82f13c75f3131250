"""What the screens need from the queue and the assessment, in one place.

The screens never reach into queue or assessment objects directly; they go
through these small functions, so the user interface stays thin and these
pure functions can be tested without a terminal.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from tracevet.app.display import SEVERITY_RANK, severity_key
from tracevet.app.plots import Region, TracePyramids

DECIDED_STATES = ("accepted", "rejected")


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


def queue_name(queue) -> str:
    """The queue's folder, for the status line."""
    return str(getattr(queue, "root", getattr(queue, "path", "")))


def is_decided(record) -> bool:
    """True when the record's current state is a final decision."""
    return str(record.state) in DECIDED_STATES


def matches_filter(record, chosen: str) -> bool:
    """Whether ``record`` passes the worklist filter ``chosen``."""
    if chosen == "to review":
        return not is_decided(record)
    if chosen == "flagged":
        return (record.n_flags or 0) > 0
    if chosen == "decided":
        return is_decided(record)
    return True


def sort_records(records: list, order: str) -> list:
    """Sort for the worklist: ``flagged first`` (undecided, worst severity, most flags), ``id``, ``duration``, ``state``."""
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


def flagged_regions(assessment, channel: int | None = None) -> tuple[Region, ...]:
    """Flagged stretches of time as plot regions (severity from the flag they belong to)."""
    severities = {}
    for flag in flag_list(assessment):
        key = flag.id
        if SEVERITY_RANK[severity_key(flag.severity)] > SEVERITY_RANK[severity_key(severities.get(key))]:
            severities[key] = flag.severity
    regions = []
    for region in getattr(assessment, "regions", ()) or ():
        region_channel = getattr(region, "channel", None)
        if channel is not None and region_channel is not None and region_channel != channel:
            continue
        severity = severities.get(region.flag_id, "warn")
        regions.append(Region(float(region.start_s), float(region.end_s), severity_key(severity)))
    return tuple(sorted(regions, key=lambda r: r.start_s))


def next_region_start(regions: tuple[Region, ...], after_s: float, backwards: bool = False) -> float | None:
    """Start of the next flagged region after ``after_s`` (or the previous one before it)."""
    starts = np.array([r.start_s for r in regions])
    if starts.size == 0:
        return None
    if backwards:
        earlier = starts[starts < after_s - 1e-9]
        return float(earlier.max()) if earlier.size else None
    later = starts[starts > after_s + 1e-9]
    return float(later.min()) if later.size else None


def beat_templates(assessment, channel: int):
    """(time_s, original_template, cleaned_template) of one channel, or None if no beats were found."""
    templates = getattr(assessment, "templates", None)
    if not templates:
        return None
    item = templates[channel] if channel < len(templates) else None
    if item is None:
        return None
    return item.time_s, item.original, item.cleaned
