"""Flag limits: defaults per kind and units, and overrides from a queue's YAML.

Amplitude limits come in two forms. For an ECG in known electric units
(V, mV, uV, nV) they are absolute, stated in millivolts and converted to the
record's units. For MCG, other signals and unknown units they are relative:
a fraction of the R amplitude of the record's dominant beat template.
Ratios (R, P, T amplitude change, removed beat fraction) and times (QRS
widening, beat timing shift) are the same for every kind.

A queue's ``flag_limits:`` section overrides defaults per flag id::

    flag_limits:
      r-peak-change: {warn: 0.08, fail: 0.12}
      st-level-change: {fail: 0.15, fail_relative: 0.12}
      edge-artefact: off

``warn``/``fail`` hold the absolute limit (mV for amplitude flags, else the
flag's own unit); ``warn_relative``/``fail_relative`` the relative limit of an
amplitude flag; ``null`` removes one severity; ``off`` disables the flag.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace
from typing import Any, Mapping

from tracevet.assessment.rules import FLAG_IDS, RULE, RULES
from tracevet.errors import InputError
from tracevet.recording.model import UNIT_TO_MV

__all__ = ["FLAG_IDS", "LimitSpec", "Limits", "default_limits", "limits_from_mapping"]


@dataclass(frozen=True)
class LimitSpec:
    """The limits of one flag.

    Attributes
    ----------
    flag_id : str
        The flag this limit belongs to.
    warn, fail : float or None
        Absolute limits: the measured value beyond which the flag is raised
        with that severity (mV for amplitude flags, else ``unit``). ``None``
        means that severity is not used.
    warn_relative, fail_relative : float or None
        Relative limits (fraction of R amplitude) for amplitude flags.
    unit : str
        Unit of the value ("fraction", "ms", "mV", "%", "runs", "beats").
    amplitude : bool
        True when the limit is an amplitude (absolute in mV or relative).
    source : str
        Where the limit comes from (standard, paper or ``common practice``).
    enabled : bool
        False when switched off in the queue's settings.
    """

    flag_id: str
    warn: float | None
    fail: float | None
    unit: str
    source: str
    amplitude: bool = False
    warn_relative: float | None = None
    fail_relative: float | None = None
    enabled: bool = True


# The default limits: one per row of the flag table (tracevet.assessment.rules.RULES), in its order.
_DEFAULTS: tuple[LimitSpec, ...] = tuple(
    LimitSpec(rule.id, rule.warn, rule.fail, rule.unit, rule.source, rule.amplitude, rule.warn_relative,
              rule.fail_relative)
    for rule in RULES
)


@dataclass(frozen=True)
class Limits:
    """All flag limits for one record.

    Attributes
    ----------
    specs : dict
        ``flag_id -> LimitSpec``.
    absolute : bool
        True when amplitude limits are absolute (ECG in known electric units).
    mv_per_unit : float or None
        Millivolts per record unit when ``absolute``, else ``None``.
    units : str or None
        The record's units, for messages.
    """

    specs: dict
    absolute: bool
    mv_per_unit: float | None
    units: str | None

    def spec(self, flag_id: str) -> LimitSpec:
        """Return the limits of ``flag_id``."""
        return self.specs[flag_id]

    def in_force(self, flag_id: str) -> tuple[float | None, float | None]:
        """Return (warn, fail) of ``flag_id`` in the unit its value is graded in.

        For an amplitude flag: mV when the limits are absolute, a fraction of
        the R amplitude when relative; for any other flag its own unit.
        """
        spec = self.specs[flag_id]
        if RULE[flag_id].amplitude and not self.absolute:
            return spec.warn_relative, spec.fail_relative
        return spec.warn, spec.fail

    def amplitude_limits(self, flag_id: str, r_amplitude: float | None) -> tuple[float | None, float | None]:
        """Return (warn, fail) of an amplitude flag in record units.

        Absolute limits are converted from mV; relative limits are multiplied by
        ``r_amplitude`` (record units), or give ``None`` when it is unknown.
        """
        spec = self.specs[flag_id]
        if self.absolute:
            assert self.mv_per_unit is not None  # absolute limits always carry their unit factor
            factor = 1.0 / self.mv_per_unit
            return (
                None if spec.warn is None else spec.warn * factor,
                None if spec.fail is None else spec.fail * factor,
            )
        if r_amplitude is None or not r_amplitude > 0:
            return None, None
        return (
            None if spec.warn_relative is None else spec.warn_relative * r_amplitude,
            None if spec.fail_relative is None else spec.fail_relative * r_amplitude,
        )

    def with_overrides(self, overrides: Mapping[str, LimitSpec]) -> "Limits":
        """Return a copy in which the given specs replace the defaults."""
        specs = dict(self.specs)
        specs.update(overrides)
        return replace(self, specs=specs)


def default_limits(kind: str, units: str | None) -> Limits:
    """Return the default limits for a record of ``kind`` in ``units``.

    Amplitude limits are absolute (stated in mV) for ``kind == 'ecg'`` in
    known electric units (V, mV, uV, nV) and relative (fraction of the R
    amplitude) otherwise, in particular for MCG in pT or fT.
    """
    absolute = kind == "ecg" and units in UNIT_TO_MV
    return Limits(
        specs={spec.flag_id: spec for spec in _DEFAULTS},
        absolute=absolute,
        mv_per_unit=UNIT_TO_MV.get(units or "") if absolute else None,
        units=units,
    )


_KEYS = ("warn", "fail", "warn_relative", "fail_relative")


def _number(value, where: str, source: str) -> float | None:
    if value is None:
        return None
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise InputError(source, f"{where} must be a number or null, got {str(value)[:30]!r}")
    number = float(value)
    if not math.isfinite(number) or number < 0:
        raise InputError(source, f"{where} must be a finite number >= 0, got {value!r}")
    return number


def limits_from_mapping(mapping: Mapping | None, source: str = "flag_limits") -> dict[str, LimitSpec]:
    """Validate a ``flag_limits:`` mapping and return the overridden specs.

    Parameters
    ----------
    mapping : mapping or None
        ``{flag_id: {warn, fail, warn_relative, fail_relative} | 'off'}``.
    source : str
        Named in error messages (e.g. the queue's settings file).

    Returns
    -------
    dict
        ``flag_id -> LimitSpec`` for the flags that were mentioned; pass it to
    :func:`tracevet.assessment.assess` as ``limits``.

    Raises
    ------
    InputError
        One line naming ``source`` and the bad entry.
    """
    if mapping is None:
        return {}
    if not isinstance(mapping, Mapping):
        raise InputError(source, "flag_limits must be a mapping of flag ids to limits")
    defaults = {spec.flag_id: spec for spec in _DEFAULTS}
    result: dict[str, LimitSpec] = {}
    for key, value in mapping.items():
        flag_id = str(key)
        if flag_id not in defaults:
            raise InputError(
                source, f"unknown flag id {flag_id[:40]!r} in flag_limits (known: {', '.join(sorted(FLAG_IDS))})"
            )
        spec = defaults[flag_id]
        if value is False or (isinstance(value, str) and value.strip().lower() == "off"):
            result[flag_id] = replace(spec, enabled=False)
            continue
        if not isinstance(value, Mapping):
            raise InputError(source, f"flag_limits.{flag_id} must be a mapping (warn, fail...) or 'off'")
        changes: dict[str, Any] = {}
        for name, raw in value.items():
            name = str(name)
            if name not in _KEYS:
                raise InputError(
                    source, f"flag_limits.{flag_id}: unknown key {name[:30]!r} (known: {', '.join(_KEYS)})"
                )
            if name.endswith("_relative") and not spec.amplitude:
                raise InputError(source, f"flag_limits.{flag_id}: {name} applies to amplitude flags only")
            changes[name] = _number(raw, f"flag_limits.{flag_id}.{name}", source)
        new = replace(spec, **changes)
        for warn, fail, label in ((new.warn, new.fail, ""), (new.warn_relative, new.fail_relative, "_relative")):
            if warn is not None and fail is not None and warn > fail:
                raise InputError(
                    source, f"flag_limits.{flag_id}: warn{label} ({warn:g}) is above fail{label} ({fail:g})"
                )
        result[flag_id] = new
    return result
