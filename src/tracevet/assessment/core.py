"""``assess``: compare a cleaned recording with its original, channel by channel."""

from __future__ import annotations

from dataclasses import replace
from typing import Callable, Mapping

import numpy as np

from tracevet.assessment.beats import build_windows
from tracevet.assessment.flags import Flag, evaluate, merge_stretches, no_beats_flag
from tracevet.assessment.limits import Limits, LimitSpec, default_limits, limits_from_mapping
from tracevet.assessment.result import Assessment, ChannelBeats
from tracevet.assessment.shape_measures import measure_templates
from tracevet.assessment.signal_checks import clipped_runs, edge_deviation, signal_comparison
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


_REGION_SPAN = {
    "r-peak-change": "qrs",
    "qrs-widening": "qrs",
    "beat-timing-shift": "qrs",
    "ringing": "qrs",
    "st-level-change": "after",
    "t-wave-change": "after",
    "p-wave-change": "before",
    "removed-beat-structure": "beat",
    "beat-shape-change": "beat",
}


def _regions(flags: list[Flag], peaks_s: np.ndarray, pre_s: float, post_s: float, extra: dict) -> tuple:
    rows: list[tuple[float, float, str]] = []
    for flag in flags:
        span = _REGION_SPAN.get(flag.id)
        if span is not None and peaks_s.size:
            lo, hi = {"qrs": (-0.1, 0.1), "after": (0.0, post_s), "before": (-pre_s, 0.0), "beat": (-pre_s, post_s)}[
                span
            ]
            rows.extend(zip((peaks_s + lo).tolist(), (peaks_s + hi).tolist(), [flag.id] * peaks_s.size))
        for start, end in extra.get(flag.id, ()):
            rows.append((float(start), float(end), flag.id))
    rows.sort(key=lambda r: (r[0], r[1], r[2]))
    return tuple(rows)


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
        regions = _regions(flags, empty, 0.0, 0.0, extra_regions)
        return metrics, flags, ChannelBeats(channel, peaks, labels, empty, empty, empty, empty, regions)

    measures = measure_templates(windows)
    metrics.update({k: v for k, v in measures.metrics.items() if k in metrics})
    allowance.update(measures.allowance)
    labels = windows.labels
    metrics["dominant_beat_count"] = float(np.sum(labels == 0))
    metrics["other_beat_count"] = float(np.sum(labels == 1))
    metrics["heart_rate_bpm"] = 60.0 / windows.rr_s if windows.rr_s > 0 else None
    flags += evaluate(channel, metrics, allowance, limits)
    peaks_s = windows.peaks[labels == 0] / fs
    flags = _locate(flags, duration, extra_regions, peaks_s, windows.pre / fs, windows.post / fs, int(peaks_s.size))
    regions = _regions(flags, peaks_s, windows.pre / fs, windows.post / fs, extra_regions)
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
