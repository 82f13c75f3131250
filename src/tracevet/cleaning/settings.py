"""Cleaning settings: one validated, frozen object, its canonical form and digest.

Settings come from :data:`DEFAULT_SETTINGS`, a YAML profile
(:func:`load_profile`, safe loading only) and ``key=value`` overrides
(:func:`apply_overrides`). Every path validates and raises
:class:`tracevet.errors.SettingsError` with the valid choices, sorted.
"""

from __future__ import annotations

import hashlib
import json
import math
import os
from dataclasses import dataclass, fields
from pathlib import Path
from typing import Any, Iterable

import pywt
import yaml

from tracevet.errors import SettingsError

WAVELETS: tuple[str, ...] = tuple(sorted(pywt.wavelist(kind="discrete")))

SETTING_CHOICES: dict[str, tuple] = {
    "transform": ("dwt", "swt"),
    "wavelet": WAVELETS,
    "extension": tuple(sorted(pywt.Modes.modes)),
    "rule": tuple(sorted(("universal", "sure", "hybrid", "minimax", "bayes"))),
    "threshold_mode": tuple(sorted(("soft", "hard", "garrote"))),
    "noise_estimate": ("finest", "per_level"),
    "baseline": ("butterworth", "median", "off"),
    "mains": ("50", "60", "auto", "off"),
}

SETTING_HELP: dict[str, str] = {
    "transform": "wavelet transform: dwt (decimated) or swt (stationary, shift-invariant)",
    "wavelet": "discrete wavelet known to PyWavelets (haar, dbN, symN, coifN, biorN.M, rbioN.M, dmey)",
    "extension": "boundary extension mode at the ends of the record (PyWavelets signal extension)",
    "level": "decomposition depth: an integer >= 1, or auto (deepest level whose detail band stays above 10 Hz)",
    "rule": "threshold rule: universal, sure, hybrid (SureShrink), minimax (RiskShrink) or bayes (BayesShrink)",
    "threshold_mode": "how coefficients are shrunk: soft, hard or garrote (non-negative garrote)",
    "noise_estimate": "noise level from the finest detail level (white noise) or per level (coloured noise)",
    "baseline": "baseline wander removal: median (robust two-stage median estimate, subtracted), "
    "butterworth (zero-phase high-pass at baseline_cutoff_hz) or off",
    "baseline_cutoff_hz": "butterworth baseline: high-pass cutoff in Hz, -3 dB point of the zero-phase response "
    "(0 < f <= 5)",
    "mains": "mains notches (zero-phase) at 50 or 60 Hz and harmonics; auto: only if a 50/60 Hz line stands out "
    "of the spectrum by 15 dB (the run records what was found and applied); or off",
    "mains_harmonics": "number of mains multiples notched (1 = the fundamental only; 1..10)",
}

_LEVEL_MAX = 20
_CUTOFF_MAX_HZ = 5.0
_HARMONICS_MAX = 10


def wavelet_families_text() -> str:
    """The discrete wavelets as families with their orders, e.g. ``db1-db38``, instead of 100-odd names."""
    families: dict[str, list[str]] = {}
    for name in WAVELETS:
        families.setdefault(pywt.Wavelet(name).short_family_name, []).append(name)
    parts = []
    for short, names in sorted(families.items()):
        if len(names) == 1 and names[0] == short:
            parts.append(short)
            continue
        orders = [n[len(short):] for n in names]
        if all(o.isdigit() for o in orders):
            numbers = sorted(int(o) for o in orders)
            parts.append(f"{short}{numbers[0]}-{short}{numbers[-1]}")
        else:
            shown = f"{short}N.M ({', '.join(orders[:3])}...)" if len(orders) > 3 else f"{short}{'/'.join(orders)}"
            parts.append(shown)
    return "known: family + order, " + "; ".join(parts) + "; e.g. sym4, db4, coif2 (pywt.wavelist('discrete'))"


def _choices(field_name: str) -> str:
    return ", ".join(str(c) for c in sorted(SETTING_CHOICES[field_name]))


@dataclass(frozen=True)
class CleaningSettings:
    """Every choice the cleaning engine makes, validated on construction.

    Attributes
    ----------
    transform : {'dwt', 'swt'}
    wavelet : str
        Any discrete wavelet PyWavelets knows.
    extension : str
        PyWavelets boundary extension mode.
    level : int or 'auto'
    rule : {'universal', 'sure', 'hybrid', 'minimax', 'bayes'}
    threshold_mode : {'soft', 'hard', 'garrote'}
    noise_estimate : {'finest', 'per_level'}
    baseline : {'median', 'butterworth', 'off'}
    baseline_cutoff_hz : float
        Used by ``butterworth`` only.
    mains : {'auto', 'off', '50', '60'}
        ``auto`` is resolved on each record (:mod:`tracevet.cleaning.resolve`).
    mains_harmonics : int
    """

    transform: str = "swt"
    wavelet: str = "sym4"
    extension: str = "symmetric"
    level: int | str = "auto"
    rule: str = "hybrid"
    threshold_mode: str = "garrote"
    noise_estimate: str = "per_level"
    baseline: str = "median"
    baseline_cutoff_hz: float = 0.05
    mains: str = "auto"
    mains_harmonics: int = 3

    def __post_init__(self) -> None:
        _validate(self, "settings")

    # -- canonical form -------------------------------------------------
    def to_dict(self) -> dict[str, Any]:
        """Every setting as a JSON-safe dict (str, int, float values)."""
        return {f.name: getattr(self, f.name) for f in fields(self)}

    @classmethod
    def from_dict(cls, data: dict, source: str = "settings") -> "CleaningSettings":
        """Build settings from a (possibly partial) dict; missing keys take defaults.

        Unknown keys and invalid values raise :class:`SettingsError` naming
        ``source``.
        """
        if not isinstance(data, dict):
            raise SettingsError(source, f"settings must be a mapping of names to values, got {type(data).__name__}")
        known = {f.name for f in fields(cls)}
        unknown = sorted(str(k) for k in data if k not in known)
        if unknown:
            raise SettingsError(source, f"unknown setting {unknown[0]!r} (settings: {', '.join(sorted(known))})")
        values = {k: _coerce(k, v, source) for k, v in data.items()}
        try:
            return cls(**values)
        except SettingsError as exc:
            raise SettingsError(source, exc.problem) from None

    def canonical_json(self) -> str:
        """Canonical JSON: sorted keys, no spaces, ASCII only."""
        return json.dumps(self.to_dict(), sort_keys=True, separators=(",", ":"), ensure_ascii=True)

    def digest(self) -> str:
        """SHA-256 hex digest of :meth:`canonical_json` (stable across runs)."""
        return hashlib.sha256(self.canonical_json().encode("ascii")).hexdigest()

    def to_yaml(self) -> str:
        """The settings as a YAML profile (loadable by :func:`load_profile`)."""
        return yaml.safe_dump(self.to_dict(), sort_keys=False, default_flow_style=False)


def _coerce(key: str, value: Any, source: str) -> Any:
    """Convert a value read from YAML or typed on a command line to the field's type."""
    if value is False and key in SETTING_CHOICES and "off" in SETTING_CHOICES[key]:
        return "off"  # YAML 1.1 reads an unquoted off as false
    if key == "mains" and isinstance(value, int) and not isinstance(value, bool):
        return str(value)
    if key == "level" and isinstance(value, str) and value.strip().lower() != "auto":
        try:
            return int(value.strip())
        except ValueError:
            raise SettingsError(source, f"level must be an integer >= 1 or 'auto', got {value!r}") from None
    if key == "level" and isinstance(value, str):
        return "auto"
    if key == "baseline_cutoff_hz" and isinstance(value, str):
        try:
            return float(value)
        except ValueError:
            raise SettingsError(source, f"baseline_cutoff_hz must be a number in Hz, got {value!r}") from None
    if key == "mains_harmonics" and isinstance(value, str):
        try:
            return int(value)
        except ValueError:
            raise SettingsError(source, f"mains_harmonics must be an integer, got {value!r}") from None
    if isinstance(value, str) and key in SETTING_CHOICES:
        return value.strip()
    return value


def _validate(s: CleaningSettings, source: str) -> None:
    for name in SETTING_CHOICES:
        value = getattr(s, name)
        if not isinstance(value, str) or value not in SETTING_CHOICES[name]:
            if name == "wavelet":
                raise SettingsError(source, f"unknown wavelet {str(value)[:20]!r} ({wavelet_families_text()})")
            raise SettingsError(source, f"unknown {name} {value!r} (choices: {_choices(name)})")
    level = s.level
    if isinstance(level, bool) or not (level == "auto" or isinstance(level, int)):
        raise SettingsError(source, f"level must be an integer >= 1 or 'auto', got {level!r}")
    if isinstance(level, int) and not 1 <= level <= _LEVEL_MAX:
        raise SettingsError(source, f"level must be between 1 and {_LEVEL_MAX} or 'auto', got {level}")
    cutoff = s.baseline_cutoff_hz
    if isinstance(cutoff, bool) or not isinstance(cutoff, (int, float)):
        raise SettingsError(source, f"baseline_cutoff_hz must be a number in Hz, got {cutoff!r}")
    if not (math.isfinite(cutoff) and 0 < cutoff <= _CUTOFF_MAX_HZ):
        raise SettingsError(
            source, f"baseline_cutoff_hz must be above 0 and at most {_CUTOFF_MAX_HZ:g} Hz, got {cutoff!r}"
        )
    object.__setattr__(s, "baseline_cutoff_hz", float(cutoff))
    harmonics = s.mains_harmonics
    if isinstance(harmonics, bool) or not isinstance(harmonics, int) or not 1 <= harmonics <= _HARMONICS_MAX:
        raise SettingsError(source, f"mains_harmonics must be an integer from 1 to {_HARMONICS_MAX}, got {harmonics!r}")


DEFAULT_SETTINGS = CleaningSettings()

# Built-in profiles, by name (``--profile NAME``); docs/cleaning.md gives the measured trade-off of each.
PROFILES: dict[str, CleaningSettings] = {
    "default": DEFAULT_SETTINGS,
    # The default before issue 10: nothing but the upper bands is thresholded, a 0.05 Hz high-pass
    # (AHA 2007 diagnostic low-frequency cutoff), no notch unless asked for.
    "diagnostic": CleaningSettings(
        transform="swt", wavelet="sym4", extension="symmetric", level="auto", rule="hybrid",
        threshold_mode="garrote", noise_estimate="finest", baseline="butterworth", baseline_cutoff_hz=0.05,
        mains="off", mains_harmonics=3,
    ),
}

PROFILE_HELP: dict[str, str] = {
    "default": "removes noise, mains lines it finds and baseline wander (robust median baseline)",
    "diagnostic": "conservative, for diagnostic-grade records: upper bands only, 0.05 Hz high-pass, no notch",
}

SETTING_NAMES: tuple[str, ...] = tuple(f.name for f in fields(CleaningSettings))


class _ProfileLoader(yaml.SafeLoader):
    """Safe loader (no Python objects); duplicate keys are refused."""


def _mapping_no_duplicates(loader: _ProfileLoader, node: yaml.MappingNode, deep: bool = False) -> dict:
    seen = set()
    for key_node, _ in node.value:
        key = loader.construct_object(key_node, deep=deep)
        if key in seen:
            raise yaml.constructor.ConstructorError(None, None, f"duplicate setting {key!r}", key_node.start_mark)
        seen.add(key)
    return yaml.SafeLoader.construct_mapping(loader, node, deep=deep)


_ProfileLoader.add_constructor(yaml.resolver.BaseResolver.DEFAULT_MAPPING_TAG, _mapping_no_duplicates)


def _yaml_problem(exc: yaml.YAMLError) -> str:
    problem = getattr(exc, "problem", None) or str(exc).splitlines()[0]
    mark = getattr(exc, "problem_mark", None)
    where = f" (line {mark.line + 1})" if mark is not None else ""
    text = " ".join(str(problem).split())
    if "constructor for the tag" in text:
        return f"unsafe or unknown YAML tag refused{where}: {text}; profiles are read with safe loading only"
    return f"not a valid YAML profile{where}: {text}"


def load_profile(path: str | os.PathLike) -> CleaningSettings:
    """A built-in profile by name (:data:`PROFILES`), or a YAML settings profile file over the defaults.

    A built-in name (``default``, ``diagnostic``) wins over a file of the same
    name in the current folder (write ``./diagnostic`` for the file). Files are
    read with safe loading only.

    The profile is a mapping of setting names to values; settings it does not
    name keep their default. Unknown names, invalid values, unsafe tags
    (``!!python/...``) and malformed YAML raise a one-line
    :class:`SettingsError` naming the file.
    """
    if isinstance(path, str) and path in PROFILES:
        return PROFILES[path]
    path = Path(path)
    source = str(path)
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise SettingsError(source, "no such profile file") from None
    except IsADirectoryError:
        raise SettingsError(source, "is a folder, not a profile file") from None
    except UnicodeDecodeError:
        raise SettingsError(source, "profile is not UTF-8 text") from None
    except OSError as exc:
        raise SettingsError(source, f"cannot read profile ({exc.strerror or exc})") from None
    try:
        data = yaml.load(text, Loader=_ProfileLoader)  # noqa: S506 - a SafeLoader subclass
    except yaml.YAMLError as exc:
        raise SettingsError(source, _yaml_problem(exc)) from None
    if data is None:
        raise SettingsError(source, "profile is empty (write setting: value lines, e.g. 'rule: universal')")
    if not isinstance(data, dict):
        raise SettingsError(source, "profile must be a mapping of setting names to values")
    return CleaningSettings.from_dict(data, source=source)


def apply_overrides(settings: CleaningSettings, overrides: Iterable[str], source: str = "--set") -> CleaningSettings:
    """Return ``settings`` with ``key=value`` overrides applied and validated.

    Values are converted to the setting's type (``level=5``,
    ``baseline_cutoff_hz=0.5``, ``mains=50``, ``level=auto``).
    """
    changes: dict[str, Any] = {}
    for item in overrides:
        text = str(item)
        if "=" not in text:
            raise SettingsError(source, f"expected KEY=VALUE, got {text!r}")
        key, value = (part.strip() for part in text.split("=", 1))
        if key not in SETTING_NAMES:
            raise SettingsError(source, f"unknown setting {key!r} (settings: {', '.join(sorted(SETTING_NAMES))})")
        changes[key] = value
    if not changes:
        return settings
    merged = settings.to_dict()
    merged.update(changes)
    return CleaningSettings.from_dict(merged, source=source)
