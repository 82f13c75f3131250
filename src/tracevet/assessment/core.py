"""``assess``: compare a cleaned recording with its original, channel by channel."""

from __future__ import annotations

from dataclasses import replace
from typing import Callable, Mapping

import numpy as np

from tracevet.assessment.beats import build_windows, windows_at
from tracevet.assessment.flags import Flag, evaluate, judge, merge_stretches, no_beats_flag
from tracevet.assessment.limits import Limits, LimitSpec, default_limits, limits_from_mapping
from tracevet.assessment.result import Assessment, ChannelBeats
from tracevet.assessment.rules import RULE
from tracevet.assessment.shape_measures import measure_templates
from tracevet.assessment.signal_checks import clipped_runs, edge_deviation, signal_comparison
from tracevet.assessment.stretches import (
    STRETCH_BEATS,
    assess_group,
    baseline_excursions,
    excursion_flag,
    gaps,
)
from tracevet.errors import InputError
from tracevet.recording.model import Recording

# Every metric of a channel, in report order; all are present (None when not measurable).
METRIC_NAMES = (
    "beat_count",
    "dominant_beat_count",
    "other_beat_count",
    "heart_rate_bpm",
    "r_amplitude",
    "template_noise",
    "prd_percent",
    "prdn_percent",
    "rmse",
    "correlation",
    "r_amplitude_ratio",
    "r_timing_shift_ms",
    "qrs_width_ms",
    "qrs_width_change_ms",
    "st_change",
    "st_delay_ms",
    "p_amplitude_ratio",
    "t_amplitude_ratio",
    "ringing_rms",
    "removed_beat_fraction",
    "beat_shape_change_percent",
    "clipped_runs",
    "edge_deviation",
    "signal_prdn_percent",
    "removed_rms",
    "beats_measured",
    "stretches_flagged",
    "worst_stretch_r_amplitude_ratio",
    "worst_stretch_st_change",
    "baseline_excursion",
    "unmeasured_s",
)

Detector = Callable[[np.ndarray, float], np.ndarray]


def _default_detector() -> Detector:
    from tracevet.assessment.qrs import detect_qrs

    return detect_qrs


def _check_pair(original: Recording, cleaned: Recording) -> None:
    src = cleaned.source
    if original.n_channels != cleaned.n_channels:
        raise InputError(src, f"has {cleaned.n_channels} channel(s), the original {original.n_channels}")
    if original.n_samples != cleaned.n_samples:
        raise InputError(src, f"has {cleaned.n_samples} samples per channel, the original {original.n_samples}")
    if abs(original.fs - cleaned.fs) > 1e-9 * original.fs:
        raise InputError(src, f"sampled at {cleaned.fs:g} Hz, the original at {original.fs:g} Hz")
    if original.units and cleaned.units and original.units != cleaned.units:
        raise InputError(src, f"in {cleaned.units}, the original in {original.units}")
    for rec in (original, cleaned):
        if not np.isfinite(rec.samples).all():
            raise InputError(rec.source, "contains NaN or infinite samples")


def resolve_limits(limits, kind: str, units: str | None) -> Limits:
    """Limits in force: defaults for (kind, units) with any overrides applied.

    ``limits`` may be ``None``, a :class:`Limits`, a mapping ``flag_id ->
    LimitSpec`` (from :func:`limits_from_mapping`) or a raw ``flag_limits``
    mapping as read from YAML (validated here).
    """
    if isinstance(limits, Limits):
        return limits
    base = default_limits(kind, units)
    if limits is None:
        return base
    if not isinstance(limits, Mapping):
        raise InputError("flag_limits", "must be a mapping of flag ids to limits")
    if all(isinstance(v, LimitSpec) for v in limits.values()):
        return base.with_overrides(limits)
    return base.with_overrides(limits_from_mapping(limits, "flag_limits"))


def beats_within(where, peaks_s: np.ndarray, pre_s: float, post_s: float) -> int:
    """Number of beats whose window [R - pre, R + post] overlaps one of the sorted, merged stretches ``where``."""
    if not where or peaks_s.size == 0:
        return 0
    bounds = np.asarray(where, dtype=np.float64)
    # The last stretch starting before the beat window's end must end after its start.
    i = np.searchsorted(bounds[:, 0], peaks_s + post_s, side="right") - 1
    ok = i >= 0
    return int(np.sum(ok & (bounds[np.maximum(i, 0), 1] >= peaks_s - pre_s)))


def _locate(flags: list[Flag], duration: float, extra: dict, peaks_s: np.ndarray, pre_s: float, post_s: float,
            measured: int, local: dict | None = None) -> list[Flag]:
    """Give every flag its ``where`` stretches and beat counts.

    ``local`` maps a flag id to ``(where, more, affected, measured)`` for the
    flags judged stretch by stretch; ``extra`` maps a flag id to the sample
    stretches of the whole-trace checks (clipping, edges). Any other flag was
    read from the whole record's templates and covers the whole record.
    """
    out = []
    for flag in flags:
        if local and flag.id in local:
            where, more, affected, n = local[flag.id]
        elif flag.id in extra and flag.id != "no-beats":
            spans = extra[flag.id]
            where, more = merge_stretches([a for a, _ in spans], [b for _, b in spans])
            affected, n = beats_within(where, peaks_s, pre_s, post_s), measured
        else:
            where, more, affected, n = ((0.0, duration),), 0, measured, measured
        out.append(replace(flag, where=where, where_more=more, beats_affected=affected, beats_measured=n))
    return out


def assess_channel(
    original: np.ndarray,
    cleaned: np.ndarray,
    fs: float,
    channel: str,
    limits: Limits,
    detector: Detector,
) -> tuple[dict, list[Flag], ChannelBeats]:
    """Assess one channel; return (metrics, flags, beat data).

    Parameters
    ----------
    original, cleaned : numpy.ndarray
        1-D traces of equal length, finite.
    fs : float
        Sampling rate (Hz).
    channel : str
        Channel name for messages.
    limits : Limits
        Limits in force.
    detector : callable
        ``detector(signal, fs) -> R-peak sample indices``, run on the original.
    """
    metrics: dict = {name: None for name in METRIC_NAMES}
    allowance: dict = {}
    extra_regions: dict = {}
    duration = original.size / fs
    peaks = np.asarray(detector(original, fs), dtype=np.int64).reshape(-1) if original.size else np.empty(0, np.int64)
    metrics["beat_count"] = float(peaks.size)
    windows = build_windows(original, cleaned, peaks, fs) if peaks.size >= 2 else None

    runs_y = clipped_runs(original, cleaned, fs)
    metrics["clipped_runs"] = float(runs_y.shape[0])
    if runs_y.shape[0]:
        extra_regions["clipping"] = [(s / fs, e / fs) for s, e in runs_y.tolist()]
    edge, edge_windows = edge_deviation(original, cleaned, fs)
    metrics["edge_deviation"] = edge
    extra_regions["edge-artefact"] = [(s / fs, e / fs) for s, e in edge_windows]
    metrics["signal_prdn_percent"], metrics["removed_rms"] = signal_comparison(original, cleaned)

    flags: list[Flag] = []
    if windows is None:
        flag = no_beats_flag(channel, limits, int(peaks.size))
        if flag is not None:
            flags.append(flag)
        extra_regions["no-beats"] = [(0.0, duration)]
        flags += evaluate(channel, metrics, allowance, limits)
        flags = _locate(flags, duration, extra_regions, peaks / fs, 0.0, 0.0, int(peaks.size))
        empty = np.empty(0)
        labels = np.full(peaks.size, -1, dtype=np.int8)
        regions = _stretch_regions(flags, extra_regions, {}, duration)
        return metrics, flags, ChannelBeats(channel, peaks, labels, empty, empty, empty, empty, regions)

    measures = measure_templates(windows)
    metrics.update({k: v for k, v in measures.metrics.items() if k in metrics})
    allowance.update(measures.allowance)
    labels = windows.labels
    metrics["dominant_beat_count"] = float(np.sum(labels == 0))
    metrics["other_beat_count"] = float(np.sum(labels == 1))
    metrics["heart_rate_bpm"] = 60.0 / windows.rr_s if windows.rr_s > 0 else None
    flags += evaluate(channel, metrics, allowance, limits)
    fs_pre, fs_post = windows.pre / fs, windows.post / fs

    # Beat by beat and stretch by stretch, every group with enough beats.
    groups = [assess_group(original, cleaned, windows.peaks[labels == 0] + windows.offset, windows, measures, limits,
                           channel)]
    others = windows.peaks[labels == 1]
    if others.size >= 2 * STRETCH_BEATS:
        other_windows = windows_at(original, cleaned, others, windows, align=True)
        if other_windows is not None:
            other_measures = measure_templates(other_windows)
            groups.append(assess_group(original, cleaned, others + other_windows.offset, other_windows,
                                       other_measures, limits, channel))
    measured = sum(g.measured for g in groups)
    metrics["beats_measured"] = float(measured)
    local: dict = {}
    stretch_flags: dict = {}
    for group in groups:
        for item in group.stretches:
            stretch_flags.setdefault(item.flag.id, []).append(item)
        for key, value in group.worst_metrics.items():
            metrics[f"worst_stretch_{key}"] = value
    metrics["stretches_flagged"] = float(len({(i.start_s, i.end_s) for items in stretch_flags.values() for i in items}))
    flags = _combine(flags, stretch_flags, measured, local, windows.rr_s)

    # Levels moved by the cleaning (level shifts, start-up swoops), and pauses.
    r_amp = metrics.get("r_amplitude")
    to_unit = limits.mv_per_unit if limits.absolute else (1.0 / r_amp if r_amp else None)
    warn, fail = limits.in_force("baseline-excursion")
    if to_unit is not None:
        lowest = warn if warn is not None else fail
        exc = baseline_excursions(original, cleaned, windows.peaks + windows.offset, labels, fs, windows.pre,
                                  windows.post, measures.fiducials.iso, to_unit, lowest)
        metrics["baseline_excursion"] = exc.value
        flag = excursion_flag(channel, exc, limits)
        if flag is not None:
            where, more = merge_stretches([a for a, _ in exc.spans], [b for _, b in exc.spans], join_s=windows.rr_s)
            local[flag.id] = (where, more, exc.affected, exc.measured)
            extra_regions[flag.id] = exc.spans
            flags.append(flag)
    holes = gaps(windows.peaks, fs, original.size, windows.pre, windows.post)
    metrics["unmeasured_s"] = float(sum(b - a for a, b in holes))
    if holes:
        longest = max(b - a for a, b in holes)
        facts = {"unmeasured_s": metrics["unmeasured_s"], "stretches": len(holes)}
        flag = judge(RULE["beats-missing"], channel, longest, limits, facts)
        if flag is not None:
            where, more = merge_stretches([a for a, _ in holes], [b for _, b in holes])
            flags.append(flag)
            local[flag.id] = (where, more, 0, int(windows.peaks.size))
            extra_regions[flag.id] = holes

    peaks_s = windows.peaks[labels == 0] / fs
    flags = _locate(flags, duration, extra_regions, peaks_s, fs_pre, fs_post, measured or int(peaks_s.size), local)
    regions = _stretch_regions(flags, extra_regions, stretch_flags, duration)
    beats = ChannelBeats(
        channel=channel,
        r_peaks=windows.peaks,
        beat_labels=labels,
        template_time_s=measures.time_s,
        template_original=measures.original,
        template_cleaned=measures.cleaned,
        template_removed=measures.removed,
        regions=regions,
    )
    return metrics, flags, beats


_SEVERITY_RANK = {"warn": 1, "fail": 2}


def _combine(flags: list[Flag], stretch_flags: dict, measured: int, local: dict, join_s: float = 0.0) -> list[Flag]:
    """Merge the whole-record template flags with the flags confirmed on stretches.

    For each flag id: the worse severity of the two; the stretches as
    ``where`` when any stretch was confirmed (the whole record otherwise).
    The message and value are those of the worst stretch, unless the
    template flag is at least as severe and the stretches hold most beats
    (then the whole-record reading speaks for the record). Fills ``local``
    with ``flag_id -> (where, more, beats_affected, beats_measured)``.
    """
    by_id = {flag.id: flag for flag in flags}
    out = [flag for flag in flags if flag.id not in stretch_flags]
    for flag_id, items in stretch_flags.items():
        worst = max(items, key=lambda i: (_SEVERITY_RANK[i.flag.severity], abs(i.flag.value or 0.0)))
        affected = sum(i.beats for i in items)
        spans = sorted({(i.start_s, i.end_s) for i in items})
        where, more = merge_stretches([a for a, _ in spans], [b for _, b in spans], join_s=join_s)
        template = by_id.get(flag_id)
        count = len(spans)
        if template is not None and (
            _SEVERITY_RANK[template.severity] >= _SEVERITY_RANK[worst.flag.severity] and affected >= 0.5 * measured
        ):
            chosen = template
        else:
            chosen = replace(
                worst.flag,
                message=(
                    f"{worst.flag.message}; worst of {count} stretch(es), at {worst.start_s:.1f}-{worst.end_s:.1f} s"
                ),
            )
            if template is not None and _SEVERITY_RANK[template.severity] > _SEVERITY_RANK[chosen.severity]:
                chosen = replace(chosen, severity=template.severity)
        out.append(chosen)
        local[flag_id] = (where, more, affected, measured)
    return out


def _stretch_regions(flags: list[Flag], extra: dict, stretch_flags: dict, duration: float) -> tuple:
    """``(start_s, end_s, flag_id)`` of every flagged stretch (uncapped), sorted, for display."""
    rows: list[tuple[float, float, str]] = []
    for flag in flags:
        if flag.id in stretch_flags:
            spans = {(i.start_s, i.end_s) for i in stretch_flags[flag.id]}
        elif flag.id in extra:
            spans = set(extra[flag.id])
        else:
            spans = {(0.0, duration)}
        where, _ = merge_stretches([a for a, _ in spans], [b for _, b in spans], cap=10**9)
        rows.extend((a, b, flag.id) for a, b in where)
    rows.sort(key=lambda r: (r[0], r[1], r[2]))
    return tuple(rows)


def assess(original: Recording, cleaned: Recording, limits=None, detector: Detector | None = None) -> Assessment:
    """Compare ``cleaned`` with ``original`` beat by beat and flag shape distortion.

    Parameters
    ----------
    original, cleaned : Recording
        Same length, rate and channel count. Kind and units come from the
        original (or from the cleaned one when the original has none).
    limits : None, Limits, or mapping
        ``None`` for the defaults of the record's kind and units; a
        :class:`~tracevet.assessment.limits.Limits`; or a ``flag_limits``
        mapping (raw YAML or from
        :func:`~tracevet.assessment.limits.limits_from_mapping`).
    detector : callable, optional
        ``detector(signal, fs) -> R-peak indices``; defaults to
        :func:`tracevet.assessment.qrs.detect_qrs`. Beats are always detected
        on the original.

    Returns
    -------
    Assessment
        Metrics (plain names for one channel, ``name@channel`` for several),
        flags (fail first), beat data per channel. A record without beats
        gives a ``no-beats`` flag, not an exception.

    Raises
    ------
    InputError
        Different length, rate, channel count or units; NaN or infinite samples.
    """
    _check_pair(original, cleaned)
    kind = original.kind if original.kind != "other" or cleaned.kind == "other" else cleaned.kind
    units = original.units or cleaned.units
    resolved = resolve_limits(limits, kind, units)
    detect = detector or _default_detector()
    multi = original.n_channels > 1
    metrics: dict = {}
    flags: list[Flag] = []
    channels: list[ChannelBeats] = []
    beat_count = 0
    for c, name in enumerate(original.channels):
        ch_metrics, ch_flags, ch_beats = assess_channel(
            original.samples[:, c], cleaned.samples[:, c], original.fs, name, resolved, detect
        )
        for key, value in ch_metrics.items():
            metrics[f"{key}@{name}" if multi else key] = value
        flags.extend(ch_flags)
        channels.append(ch_beats)
        beat_count = max(beat_count, int(ch_beats.r_peaks.size))
    flags.sort(key=lambda f: 0 if f.severity == "fail" else 1)
    context = {
        "kind": kind,
        "units": units,
        "limit_mode": "absolute" if resolved.absolute else "relative",
        "channels": list(original.channels),
    }
    return Assessment(metrics=metrics, flags=flags, beat_count=beat_count, channels=channels, context=context)
