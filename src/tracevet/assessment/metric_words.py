"""Words and units of the assessment's metrics, and which flag reads which metric: one owner.

``tracevet assess`` (text report) and the review app (metrics panel) show
metrics through :data:`METRIC_ROWS` and :func:`format_metric`, so a metric
has one label and one unit everywhere. Keys are those of
``Assessment.metrics`` (``name`` for one channel, ``name@channel`` for
several).
"""

from __future__ import annotations

import math

from tracevet.assessment.rules import RULES

# (metric key, label, unit kind); unit kinds: count, bpm, %, ms, signed ms, ratio, amp, signed amp.
METRIC_ROWS: tuple[tuple[str, str, str], ...] = (
    ("beat_count", "beats detected", "count"),
    ("dominant_beat_count", "beats in the dominant shape", "count"),
    ("other_beat_count", "beats of other shape", "count"),
    ("unmeasured_beat_count", "beats not measured (near an end)", "count"),
    ("heart_rate_bpm", "heart rate", "bpm"),
    ("r_amplitude", "R amplitude (original)", "amp"),
    ("template_noise", "template noise", "amp"),
    ("prd_percent", "PRD, beat template", "%"),
    ("prdn_percent", "PRDN, beat template", "%"),
    ("rmse", "RMSE, beat template", "amp"),
    ("correlation", "correlation, beat template", "ratio"),
    ("r_amplitude_ratio", "R amplitude ratio", "ratio"),
    ("r_timing_shift_ms", "R timing shift", "signed ms"),
    ("qrs_width_ms", "QRS width (original)", "ms"),
    ("qrs_width_change_ms", "QRS width change", "signed ms"),
    ("st_change", "ST level change", "signed amp"),
    ("p_amplitude_ratio", "P amplitude ratio", "ratio"),
    ("t_amplitude_ratio", "T amplitude ratio", "ratio"),
    ("ringing_rms", "ringing beside QRS (r.m.s.)", "amp"),
    ("removed_beat_fraction", "beat shape in removed part", "ratio"),
    ("beat_shape_change_percent", "beat shape change", "%"),
    ("clipped_runs", "clipped runs", "count"),
    ("edge_deviation", "edge excess", "amp"),
    ("signal_prdn_percent", "PRDN, whole trace", "%"),
    ("removed_rms", "removed part (r.m.s.)", "amp"),
)

# The metric each flag judges (flag id -> metric key), for marking flagged metrics: from the flag table.
FLAG_METRIC: dict[str, str] = {rule.id: rule.metric for rule in RULES}


def channel_metrics(metrics: dict, channel: str, several_channels: bool) -> dict:
    """The metrics of one channel under their plain names, plus ``unmeasured_beat_count``.

    Beats detected but in neither shape group (too near the record's ends to
    cut a whole beat window) are counted, so the three beat counts add up.
    """
    if several_channels:
        suffix = f"@{channel}"
        chosen = {key[: -len(suffix)]: value for key, value in metrics.items() if str(key).endswith(suffix)}
    else:
        chosen = {key: value for key, value in metrics.items() if "@" not in str(key)}
    counts = [chosen.get(k) for k in ("beat_count", "dominant_beat_count", "other_beat_count")]
    numbers = [float(c) for c in counts if isinstance(c, (int, float)) and math.isfinite(float(c))]
    if len(numbers) == 3:
        chosen["unmeasured_beat_count"] = max(0, int(round(numbers[0] - numbers[1] - numbers[2])))
    return chosen


def format_metric(value, unit: str, units: str | None) -> str:
    """A metric with its unit (``70 bpm``, ``+1.5 ms``, ``0.982``, ``1.23 mV``); ``n/a`` when missing."""
    if value is None or isinstance(value, bool) or (isinstance(value, float) and not math.isfinite(value)):
        return "n/a"
    value = float(value)
    if unit == "count":
        return f"{int(round(value))}"
    if unit == "bpm":
        return f"{value:.0f} bpm"
    if unit == "%":
        return f"{value:.1f} %"
    if unit == "ms":
        return f"{value:.1f} ms"
    if unit == "signed ms":
        return f"{value:+.1f} ms"
    if unit == "ratio":
        return f"{value:.3f}"
    unit_text = str(units) if units else "(record units)"
    return f"{value:+.4g} {unit_text}" if unit == "signed amp" else f"{value:.4g} {unit_text}"
