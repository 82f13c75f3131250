"""Distortion flags: measured values against limits, with human messages.

Each flag names the channel, the value, the limit actually applied (never
tighter than the noise allowance of the measure), whether the limit is
absolute or relative, and where the limit comes from.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from tracevet.assessment.limits import Limits, LimitSpec

SEVERITIES = ("warn", "fail")
# Most stretches a flag lists in ``where``; the rest are counted in ``where_more``.
WHERE_CAP = 20


@dataclass(frozen=True)
class Flag:
    """One distortion flag.

    Attributes
    ----------
    id : str
        Stable identifier, e.g. ``r-peak-change``.
    severity : str
        ``warn`` or ``fail``.
    message : str
        One human sentence naming the channel and the kind of limit.
    value, limit : float or None
        Measured value and applied limit, in the same unit.
    source : str
        Where the limit comes from.
    channel : str
        Channel name.
    where : tuple of (start_s, end_s)
        Merged stretches the flag covers, seconds from the record start,
        sorted, at most :data:`WHERE_CAP`; a flag for the whole record lists
        ``((0.0, duration_s),)``.
    where_more : int
        Stretches left off ``where`` by the cap.
    beats_affected, beats_measured : int or None
        Beats inside the flagged stretches, and beats the measure could read.
    """

    id: str
    severity: str
    message: str
    value: float | None
    limit: float | None
    source: str
    channel: str
    where: tuple = ()
    where_more: int = 0
    beats_affected: int | None = None
    beats_measured: int | None = None

    def to_json_dict(self) -> dict:
        """The JSON contract of one flag.

        id, severity, message, value, limit, source (stable since the first
        release), plus ``where`` (``[[start_s, end_s], ...]``), ``where_more``,
        ``beats_affected`` and ``beats_measured``.
        """
        return {
            "id": self.id,
            "severity": self.severity,
            "message": self.message,
            "value": _json_number(self.value),
            "limit": _json_number(self.limit),
            "source": self.source,
            "where": [[round(float(a), 3), round(float(b), 3)] for a, b in self.where],
            "where_more": int(self.where_more),
            "beats_affected": None if self.beats_affected is None else int(self.beats_affected),
            "beats_measured": None if self.beats_measured is None else int(self.beats_measured),
        }

    def where_text(self) -> str:
        """The stretches for a report line, e.g. ``12.4-31.9 s, 23 of 143 beats; 40.0-41.5 s``."""
        parts = [f"{a:.1f}-{b:.1f} s" for a, b in self.where]
        text = "; ".join(parts) if parts else "whole record"
        if self.where_more:
            text += f"; and {self.where_more} more stretch(es)"
        if self.beats_affected is not None and self.beats_measured is not None:
            text += f", {self.beats_affected} of {self.beats_measured} beats"
        return text


def merge_stretches(starts, ends, join_s: float = 0.0, cap: int = WHERE_CAP) -> tuple[tuple, int]:
    """Merge time stretches that overlap or lie within ``join_s`` of each other.

    Parameters
    ----------
    starts, ends : array-like
        Stretch bounds in seconds (any order).
    join_s : float
        Stretches closer than this are joined into one.
    cap : int
        Most stretches returned.

    Returns
    -------
    (where, more)
        ``where`` the merged stretches ``((start_s, end_s), ...)`` sorted by
        start, at most ``cap`` of them (the longest when there are more, kept
        in time order); ``more`` the number left off. Vectorised: a sort and
        a cumulative maximum (interval union, common practice).
    """
    starts = np.asarray(starts, dtype=np.float64).reshape(-1)
    ends = np.asarray(ends, dtype=np.float64).reshape(-1)
    if starts.size == 0:
        return (), 0
    order = np.argsort(starts, kind="stable")
    s, e = starts[order], np.maximum(ends[order], starts[order])
    reach = np.maximum.accumulate(e)
    new = np.ones(s.size, dtype=bool)
    new[1:] = s[1:] > reach[:-1] + join_s
    first = np.flatnonzero(new)
    last = np.concatenate([first[1:], [s.size]]) - 1
    merged_s, merged_e = s[first], reach[last]
    more = max(0, merged_s.size - cap)
    if more:
        keep = np.sort(np.argsort(-(merged_e - merged_s), kind="stable")[:cap])
        merged_s, merged_e = merged_s[keep], merged_e[keep]
    return tuple((float(a), float(b)) for a, b in zip(merged_s, merged_e)), int(more)


def _json_number(value):
    if value is None:
        return None
    value = float(value)
    return value if value == value and abs(value) != float("inf") else None


def grade(
    value: float | None, warn: float | None, fail: float | None, allowance: float = 0.0
) -> tuple[str | None, float | None]:
    """Severity of ``value`` against (warn, fail), each widened to ``allowance``.

    Returns (severity or None, the limit that was crossed or, when none was,
    the lowest limit in force).
    """
    if value is None or value != value:
        return None, None
    fail_eff = None if fail is None else max(fail, allowance)
    warn_eff = None if warn is None else max(warn, allowance)
    if fail_eff is not None and value > fail_eff:
        return "fail", fail_eff
    if warn_eff is not None and value > warn_eff:
        return "warn", warn_eff
    return None, warn_eff if warn_eff is not None else fail_eff


def _fmt(value: float, unit: str) -> str:
    if unit == "fraction":
        return f"{100 * value:.1f} %"
    if unit == "ms":
        return f"{value:.1f} ms"
    if unit == "%":
        return f"{value:.1f} %"
    if unit == "mV":
        return f"{value:.3f} mV"
    if unit == "of R":
        return f"{100 * value:.1f} % of the R amplitude"
    return f"{value:g} {unit}"


def _limit_note(nominal: float | None, applied: float, unit: str, kind_note: str) -> str:
    text = f"limit {_fmt(applied, unit)}"
    if nominal is not None and applied > nominal * (1 + 1e-9):
        text += f", widened from {_fmt(nominal, unit)} for the template noise"
    return f"{text}; {kind_note}"


def evaluate(channel: str, metrics: dict, allowance: dict, limits: Limits) -> list[Flag]:
    """Turn one channel's metrics into flags.

    Parameters
    ----------
    channel : str
        Channel name, used in every message.
    metrics : dict
        Metric name -> value, as produced by the measures (record units).
    allowance : dict
        Metric name -> noise allowance in the metric's unit.
    limits : Limits
        Limits in force for the record.
    """
    flags: list[Flag] = []
    r_amp = metrics.get("r_amplitude")
    absolute = limits.absolute
    amp_unit = "mV" if absolute else "of R"
    amp_note = (
        "absolute limit in mV (ECG in known units)"
        if absolute
        else "relative limit, a fraction of the original R amplitude (MCG or unknown units)"
    )

    def add(flag_id, value, applied, nominal, unit, what, kind_note, severity):
        spec = limits.spec(flag_id)
        message = f"channel {channel}: {what} ({_limit_note(nominal, applied, unit, kind_note)})"
        flags.append(Flag(flag_id, severity, message, value, applied, spec.source, channel))

    def check(flag_id, value, allow, unit, describe, kind_note, warn=None, fail=None, use_spec=True):
        spec: LimitSpec = limits.spec(flag_id)
        if not spec.enabled or value is None:
            return
        if use_spec:
            warn, fail = spec.warn, spec.fail
        severity, applied = grade(value, warn, fail, allow)
        if severity is None:
            return
        nominal = fail if severity == "fail" else warn
        add(flag_id, value, applied, nominal, unit, describe(value), kind_note, severity)

    ratio = metrics.get("r_amplitude_ratio")
    if ratio is not None:
        change = abs(1.0 - ratio)
        check(
            "r-peak-change",
            change,
            allowance.get("r_amplitude_ratio", 0.0),
            "fraction",
            lambda v: f"cleaned R peaks are {100 * v:.1f} % {'lower' if ratio < 1 else 'higher'} than the original's",
            "relative to the original R amplitude",
        )
    widening = metrics.get("qrs_width_change_ms")
    check(
        "qrs-widening",
        widening,
        allowance.get("qrs_width_change_ms", 0.0),
        "ms",
        lambda v: f"the cleaned QRS is {v:.1f} ms wider than the original's",
        "absolute limit in ms",
    )
    shift = metrics.get("r_timing_shift_ms")
    if shift is not None:
        check(
            "beat-timing-shift",
            abs(shift),
            allowance.get("r_timing_shift_ms", 0.0),
            "ms",
            lambda v: f"cleaned beats are {v:.1f} ms {'late' if shift > 0 else 'early'} against the original",
            "absolute limit in ms",
        )
    st = metrics.get("st_change")
    if st is not None:
        delay = metrics.get("st_delay_ms") or 80.0
        if absolute:
            value = abs(st) * limits.mv_per_unit
            allow = allowance.get("st_change", 0.0) * limits.mv_per_unit
        elif r_amp:
            value = abs(st) / r_amp
            allow = allowance.get("st_change", 0.0) / r_amp
        else:
            value = None
            allow = 0.0
        warn, fail = _amp_limits(limits, "st-level-change")
        check(
            "st-level-change",
            value,
            allow,
            amp_unit,
            lambda v: f"the ST level at J+{delay:.0f} ms moved {'up' if st > 0 else 'down'} by {_fmt(v, amp_unit)}",
            amp_note,
            warn,
            fail,
            use_spec=False,
        )
    for wave in ("p", "t"):
        wave_ratio = metrics.get(f"{wave}_amplitude_ratio")
        if wave_ratio is None:
            continue
        check(
            f"{wave}-wave-change",
            abs(1.0 - wave_ratio),
            allowance.get(f"{wave}_amplitude_ratio", 0.0),
            "fraction",
            lambda v, r=wave_ratio, w=wave.upper(): (
                f"the cleaned {w} wave is {100 * v:.1f} % {'smaller' if r < 1 else 'larger'} than the original's"
            ),
            f"relative to the original {wave.upper()} amplitude",
        )
    ringing = metrics.get("ringing_rms")
    if ringing is not None:
        value, allow = _amp_value(limits, ringing, allowance.get("ringing_rms", 0.0), r_amp)
        warn, fail = _amp_limits(limits, "ringing")
        check(
            "ringing",
            value,
            allow,
            amp_unit,
            lambda v: f"oscillation beside the QRS that the original lacks, r.m.s. {_fmt(v, amp_unit)}",
            amp_note,
            warn,
            fail,
            use_spec=False,
        )
    fraction = metrics.get("removed_beat_fraction")
    check(
        "removed-beat-structure",
        fraction,
        allowance.get("removed_beat_fraction", 0.0),
        "fraction",
        lambda v: f"the removed component holds {100 * v:.1f} % of the beat shape (averaged over beats)",
        "relative to the cleaned beat",
    )
    shape = metrics.get("beat_shape_change_percent")
    if shape is not None:
        spec = limits.spec("beat-shape-change")
        extra = allowance.get("beat_shape_change_energy", 0.0)
        # The energy allowance adds in quadrature to the nominal limit.
        widen = lambda lim: None if lim is None else 100.0 * ((lim / 100.0) ** 2 + extra) ** 0.5  # noqa: E731
        warn, fail = widen(spec.warn), widen(spec.fail)
        severity, applied = grade(shape, warn, fail)
        if spec.enabled and severity is not None:
            nominal = spec.fail if severity == "fail" else spec.warn
            add(
                "beat-shape-change",
                shape,
                applied,
                nominal,
                "%",
                f"the averaged beat changed by {shape:.1f} % (noise-corrected PRDN)",
                "relative to the original beat",
                severity,
            )
    clipped = metrics.get("clipped_runs")
    check(
        "clipping",
        clipped,
        0.0,
        "runs",
        lambda v: f"the cleaned trace has {int(v)} flat run(s) at its extremes that the original lacks",
        "absolute limit in runs",
    )
    edge = metrics.get("edge_deviation")
    if edge is not None:
        value, allow = _amp_value(limits, edge, 0.0, r_amp)
        warn, fail = _amp_limits(limits, "edge-artefact")
        check(
            "edge-artefact",
            value,
            allow,
            amp_unit,
            lambda v: f"the removed component at the start or end exceeds the interior by {_fmt(v, amp_unit)}",
            amp_note,
            warn,
            fail,
            use_spec=False,
        )
    return flags


def _amp_limits(limits: Limits, flag_id: str) -> tuple[float | None, float | None]:
    spec = limits.spec(flag_id)
    if limits.absolute:
        return spec.warn, spec.fail
    return spec.warn_relative, spec.fail_relative


def _amp_value(limits: Limits, value: float, allow: float, r_amp: float | None) -> tuple[float | None, float]:
    if limits.absolute:
        assert limits.mv_per_unit is not None  # absolute limits always carry their unit factor
        return value * limits.mv_per_unit, allow * limits.mv_per_unit
    if r_amp:
        return value / r_amp, allow / r_amp
    return None, 0.0


def no_beats_flag(channel: str, limits: Limits, found: int) -> Flag | None:
    """The ``no-beats`` flag (fail): no beat template could be built."""
    spec = limits.spec("no-beats")
    if not spec.enabled:
        return None
    return Flag(
        "no-beats",
        "fail",
        f"channel {channel}: no heartbeats found in the original ({found} detected, at least 2 needed); "
        "the waveform shape cannot be assessed",
        float(found),
        2.0,
        spec.source,
        channel,
    )
