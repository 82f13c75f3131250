"""Zero-phase baseline and mains filters (second-order sections, forward-backward)."""

from __future__ import annotations

import math
from functools import lru_cache

import numpy as np
from scipy import signal

from tracevet.errors import SettingsError

BASELINE_ORDER = 2
MAINS_BANDWIDTH_HZ = 1.0
# Narrowest band, as a fraction of the sampling rate, that a second-order IIR
# design still represents in double precision (below about 5e-10 the poles round
# onto the unit circle and the forward-backward start-up solve is singular).
MIN_RELATIVE_BAND = 1e-8


def _check_band(name: str, what: str, band_hz: float, fs: float) -> None:
    """Refuse a filter band too narrow, relative to ``fs``, to be designed stably."""
    if band_hz / fs < MIN_RELATIVE_BAND:
        raise SettingsError(
            name,
            f"{what} {band_hz:g} Hz is too small a fraction of the sampling rate ({fs:g} Hz) for a stable filter; "
            "check the sampling rate or turn this filter off",
        )


def baseline_sos(fs: float, cutoff_hz: float, order: int = BASELINE_ORDER) -> np.ndarray:
    """Butterworth high-pass sections for zero-phase baseline removal.

    Filtering forward and backward (:func:`zero_phase`) squares the magnitude
    response, so each pass is designed with its corner at
    ``r = (sqrt(2) + 1)^(1 / (2 order))`` below ``cutoff`` (in the
    bilinear-warped frequency): the forward-backward response is then -3 dB at
    ``cutoff`` (Butterworth high-pass ``|H|^2 = r^(2N) / (1 + r^(2N))`` with
    ``r = tan(pi f / fs) / tan(pi f_c / fs)``, so ``|H|^4 = 1/2``). Zero phase means no
    phase distortion of the ST segment; the diagnostic-ECG recommendation
    (AHA 2007, Kligfield et al., JACC 49(10):1109-1127) is a 0.05 Hz
    low-frequency cutoff, or up to 0.67 Hz only with linear-phase filtering.
    """
    if not 0 < cutoff_hz < fs / 2:
        raise SettingsError(
            "baseline_cutoff_hz", f"{cutoff_hz:g} Hz is not below half the sampling rate ({fs / 2:g} Hz)"
        )
    _check_band("baseline_cutoff_hz", "cutoff", cutoff_hz, fs)
    # Digital Butterworth: r = tan(pi f / fs) / tan(pi f_c / fs) (bilinear transform).
    ratio = (math.sqrt(2.0) + 1.0) ** (1.0 / (2 * order))
    corner = fs / math.pi * math.atan(math.tan(math.pi * cutoff_hz / fs) / ratio)
    return signal.butter(order, corner, btype="highpass", output="sos", fs=fs)


def mains_sos(
    fs: float, mains_hz: float, harmonics: int, bandwidth_hz: float = MAINS_BANDWIDTH_HZ
) -> np.ndarray | None:
    """Notch sections at ``mains_hz`` and its multiples below the Nyquist frequency.

    Each notch is a second-order IIR notch (``scipy.signal.iirnotch``) with
    quality factor ``f / bandwidth_hz``; applied forward and backward it has
    zero phase. Multiples at or above ``fs / 2`` are skipped. Returns ``None``
    when no multiple lies below the Nyquist frequency.
    """
    _check_band("mains", "notch bandwidth", bandwidth_hz, fs)
    sections = []
    for k in range(1, int(harmonics) + 1):
        f = k * float(mains_hz)
        if f >= fs / 2 - bandwidth_hz:
            break
        b, a = signal.iirnotch(f, f / bandwidth_hz, fs=fs)
        sections.append(signal.tf2sos(b, a))
    return np.vstack(sections) if sections else None


def settle_samples(fs: float, lowest_hz: float) -> int:
    """Samples over which the edge transient of a forward-backward filter dies out.

    Eight periods of the lowest corner frequency (the slowest pole decays
    at least as fast as ``exp(-2 pi f t sin(pi / 4))``, i.e. below 1e-7 of
    its start after eight periods for the second-order Butterworth).
    """
    return int(math.ceil(8.0 * fs / lowest_hz))


def zero_phase(x: np.ndarray, sos: np.ndarray, fs: float, lowest_hz: float) -> np.ndarray:
    """Apply ``sos`` forward and backward (``scipy.signal.sosfiltfilt``).

    The ends are padded by odd extension over up to one period of the
    lowest corner frequency, so a record starts and ends without a jump.
    Returns an array of ``x``'s dtype.
    """
    n = x.shape[0]
    padlen = min(n - 1, int(math.ceil(fs / lowest_hz)))
    y = signal.sosfiltfilt(sos, x, padtype="odd", padlen=max(padlen, 0))
    return y.astype(x.dtype, copy=False)


def stage_filters(fs: float, settings) -> list[tuple[np.ndarray, float]]:
    """The filters ``settings`` asks for, as ``(sos, lowest corner Hz)`` pairs, in order.

    Designs are cached per rate and settings (the arrays are shared: do not modify them).
    """
    return list(
        _stage_filters(
            float(fs), settings.baseline, settings.baseline_cutoff_hz, settings.mains, settings.mains_harmonics
        )
    )


@lru_cache(maxsize=64)
def _stage_filters(fs: float, baseline: str, cutoff_hz: float, mains: str, harmonics: int) -> tuple:
    stages = []
    if baseline == "butterworth":
        stages.append((baseline_sos(fs, cutoff_hz), cutoff_hz))
    if mains != "off":
        sos = mains_sos(fs, float(mains), harmonics)
        if sos is not None:
            stages.append((sos, MAINS_BANDWIDTH_HZ))
    return tuple(stages)
