"""Cleaning: validated settings and the wavelet-shrinkage engine.

Public API::

    from tracevet.cleaning import (CleaningSettings, DEFAULT_SETTINGS, SETTING_CHOICES,
                                   SETTING_HELP, load_profile, apply_overrides,
                                   clean, clean_with_report, resolve_level, PROFILES)
"""

from tracevet.cleaning.settings import (
    DEFAULT_SETTINGS,
    PROFILE_HELP,
    PROFILES,
    SETTING_CHOICES,
    SETTING_HELP,
    SETTING_NAMES,
    CleaningSettings,
    apply_overrides,
    load_profile,
)
from tracevet.cleaning.levels import auto_level, band_hz, resolve_level

# The engine pulls in SciPy's signal module (about a second to import); it is
# imported on first use (PEP 562) so that commands that never clean, such as
# `tracevet status`, start fast.
_ENGINE_NAMES = ("clean", "clean_channel", "clean_with_report")


def __getattr__(name: str):
    """Import the engine's functions (``clean``, ``clean_with_report``, ``clean_channel``) when first asked for."""
    if name in _ENGINE_NAMES:
        from tracevet.cleaning import engine

        value = getattr(engine, name)
        globals()[name] = value
        return value
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")

__all__ = [
    "CleaningSettings",
    "DEFAULT_SETTINGS",
    "PROFILES",
    "PROFILE_HELP",
    "SETTING_CHOICES",
    "SETTING_HELP",
    "SETTING_NAMES",
    "apply_overrides",
    "auto_level",
    "band_hz",
    "clean",
    "clean_channel",
    "clean_with_report",
    "load_profile",
    "resolve_level",
]
