"""The bounded set of candidate settings the suggestion searches.

The search is a coordinate search in a fixed order: it starts from the base
settings (the defaults, or a profile) and changes one dimension at a time,
keeping the best value of each dimension before it moves to the next
(filters first, since the thresholds are estimated on the filtered trace).
Every dimension lists every value it tries, so the set is small, known in
advance and the same for every record of a rate:

========================  =====================================================
dimension                 values tried
========================  =====================================================
``mains``                 every choice of the ``mains`` setting (off, 50, 60,
                          and any later automatic choice) below the Nyquist
                          frequency
``baseline``              every baseline method at the base cutoff, and the
                          high-pass at 0.05 and 0.15 Hz (the cutoffs that pass
                          the IEC 60601-2-25 low-frequency impulse test, see
                          docs/cleaning.md); ``off`` only when the base
                          settings have it off (the search never switches
                          baseline removal off: a stable baseline is what the
                          ST measure and the reader need)
``rule/threshold_mode``   hybrid+garrote, sure+garrote, bayes+garrote,
                          bayes+soft, minimax+garrote, universal+garrote,
                          hybrid+soft, hybrid+hard
``noise_estimate``        finest, per_level
``wavelet``               sym4, sym8, db4, coif2
``level``                 auto, and the automatic level minus and plus one
``transform``             swt, dwt
========================  =====================================================

At most 4 + 4 + 8 + 2 + 4 + 3 + 2 = 27 settings, fewer after duplicates
(each dimension repeats the best so far, evaluated once). The current run's
settings and the base settings are always evaluated too, so the suggestion
can be compared with them.
"""

from __future__ import annotations

from dataclasses import replace
from functools import partial
from typing import Callable, Iterator

from tracevet.cleaning import SETTING_CHOICES, CleaningSettings
from tracevet.cleaning.levels import auto_level

BASELINE_CUTOFFS_HZ = (0.05, 0.15)
RULE_MODES = (
    ("hybrid", "garrote"),
    ("sure", "garrote"),
    ("bayes", "garrote"),
    ("bayes", "soft"),
    ("minimax", "garrote"),
    ("universal", "garrote"),
    ("hybrid", "soft"),
    ("hybrid", "hard"),
)
NOISE_ESTIMATES = ("finest", "per_level")
WAVELETS = ("sym4", "sym8", "db4", "coif2")
TRANSFORMS = ("swt", "dwt")

Dimension = tuple[str, Callable[[CleaningSettings], list[CleaningSettings]]]


def _mains_values(fs: float) -> list[str]:
    values = []
    for choice in SETTING_CHOICES["mains"]:
        try:
            frequency = float(choice)
        except ValueError:  # off, or an automatic choice
            values.append(choice)
            continue
        if frequency + 1.0 < fs / 2.0:
            values.append(choice)
    return values


def _try(make: Callable[[], CleaningSettings]) -> list[CleaningSettings]:
    try:
        return [make()]
    except ValueError:  # SettingsError included: a value this engine version does not take
        return []


def dimensions(fs: float, base: CleaningSettings) -> list[Dimension]:
    """The search dimensions in order: ``(name, variants(settings) -> list of settings)``."""

    def mains(s: CleaningSettings) -> list[CleaningSettings]:
        out: list[CleaningSettings] = []
        for value in _mains_values(fs):
            out += _try(partial(replace, s, mains=value))
        return out

    def baseline(s: CleaningSettings) -> list[CleaningSettings]:
        out: list[CleaningSettings] = []
        for method in SETTING_CHOICES["baseline"]:
            if method == "off":
                continue
            out += _try(partial(replace, s, baseline=method, baseline_cutoff_hz=base.baseline_cutoff_hz))
        for cutoff in BASELINE_CUTOFFS_HZ:
            out += _try(partial(replace, s, baseline="butterworth", baseline_cutoff_hz=cutoff))
        if base.baseline == "off":
            out += _try(lambda: replace(s, baseline="off", baseline_cutoff_hz=base.baseline_cutoff_hz))
        return out

    def rule_mode(s: CleaningSettings) -> list[CleaningSettings]:
        return [replace(s, rule=rule, threshold_mode=mode) for rule, mode in RULE_MODES]

    def noise(s: CleaningSettings) -> list[CleaningSettings]:
        return [replace(s, noise_estimate=value) for value in NOISE_ESTIMATES]

    def wavelet(s: CleaningSettings) -> list[CleaningSettings]:
        return [replace(s, wavelet=value) for value in WAVELETS]

    def level(s: CleaningSettings) -> list[CleaningSettings]:
        j = auto_level(fs)
        out = [replace(s, level="auto")]
        out += [replace(s, level=value) for value in (j - 1, j + 1) if value >= 1]
        return out

    def transform(s: CleaningSettings) -> list[CleaningSettings]:
        return [replace(s, transform=value) for value in TRANSFORMS]

    return [
        ("mains", mains),
        ("baseline", baseline),
        ("rule/threshold_mode", rule_mode),
        ("noise_estimate", noise),
        ("wavelet", wavelet),
        ("level", level),
        ("transform", transform),
    ]


def unique(settings: list[CleaningSettings]) -> Iterator[CleaningSettings]:
    """The settings in order, each digest once."""
    seen: set[str] = set()
    for s in settings:
        digest = s.digest()
        if digest not in seen:
            seen.add(digest)
            yield s


def describe_change(settings: CleaningSettings, reference: CleaningSettings) -> str:
    """``key=value`` of every setting that differs from ``reference`` (``same settings`` when none)."""
    mine, theirs = settings.to_dict(), reference.to_dict()
    parts = [f"{k}={mine[k]}" for k in mine if mine[k] != theirs[k]]
    return ", ".join(parts) if parts else "same settings"


def count_changes(settings: CleaningSettings, reference: CleaningSettings) -> int:
    """How many settings differ from ``reference``."""
    mine, theirs = settings.to_dict(), reference.to_dict()
    return sum(1 for k in mine if mine[k] != theirs[k])


def upper_bound(fs: float, base: CleaningSettings) -> int:
    """Most settings the search can evaluate for rate ``fs`` (for progress reports)."""
    probe = base
    return sum(len(variants(probe)) for _name, variants in dimensions(fs, base)) + 2
