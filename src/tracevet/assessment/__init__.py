"""Fidelity assessment: beat detection, beat templates, shape measures and distortion flags.

Public API::

    assess(original, cleaned, limits=None) -> Assessment
    default_limits(kind, units) -> Limits
    limits_from_mapping(mapping, source) -> dict of LimitSpec
    Assessment, Flag, ChannelBeats, FLAG_IDS, METRIC_NAMES
    detect_qrs(signal, fs), match_beats(...)   (tracevet.assessment.qrs)
"""

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


def __getattr__(name):
    """Import the measuring core on first use, so that building the command line stays light."""
    if name in ("assess", "resolve_limits", "METRIC_NAMES"):
        from tracevet.assessment import core

        return getattr(core, name)
    raise AttributeError(f"module 'tracevet.assessment' has no attribute {name!r}")
