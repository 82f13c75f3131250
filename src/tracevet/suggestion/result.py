"""What a suggestion returns: the ranked candidates, the chosen one, and why."""

from __future__ import annotations

import hashlib
import json
import math
from dataclasses import dataclass, field
from typing import Any

from tracevet.cleaning import CleaningSettings

# Noise-removed estimates closer than this (dB) count as equal in the ranking,
# so that the least shape change decides between them.
TIE_DB = 0.2

# Metrics shown with every candidate (plain names; several channels add @channel).
KEY_METRICS = (
    "r_amplitude_ratio",
    "qrs_width_change_ms",
    "st_change",
    "beat_shape_change_percent",
    "removed_beat_fraction",
    "ringing_rms",
)


@dataclass
class CandidateResult:
    """One candidate's settings and what the cleaning with them gave.

    Attributes
    ----------
    settings : CleaningSettings
    change : str
        The settings that differ from the base settings (``key=value, ...``).
    flags : list of Flag
        Flags of the assessment (on sampled windows: the worst of each flag over the windows).
    noise_removed_db : float or None
        Estimated noise removed (:mod:`tracevet.suggestion.noise`); None without beats.
    shape_change_percent : float or None
        The assessment's ``beat_shape_change_percent`` (largest over channels and windows).
    metrics : dict
        :data:`KEY_METRICS` (the mean over windows when sampled).
    scope : str
        ``whole record`` or ``sampled windows``.
    roles : tuple of str
        ``base``, ``current`` and/or ``searched``.
    error : str or None
        Why the settings could not be used on this record (then nothing else is set).
    n_changes : int
        How many settings differ from the base settings.
    screened : bool
        Not assessed: its estimated noise removed fell a whole ranking step
        below that of a candidate without flags found before, so it could not
        come first (flags, shape change and metrics are then unknown).
    """

    settings: CleaningSettings
    change: str
    flags: list = field(default_factory=list)
    noise_removed_db: float | None = None
    shape_change_percent: float | None = None
    metrics: dict = field(default_factory=dict)
    scope: str = "whole record"
    roles: tuple = ("searched",)
    error: str | None = None
    n_changes: int = 0
    screened: bool = False

    @property
    def n_fail(self) -> int:
        """Number of fail flags."""
        return sum(1 for f in self.flags if f.severity == "fail")

    @property
    def n_warn(self) -> int:
        """Number of warn flags."""
        return sum(1 for f in self.flags if f.severity == "warn")

    @property
    def worst_severity(self) -> str | None:
        """``fail``, ``warn`` or None."""
        return "fail" if self.n_fail else "warn" if self.n_warn else None

    def flags_text(self) -> str:
        """``no flags`` or ``2 fail (r-peak-change, qrs-widening), 1 warn (ringing)``."""
        if self.screened:
            return "not assessed (removes less noise than a candidate without flags)"
        if not self.flags:
            return "no flags"
        parts = []
        for severity in ("fail", "warn"):
            ids = sorted({f.id for f in self.flags if f.severity == severity})
            if ids:
                count = sum(1 for f in self.flags if f.severity == severity)
                parts.append(f"{count} {severity} ({', '.join(ids)})")
        return ", ".join(parts)

    def measures_text(self) -> str:
        """Noise removed and beat shape change, in words."""
        noise = (
            "noise removed n/a" if self.noise_removed_db is None else f"noise removed {self.noise_removed_db:.1f} dB"
        )
        shape = "" if self.shape_change_percent is None else f", beat shape change {self.shape_change_percent:.1f} %"
        return noise + shape

    def to_json_dict(self) -> dict:
        """JSON-safe summary (settings, flags, measures)."""
        return {
            "settings": self.settings.to_dict(),
            "settings_digest": self.settings.digest(),
            "change": self.change,
            "roles": list(self.roles),
            "scope": self.scope,
            "worst_severity": self.worst_severity,
            "flags": [dict(f.to_json_dict(), channel=f.channel) for f in self.flags],
            "noise_removed_db": _number(self.noise_removed_db),
            "shape_change_percent": _number(self.shape_change_percent),
            "metrics": {k: _number(v) for k, v in self.metrics.items()},
            "error": self.error,
            "screened": self.screened,
        }


def _number(value):
    if value is None:
        return None
    value = float(value)
    return value if math.isfinite(value) else None


def rank_key(c: CandidateResult) -> tuple:
    """Sort key, best first: no fail flag, then no warn flag (fewer flags before more),
    then the most noise removed (in steps of :data:`TIE_DB`), then the least beat shape change,
    then the fewest settings changed from the base."""
    if c.error is not None:
        return (True, True, 1 << 30, 1 << 30, math.inf, math.inf, 1 << 30)
    noise = c.noise_removed_db
    step = math.inf if noise is None else -math.floor(noise / TIE_DB)
    if c.screened:  # after every assessed candidate
        return (True, True, 1 << 29, 1 << 29, step, 0.0, c.n_changes)
    shape = c.shape_change_percent if c.shape_change_percent is not None else 0.0
    return (c.n_fail > 0, c.n_warn > 0, c.n_fail, c.n_warn, step, shape, c.n_changes)


def cannot_beat(c: CandidateResult, bar: CandidateResult) -> bool:
    """True when ``c`` cannot rank before ``bar`` whatever its flags: ``bar`` has no flag and
    ``c``'s estimated noise removed lies a whole :data:`TIE_DB` step lower."""
    if bar.flags or bar.screened or bar.noise_removed_db is None or c.noise_removed_db is None:
        return False
    return math.floor(c.noise_removed_db / TIE_DB) < math.floor(bar.noise_removed_db / TIE_DB)


def candidate_set_digest(candidates: list[CandidateResult], windows: list[tuple[float, float]]) -> str:
    """SHA-256 of the canonical JSON of every evaluated setting digest (in order) and the windows searched."""
    document = {
        "settings": [c.settings.digest() for c in candidates],
        "windows_s": [[round(a, 3), round(b, 3)] for a, b in windows],
    }
    text = json.dumps(document, sort_keys=True, separators=(",", ":"))
    return hashlib.sha256(text.encode("ascii")).hexdigest()


def explain(best: CandidateResult, ranked: list[CandidateResult], current: CandidateResult | None) -> str:
    """Why ``best`` came first, in words.

    The ranking step that decided, against the next candidate and the current settings.
    """
    usable = [c for c in ranked if c.error is None and not c.screened]
    others = [c for c in usable if c is not best and c.settings != best.settings]
    sentences = []
    if best.n_fail:
        sentences.append(f"No candidate avoided a fail flag; this one has the fewest flags ({best.flags_text()}).")
    elif best.n_warn:
        clean = sum(1 for c in usable if not c.flags)
        sentences.append(
            "No candidate was free of warnings; this one has no fail flag and the fewest warnings "
            f"({best.flags_text()})."
            if clean == 0
            else f"It has {best.flags_text()}."
        )
    else:
        n_clean = sum(1 for c in usable if not c.flags)
        screened = sum(1 for c in ranked if c.screened)
        verb = "was" if screened == 1 else "were"
        more = f"; {screened} more removed less noise than one of those and {verb} not assessed" if screened else ""
        sentences.append(f"It has no flag ({n_clean} of the {len(usable)} candidates assessed have none{more}).")
    if others:
        nxt = min(others, key=rank_key)
        step = _deciding_step(best, nxt)
        sentences.append(f"Next best: {nxt.change} ({nxt.flags_text()}, {nxt.measures_text()}); {step}.")
    sentences.append(f"Chosen settings: {best.change}; {best.measures_text()}.")
    if current is not None and current.error is None and current.settings != best.settings:
        sentences.append(f"The current settings give {current.flags_text()}, {current.measures_text()}.")
    return " ".join(sentences)


def _deciding_step(best: CandidateResult, nxt: CandidateResult) -> str:
    if nxt.n_fail and not best.n_fail:
        return "it has a fail flag, the chosen one none"
    if nxt.n_warn and not best.n_warn:
        return "it has a warning, the chosen one none"
    if (nxt.n_fail, nxt.n_warn) != (best.n_fail, best.n_warn):
        return "it has more flags"
    a, b = best.noise_removed_db, nxt.noise_removed_db
    if a is not None and b is not None and math.floor(a / TIE_DB) != math.floor(b / TIE_DB):
        return f"the chosen settings remove {a - b:.1f} dB more noise (estimated)"
    sa, sb = best.shape_change_percent or 0.0, nxt.shape_change_percent or 0.0
    if sa != sb:
        digits = 1 if abs(sa - sb) >= 0.05 else 3
        return (
            f"both remove about as much noise; the chosen settings change the beat shape less "
            f"({sa:.{digits}f} % against {sb:.{digits}f} %)"
        )
    if best.n_changes != nxt.n_changes:
        return (
            "both are equal on flags, noise removed and shape change; "
            "the chosen settings change fewer settings from the base"
        )
    return "the two are equal on every ranking step; the earlier in the search order is kept"


@dataclass
class Suggestion:
    """The outcome of :func:`tracevet.suggestion.suggest`.

    Attributes
    ----------
    best : CandidateResult
        The chosen settings, cleaned and assessed on the whole record.
    runners_up : list of CandidateResult
        The next two candidates of the ranking.
    ranked : list of CandidateResult
        Every evaluated candidate, best first (the unusable last).
    base, current : CandidateResult or None
        The base settings' and the current run's settings' results.
    cleaned : Recording
        The whole record cleaned with ``best.settings`` (``tracevet.cleaning.clean_with_report``).
    assessment : Assessment
        The full assessment of ``cleaned``.
    report : CleaningReport
        What the cleaning applied (``report.settings``: ``mains: auto`` resolved); a queue
        run records these settings.
    candidate_set_digest : str
        See :func:`candidate_set_digest`.
    windows_s : list of (start, end)
        What was searched (the whole record is one window).
    reason : str
        Why ``best`` came first, in words.
    """

    best: CandidateResult
    runners_up: list
    ranked: list
    base: CandidateResult | None
    current: CandidateResult | None
    cleaned: Any
    assessment: Any
    report: Any
    candidate_set_digest: str
    windows_s: list
    reason: str

    @property
    def found(self) -> bool:
        """True when the chosen settings have no fail flag on the whole record."""
        return self.best.n_fail == 0

    @property
    def searched_on(self) -> str:
        """``the whole record`` or ``3 sampled windows (60 s of 86400 s)``."""
        if (
            len(self.windows_s) == 1
            and self.best.scope == "whole record"
            and self.ranked
            and self.ranked[-1].scope == "whole record"
        ):
            return "the whole record"
        total = sum(b - a for a, b in self.windows_s)
        return f"{len(self.windows_s)} sampled windows ({total:.0f} s)"

    def to_json_dict(self) -> dict:
        """One JSON object: the chosen settings, predicted flags and measures, runners-up, reason."""
        return {
            "found": self.found,
            "settings": self.best.settings.to_dict(),
            "settings_digest": self.best.settings.digest(),
            "change": self.best.change,
            "predicted": {
                "worst_severity": self.best.worst_severity,
                "flags": [dict(f.to_json_dict(), channel=f.channel) for f in self.best.flags],
                "noise_removed_db": _number(self.best.noise_removed_db),
                "shape_change_percent": _number(self.best.shape_change_percent),
                "metrics": self.assessment.to_json_dict()["metrics"],
            },
            "runners_up": [c.to_json_dict() for c in self.runners_up],
            "current": None if self.current is None else self.current.to_json_dict(),
            "candidates_evaluated": len(self.ranked),
            "candidate_set_digest": self.candidate_set_digest,
            "searched_on": self.searched_on,
            "windows_s": [[_number(a), _number(b)] for a, b in self.windows_s],
            "reason": self.reason,
        }

    def summary(self) -> dict:
        """What a queue run records about the suggestion that made it."""
        return {
            "candidate_set_digest": self.candidate_set_digest,
            "candidates_evaluated": len(self.ranked),
            "searched_on": self.searched_on,
            "noise_removed_db": _number(self.best.noise_removed_db),
            "reason": self.reason,
        }
