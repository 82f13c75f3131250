"""Distortion flags: measured values against limits, with human messages.

What each flag is (its metric, unit, limits, source and wording) is one row
of :data:`tracevet.assessment.rules.RULES`; this module grades values
against the limits in force and builds the :class:`Flag`. Each flag names
the channel, the value, the limit actually applied (never tighter than the
noise allowance of the measure), whether the limit is absolute or relative,
and where the limit comes from.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Mapping

import numpy as np

from tracevet.assessment.limits import Limits
from tracevet.assessment.rules import AMPLITUDE_NOTE, AMPLITUDE_UNIT, RULE, RULES, FlagRule, format_value

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


def _limit_note(nominal: float | None, applied: float, unit: str, kind_note: str) -> str:
    text = f"limit {format_value(applied, unit)}"
    if nominal is not None and applied > nominal * (1 + 1e-9):
        text += f", widened from {format_value(nominal, unit)} for the template noise"
    return f"{text}; {kind_note}" if kind_note else text


def judge(
    rule: FlagRule, channel: str, value: float | None, limits: Limits, facts: Mapping | None = None,
    allowance: float = 0.0,
) -> Flag | None:
    """Grade one flag's value against its limits in force and word it from its row; ``None`` below the limits.

    Parameters
    ----------
    rule : FlagRule
        The flag's row of :data:`tracevet.assessment.rules.RULES`.
    channel : str
        Channel name, used in the message.
    value : float or None
        The flag's value in the unit of its limits: for an amplitude flag mV
        (absolute limits) or a fraction of the R amplitude (relative limits).
    limits : Limits
        Limits in force for the record.
    facts : mapping, optional
        What the row's wording reads besides the value (the metrics, or the
        counts of a path of its own).
    allowance : float
        Noise allowance in the value's unit; the limits in force are never
        tighter (``max(limit, allowance)``, or the row's ``widen``).
    """
    spec = limits.spec(rule.id)
    if not spec.enabled or value is None:
        return None
    warn, fail = limits.in_force(rule.id)
    if rule.widen is not None:
        severity, applied = grade(value, rule.widen(warn, allowance), rule.widen(fail, allowance))
    else:
        severity, applied = grade(value, warn, fail, allowance)
    if severity is None or applied is None:
        return None
    nominal = fail if severity == "fail" else warn
    unit = AMPLITUDE_UNIT[limits.absolute] if rule.amplitude else rule.unit
    note = AMPLITUDE_NOTE[limits.absolute] if rule.amplitude else rule.note
    message = rule.message(channel, value, facts or {}, unit, _limit_note(nominal, applied, unit, note))
    return Flag(rule.id, severity, message, value, applied, spec.source, channel)


def evaluate(channel: str, metrics: dict, allowance: dict, limits: Limits) -> list[Flag]:
    """Turn one channel's metrics into flags: every row of the flag table that reads a metric.

    For each row with a ``measure`` (in table order), the flag's value is
    read from its metric; an amplitude is converted into mV (absolute
    limits) or a fraction of the R amplitude (relative limits), together
    with its noise allowance; then :func:`judge` grades and words it.

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
    for rule in RULES:
        value = rule.value_from(metrics)
        if value is None:
            continue
        allow = allowance.get(rule.allowance, 0.0) if rule.allowance else 0.0
        if rule.amplitude:
            value, allow = _amp_value(limits, value, allow, r_amp)
        flag = judge(rule, channel, value, limits, metrics, allow)
        if flag is not None:
            flags.append(flag)
    return flags


def _amp_value(limits: Limits, value: float, allow: float, r_amp: float | None) -> tuple[float | None, float]:
    if limits.absolute:
        assert limits.mv_per_unit is not None  # absolute limits always carry their unit factor
        return value * limits.mv_per_unit, allow * limits.mv_per_unit
    if r_amp:
        return value / r_amp, allow / r_amp
    return None, 0.0


def no_beats_flag(channel: str, limits: Limits, found: int) -> Flag | None:
    """The ``no-beats`` flag (fail): no beat template could be built."""
    rule = RULE["no-beats"]
    spec = limits.spec(rule.id)
    if not spec.enabled:
        return None
    message = rule.message(channel, float(found), {}, rule.unit, "")
    return Flag(rule.id, "fail", message, float(found), 2.0, spec.source, channel)
