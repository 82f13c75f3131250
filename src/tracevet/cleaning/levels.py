"""Decomposition depth: the frequency band of each level and the ``auto`` rule."""

from __future__ import annotations

import math

import pywt

from tracevet.errors import SettingsError

# The auto rule keeps everything below this frequency in the approximation,
# which is never thresholded: P and T waves and the ST segment live there.
AUTO_FLOOR_HZ = 10.0


def band_hz(fs: float, level: int) -> tuple[float, float]:
    """Nominal band ``(fs / 2^(j+1), fs / 2^j)`` of detail level ``j``.

    The bands are nominal: wavelet filters are not ideal and neighbouring
    bands overlap (common practice; e.g. fs = 360 Hz: D1 90-180 Hz,
    D4 11.25-22.5 Hz).
    """
    return fs / 2.0 ** (level + 1), fs / 2.0**level


def max_level(n_samples: int, wavelet: str) -> int:
    """Deepest useful level ``floor(log2(n / (L - 1)))`` for filter length ``L``.

    Same rule as ``pywt.dwt_max_level``; deeper levels would be made of
    boundary extension rather than data.
    """
    return int(pywt.dwt_max_level(int(n_samples), pywt.Wavelet(wavelet).dec_len))


def min_samples(level: int, wavelet: str) -> int:
    """Fewest samples that support ``level`` with ``wavelet``: ``(L - 1) 2^level``."""
    return (pywt.Wavelet(wavelet).dec_len - 1) * 2**level


def auto_level(fs: float) -> int:
    """Depth chosen by ``level: auto`` for sampling rate ``fs`` (ignoring length).

    The deepest level ``J`` whose detail band still lies at or above
    ``AUTO_FLOOR_HZ`` = 10 Hz: ``fs / 2^(J+1) >= 10``, i.e.
    ``J = floor(log2(fs / 10)) - 1``, at least 1. The approximation then
    keeps 0 Hz up to between 10 and 20 Hz untouched (250 Hz: J = 3, 0-15.6 Hz;
    360 Hz: J = 4, 0-11.25 Hz; 500 Hz: J = 4, 0-15.6 Hz; 1000 Hz: J = 5,
    0-15.6 Hz), so P and T waves and the ST segment (below about 10 Hz) are
    never thresholded, while muscle noise, mains and the upper QRS band are.
    """
    return max(1, int(math.floor(math.log2(fs / AUTO_FLOOR_HZ))) - 1)


def resolve_level(settings, fs: float, n_samples: int, wavelet: str | None = None, source: str = "recording") -> int:
    """The decomposition level to use for a record.

    Parameters
    ----------
    settings : CleaningSettings
        Its ``level`` is an integer or ``'auto'`` (see :func:`auto_level`).
    fs : float
        Sampling rate in Hz.
    n_samples : int
        Samples per channel.
    wavelet : str, optional
        Wavelet name; defaults to ``settings.wavelet``.
    source : str
        Named in the error message.

    Returns
    -------
    int
        ``auto``: :func:`auto_level` limited to :func:`max_level`. An integer
        level is used as given.

    Raises
    ------
    SettingsError
        When the record is too short for the requested level (or for level 1).
    """
    wavelet = wavelet or settings.wavelet
    deepest = max_level(n_samples, wavelet)
    if settings.level == "auto":
        if deepest < 1:
            need = min_samples(1, wavelet)
            raise SettingsError(
                source, f"{n_samples} samples are too short to clean with wavelet {wavelet} (needs at least {need})"
            )
        return min(auto_level(fs), deepest)
    level = int(settings.level)
    if level > deepest:
        need = min_samples(level, wavelet)
        raise SettingsError(
            source,
            f"{n_samples} samples are too short for level {level} with wavelet {wavelet} "
            f"(needs at least {need}; use a lower level or level=auto)",
        )
    return level
