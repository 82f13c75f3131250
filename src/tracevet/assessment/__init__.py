"""Fidelity assessment: beat detection, beat templates, shape measures and distortion flags.

Public API::

    assess(original, cleaned, limits=None) -> Assessment
    default_limits(kind, units) -> Limits
    limits_from_mapping(mapping, source) -> dict of LimitSpec
    Assessment, Flag, ChannelBeats, FLAG_IDS, METRIC_NAMES
    detect_qrs(signal, fs), match_beats(...)   (tracevet.assessment.qrs)
"""

from tracevet.assessment.core import METRIC_NAMES, assess, resolve_limits
from tracevet.assessment.flags import Flag
from tracevet.assessment.limits import FLAG_IDS, Limits, LimitSpec, default_limits, limits_from_mapping
from tracevet.assessment.result import Assessment, ChannelBeats

__all__ = [
    "assess",
    "resolve_limits",
    "default_limits",
    "limits_from_mapping",
    "Assessment",
    "ChannelBeats",
    "Flag",
    "Limits",
    "LimitSpec",
    "FLAG_IDS",
    "METRIC_NAMES",
]
