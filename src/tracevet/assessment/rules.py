"""The flag table: one row per distortion flag, the single owner of what a flag is.

Each :class:`FlagRule` row holds everything the assessment knows about one
flag: its id, the metric it judges and how the flag's value is read from it,
the unit, whether its limits are amplitudes (absolute in mV for ECG in known
units, a fraction of the R amplitude otherwise), the default warn and fail
limits, their source, how the noise allowance widens them, its message
wording, which path raises it and which per-beat screen readings speak for
it. The limits (:mod:`tracevet.assessment.limits`), the grading
(:func:`tracevet.assessment.flags.evaluate`), the metric words
(:data:`tracevet.assessment.metric_words.FLAG_METRIC`) and the stretch
screen (:mod:`tracevet.assessment.stretches`) read these rows; none of them
lists flags again.

Adding a flag is adding one row: a flag read from a metric of the templates
or of the whole trace needs only its row (``measure`` set); a flag with a
path of its own (``beats``, ``level``, ``gaps``) also needs the code that
measures it, which hands its value to :func:`tracevet.assessment.flags.judge`.

This module imports nothing beyond the standard library, so that building
the command line stays light.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable, Mapping

SOURCE_ST = (
    "AHA/ACCF/HRS 2009 Part VI (Wagner et al.) and Thygesen et al.: an ST deviation of 0.1 mV is "
    "a diagnostic criterion; level read at J+80 ms (J+60 ms above 100 bpm), Long-Term ST Database convention"
)
SOURCE_AMPLITUDE = (
    "common practice; of the order of the 10 % amplitude tolerance of the IEC 60601-2-25 "
    "short-pulse response test (from memory)"
)
SOURCE_QRS = (
    "common practice: QRS duration is read to about 10 ms and its upper normal value (about 110-120 ms) "
    "leaves little room (AHA 2009 Part III, from memory)"
)
SOURCE_TIMING = (
    "common practice: diagnostic timing is read to 2-4 ms (AHA/ACCF/HRS 2007 Part I asks for "
    "500 Hz sampling, from memory)"
)
SOURCE_RINGING = (
    "Rijnbeek, Kors & Witsenburg 2001 (Circulation 104:3087): amplitude errors of the order of 25 uV "
    "matter; relative form: common practice"
)
SOURCE_WAVES = "common practice: P and T amplitudes are read to about 0.05 mV on 0.1-0.5 mV waves"
SOURCE_REMOVED = "common practice: the removed component of a faithful cleaning carries no heartbeat shape"
SOURCE_SHAPE = (
    "Zigel, Cohen & Katz 2000 (IEEE TBME 47:1424): PRD above about 9 % no longer guarantees a "
    "'good' reconstruction (from memory); noise-corrected, on beat templates"
)
SOURCE_CLIPPING = "common practice: a flat run at the extreme of a trace means the waveform was cut"
SOURCE_EDGE = "common practice: start and end of a cleaned trace must look like its interior"
SOURCE_EXCURSION = (
    "IEC 60601-2-25 / AAMI EC11 low-frequency (impulse) test: after a 3 mV x 100 ms pulse the baseline may be "
    "displaced by at most 0.1 mV (from memory); a displacement a cleaning adds under the beats is held to the same "
    "0.1 mV; relative form: common practice"
)
SOURCE_GAPS = (
    "common practice: where no beats are found the shape cannot be vouched for; a pause of 3 s is the usual "
    "asystole alarm of monitors (from memory)"
)
SOURCE_BEATS = "common practice: the assessment compares beats; without beats it cannot vouch for the shape"

# How an amplitude limit is stated, by ``Limits.absolute``: the kind note of every amplitude flag's message.
AMPLITUDE_NOTE = {
    True: "absolute limit in mV (ECG in known units)",
    False: "relative limit, a fraction of the original R amplitude (MCG or unknown units)",
}
# Display unit of an amplitude flag's value and limits, by ``Limits.absolute``.
AMPLITUDE_UNIT = {True: "mV", False: "of R"}

# Paths that raise flags (FlagRule.path):
#   template  read from a metric of the beat templates; a stretch of beats can confirm it
#   trace     read from a metric of the whole trace (no beats needed), located by sample regions
#   beats     raised when too few beats are found (tracevet.assessment.flags.no_beats_flag)
#   level     beat levels moved by the cleaning (tracevet.assessment.stretches.baseline_excursions)
#   gaps      stretches without measurable beats (tracevet.assessment.stretches.gaps)
PATHS = ("template", "trace", "beats", "level", "gaps")


def format_value(value: float, unit: str) -> str:
    """A flag's value or limit in words: ``12.0 %``, ``4.1 ms``, ``0.120 mV``, ``12.0 % of the R amplitude``."""
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


# --------------------------------------------------------------------------- measure functions
# Each turns the value of the row's metric into the flag's value (before any
# conversion of an amplitude into mV or a fraction of R).


def departure_from_one(ratio: float) -> float:
    """``|1 - ratio|``: how far a retained-amplitude ratio is from keeping the wave whole."""
    return abs(1.0 - ratio)


def magnitude(value: float) -> float:
    """``|value|``: a change in either direction counts."""
    return abs(value)


def as_measured(value: float) -> float:
    """The metric itself: only a change in one direction (wider, more, larger) counts."""
    return value


def in_quadrature_percent(limit: float | None, energy: float) -> float | None:
    """A limit in % widened by a relative noise energy: ``100 sqrt((limit/100)^2 + energy)``.

    Energies add (independent noise adds in quadrature, common practice), so
    the expected noise energy of the templates adds to the nominal limit's.
    """
    return None if limit is None else 100.0 * ((limit / 100.0) ** 2 + energy) ** 0.5


# --------------------------------------------------------------------------- message wording
# Each says what the value means: (value in the display unit, metrics or other
# facts, display unit) -> words. The channel and the limit note are added by
# tracevet.assessment.flags.


def _say_r(v: float, facts: Mapping, unit: str) -> str:
    ratio = facts["r_amplitude_ratio"]
    return f"cleaned R peaks are {100 * v:.1f} % {'lower' if ratio < 1 else 'higher'} than the original's"


def _say_qrs(v: float, facts: Mapping, unit: str) -> str:
    return f"the cleaned QRS is {v:.1f} ms wider than the original's"


def _say_timing(v: float, facts: Mapping, unit: str) -> str:
    return f"cleaned beats are {v:.1f} ms {'late' if facts['r_timing_shift_ms'] > 0 else 'early'} against the original"


def _say_st(v: float, facts: Mapping, unit: str) -> str:
    delay = facts.get("st_delay_ms") or 80.0
    direction = "up" if facts["st_change"] > 0 else "down"
    return f"the ST level at J+{delay:.0f} ms moved {direction} by {format_value(v, unit)}"


def _say_wave(wave: str) -> Callable[[float, Mapping, str], str]:
    def say(v: float, facts: Mapping, unit: str) -> str:
        ratio = facts[f"{wave.lower()}_amplitude_ratio"]
        return f"the cleaned {wave} wave is {100 * v:.1f} % {'smaller' if ratio < 1 else 'larger'} than the original's"

    return say


def _say_ringing(v: float, facts: Mapping, unit: str) -> str:
    return f"oscillation beside the QRS that the original lacks, r.m.s. {format_value(v, unit)}"


def _say_removed(v: float, facts: Mapping, unit: str) -> str:
    return f"the removed component holds {100 * v:.1f} % of the beat shape (averaged over beats)"


def _say_shape(v: float, facts: Mapping, unit: str) -> str:
    return f"the averaged beat changed by {v:.1f} % (noise-corrected PRDN)"


def _say_clipping(v: float, facts: Mapping, unit: str) -> str:
    return f"the cleaned trace has {int(v)} flat run(s) at its extremes that the original lacks"


def _say_edge(v: float, facts: Mapping, unit: str) -> str:
    return f"the removed component at the start or end exceeds the interior by {format_value(v, unit)}"


def _say_excursion(v: float, facts: Mapping, unit: str) -> str:
    return (
        f"the cleaning moved beats away from their level by up to {format_value(v, unit)} more than the "
        "original had them"
    )


def _say_gaps(v: float, facts: Mapping, unit: str) -> str:
    return (
        f"no measurable beats for {facts['unmeasured_s']:.1f} s in {facts['stretches']} stretch(es) "
        f"(the longest {v:.1f} s); the shape there is not assessed"
    )


def _say_no_beats(v: float, facts: Mapping, unit: str) -> str:
    return (
        f"no heartbeats found in the original ({int(v)} detected, at least 2 needed); "
        "the waveform shape cannot be assessed"
    )


@dataclass(frozen=True)
class FlagRule:
    """One row of the flag table.

    Attributes
    ----------
    id : str
        Stable flag identifier (JSON ``id``, ``flag_limits:`` key).
    metric : str
        The metric (``Assessment.metrics`` key) that reports what the flag judges.
    unit : str
        Unit of the value and of ``warn``/``fail`` ("fraction", "ms", "mV",
        "%", "runs", "beats", "s"); "mV" for amplitude flags.
    warn, fail : float or None
        Default limits; ``None`` when that severity is not used.
    source : str
        Where the limits come from (standard, paper or ``common practice``).
    says : callable
        ``says(value, facts, unit) -> str``: what the value means, in words.
    path : str
        Which path raises the flag (one of :data:`PATHS`).
    note : str
        Kind of limit for the message of a non-amplitude flag ("" for none).
    amplitude : bool
        True when the limits are amplitudes: absolute (mV) for ECG in known
        electric units, relative (fraction of R) otherwise.
    warn_relative, fail_relative : float or None
        Default relative limits of an amplitude flag.
    measure : callable or None
        ``measure(metric value) -> flag value`` for the flags graded from the
        metrics by :func:`tracevet.assessment.flags.evaluate`; ``None`` for a
        flag raised by a path of its own.
    allowance : str or None
        Key of the noise allowance (``TemplateMeasures.allowance``) that
        widens the limits; ``None`` for none.
    widen : callable or None
        ``widen(limit, allowance) -> limit in force``; ``None`` for the
        default, ``max(limit, allowance)``.
    aside : str
        Words set before the limit inside the message's parentheses.
    screen : tuple of (reading, kind)
        The per-beat screen readings of :mod:`tracevet.assessment.stretches`
        that speak for the flag, with their kind ("fraction", "ms", "amp",
        "energy-amp", "energy-shape").
    """

    id: str
    metric: str
    unit: str
    warn: float | None
    fail: float | None
    source: str
    says: Callable[[float, Mapping, str], str]
    path: str = "template"
    note: str = ""
    amplitude: bool = False
    warn_relative: float | None = None
    fail_relative: float | None = None
    measure: Callable[[float], float] | None = None
    allowance: str | None = None
    widen: Callable[[float | None, float], float | None] | None = None
    aside: str = ""
    screen: tuple[tuple[str, str], ...] = ()

    def value_from(self, metrics: Mapping) -> float | None:
        """The flag's value read from ``metrics`` (``None`` when the metric is missing or ``None``)."""
        if self.measure is None:
            return None
        raw = metrics.get(self.metric)
        return None if raw is None else self.measure(raw)

    def message(self, channel: str, value: float, facts: Mapping, unit: str, limit_note: str) -> str:
        """The flag's sentence: ``channel C: <what> (<aside>; <limit_note>)``, no parentheses when both are empty."""
        inner = "; ".join(part for part in (self.aside, limit_note) if part)
        text = f"channel {channel}: {self.says(value, facts, unit)}"
        return f"{text} ({inner})" if inner else text


RULES: tuple[FlagRule, ...] = (
    FlagRule("no-beats", "beat_count", "beats", None, 0.0, SOURCE_BEATS, _say_no_beats, path="beats"),
    FlagRule("r-peak-change", "r_amplitude_ratio", "fraction", 0.12, 0.16, SOURCE_AMPLITUDE, _say_r,
             note="relative to the original R amplitude", measure=departure_from_one,
             allowance="r_amplitude_ratio", screen=(("r", "fraction"),)),
    FlagRule("qrs-widening", "qrs_width_change_ms", "ms", 6.0, 10.0, SOURCE_QRS, _say_qrs,
             note="absolute limit in ms", measure=as_measured, allowance="qrs_width_change_ms",
             screen=(("width", "ms"),)),
    FlagRule("beat-timing-shift", "r_timing_shift_ms", "ms", 2.0, 4.0, SOURCE_TIMING, _say_timing,
             note="absolute limit in ms", measure=magnitude, allowance="r_timing_shift_ms",
             screen=(("timing", "ms"),)),
    FlagRule("st-level-change", "st_change", "mV", 0.05, 0.10, SOURCE_ST, _say_st, amplitude=True,
             warn_relative=0.05, fail_relative=0.10, measure=magnitude, allowance="st_change",
             screen=(("st", "amp"),)),
    FlagRule("p-wave-change", "p_amplitude_ratio", "fraction", 0.20, 0.30, SOURCE_WAVES, _say_wave("P"),
             note="relative to the original P amplitude", measure=departure_from_one,
             allowance="p_amplitude_ratio", screen=(("p", "fraction"),)),
    FlagRule("t-wave-change", "t_amplitude_ratio", "fraction", 0.20, 0.30, SOURCE_WAVES, _say_wave("T"),
             note="relative to the original T amplitude", measure=departure_from_one,
             allowance="t_amplitude_ratio", screen=(("t", "fraction"),)),
    FlagRule("ringing", "ringing_rms", "mV", 0.015, 0.020, SOURCE_RINGING, _say_ringing, amplitude=True,
             warn_relative=0.015, fail_relative=0.020, measure=as_measured, allowance="ringing_rms",
             screen=(("ring0", "energy-amp"), ("ring1", "energy-amp"))),
    FlagRule("removed-beat-structure", "removed_beat_fraction", "fraction", 0.10, 0.15, SOURCE_REMOVED,
             _say_removed, note="relative to the cleaned beat", measure=as_measured,
             allowance="removed_beat_fraction", screen=(("removed", "fraction"),)),
    FlagRule("beat-shape-change", "beat_shape_change_percent", "%", 15.0, 22.0, SOURCE_SHAPE, _say_shape,
             note="relative to the original beat", measure=as_measured, allowance="beat_shape_change_energy",
             widen=in_quadrature_percent, screen=(("shape", "energy-shape"),)),
    FlagRule("clipping", "clipped_runs", "runs", None, 0.0, SOURCE_CLIPPING, _say_clipping, path="trace",
             note="absolute limit in runs", measure=as_measured),
    FlagRule("edge-artefact", "edge_deviation", "mV", 0.10, 0.20, SOURCE_EDGE, _say_edge, path="trace",
             amplitude=True, warn_relative=0.10, fail_relative=0.20, measure=as_measured),
    FlagRule("baseline-excursion", "baseline_excursion", "mV", 0.10, 0.20, SOURCE_EXCURSION, _say_excursion,
             path="level", amplitude=True, warn_relative=0.10, fail_relative=0.20,
             aside="a level shift or a filter's start-up swoop"),
    FlagRule("beats-missing", "unmeasured_s", "s", 3.0, None, SOURCE_GAPS, _say_gaps, path="gaps"),
)

RULE: dict[str, FlagRule] = {rule.id: rule for rule in RULES}
FLAG_IDS: tuple[str, ...] = tuple(rule.id for rule in RULES)
# Flags read from the beat templates: the ones a stretch of beats can confirm.
TEMPLATE_FLAG_IDS: tuple[str, ...] = tuple(rule.id for rule in RULES if rule.path == "template")
# Flags of the whole-trace checks, located by their sample regions (clipped runs, edge windows).
TRACE_FLAG_IDS: tuple[str, ...] = tuple(rule.id for rule in RULES if rule.path == "trace")
