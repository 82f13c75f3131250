"""Settings resolved on a record: ``mains: auto`` becomes what was found (``50``, ``60`` or ``off``).

The settings a run records, and their digest, are the resolved ones: the decision log then says what
was actually applied, not ``auto``. The report also keeps what the detector measured.
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np

from tracevet.cleaning.mains import MainsDetection, detect_mains
from tracevet.cleaning.settings import CleaningSettings


@dataclass(frozen=True)
class CleaningReport:
    """What a cleaning applied.

    Attributes
    ----------
    settings : CleaningSettings
        The settings applied (``mains`` resolved). Record these and their digest.
    requested : CleaningSettings
        The settings asked for (``mains`` may be ``auto``).
    mains : MainsDetection or None
        The detector's findings when ``mains`` was ``auto``; None otherwise.
    """

    settings: CleaningSettings
    requested: CleaningSettings
    mains: MainsDetection | None = None

    def to_dict(self) -> dict:
        """JSON-safe summary: requested mains, applied mains and the detection (for run.json)."""
        return {
            "requested_mains": self.requested.mains,
            "applied_mains": self.settings.mains,
            "detection": None if self.mains is None else self.mains.to_dict(),
        }

    def lines(self, units: str = "") -> list[str]:
        """Lines for people (empty when nothing was resolved)."""
        return [] if self.mains is None else [self.mains.describe(units)]


def resolve_settings_for(samples: np.ndarray, fs: float, settings: CleaningSettings) -> CleaningReport:
    """Resolve ``settings`` on raw ``samples`` (n x channels, or one channel) at rate ``fs``."""
    if settings.mains != "auto":
        return CleaningReport(settings, settings, None)
    found = detect_mains(samples, fs, harmonics=settings.mains_harmonics)
    mains = "off" if found.frequency_hz is None else str(int(found.frequency_hz))
    return CleaningReport(replace(settings, mains=mains), settings, found)


def resolve_settings(recording, settings: CleaningSettings) -> CleaningReport:
    """Resolve ``settings`` on a :class:`tracevet.recording.Recording` (all channels looked at)."""
    return resolve_settings_for(recording.samples, recording.fs, settings)
