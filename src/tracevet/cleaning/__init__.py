"""Cleaning: validated settings and the wavelet-shrinkage engine.

Public API::

    from tracevet.cleaning import (CleaningSettings, DEFAULT_SETTINGS, SETTING_CHOICES,
                                   SETTING_HELP, load_profile, apply_overrides,
                                   clean, resolve_level)
"""

from tracevet.cleaning.settings import (
    DEFAULT_SETTINGS,
    SETTING_CHOICES,
    SETTING_HELP,
    SETTING_NAMES,
    CleaningSettings,
    apply_overrides,
    load_profile,
)
from tracevet.cleaning.levels import auto_level, band_hz, resolve_level
from tracevet.cleaning.engine import clean, clean_channel

__all__ = [
    "CleaningSettings",
    "DEFAULT_SETTINGS",
    "SETTING_CHOICES",
    "SETTING_HELP",
    "SETTING_NAMES",
    "apply_overrides",
    "auto_level",
    "band_hz",
    "clean",
    "clean_channel",
    "load_profile",
    "resolve_level",
]
