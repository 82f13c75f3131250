"""Filters before the shrinkage: zero-phase baseline high-pass and mains notches, robust baseline."""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import lru_cache

import numpy as np
from scipy import signal

from tracevet.cleaning import baseline
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
    for f in mains_frequencies(fs, mains_hz, harmonics, bandwidth_hz):
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


def line_padded(x: np.ndarray, fs: float, padlen: int, line_hz: tuple[float, ...]) -> np.ndarray:
    """``x`` extended by ``padlen`` samples at both ends, the mains lines continued in phase.

    Near each end the lines at ``line_hz`` are fitted by least squares (a cosine and a sine per
    line, over ``max(2 s, padlen + 1)`` samples) and continued into the extension; the rest is
    extended by odd extension about its end sample. A notch then meets a steady line where the
    record starts and ends, instead of a line that starts abruptly (which leaves it ringing with
    the line for about 1 / (pi x bandwidth) s, and the ends keep their hum).
    """
    n = x.shape[0]
    span = min(n, max(int(2 * fs), padlen + 1))
    out = np.empty(n + 2 * padlen, dtype=np.float64)
    out[padlen : padlen + n] = x
    w = 2 * np.pi * np.asarray(line_hz, dtype=np.float64)[None, :] / fs
    for side in ("left", "right"):
        seg = np.asarray(x[:span] if side == "left" else x[n - span :], dtype=np.float64)
        t_in = np.arange(span, dtype=np.float64)[:, None]
        basis = np.hstack([np.cos(w * t_in), np.sin(w * t_in), np.ones((span, 1))])
        coef, *_ = np.linalg.lstsq(basis, seg, rcond=None)
        k = len(line_hz)
        if side == "left":
            t_out = np.arange(-padlen, 0, dtype=np.float64)[:, None]
        else:
            t_out = np.arange(span, span + padlen, dtype=np.float64)[:, None]
        lines_in = np.hstack([np.cos(w * t_in), np.sin(w * t_in)]) @ coef[: 2 * k]
        lines_out = np.hstack([np.cos(w * t_out), np.sin(w * t_out)]) @ coef[: 2 * k]
        rest = seg - lines_in
        if side == "left":
            out[:padlen] = lines_out + (2.0 * rest[0] - rest[padlen:0:-1])
        else:
            out[padlen + n :] = lines_out + (2.0 * rest[-1] - rest[-2 : -padlen - 2 : -1])
    return out


def zero_phase(
    x: np.ndarray,
    sos: np.ndarray,
    fs: float,
    lowest_hz: float,
    ends: str = "baseline",
    line_hz: tuple[float, ...] = (),
) -> np.ndarray:
    """Apply ``sos`` forward and backward (``scipy.signal.sosfiltfilt``) without inventing end transients.

    The ends are extended over up to one period of the lowest corner frequency.
    ``ends='baseline'`` (for high-passes): about the record's local baseline
    (:func:`tracevet.cleaning.baseline.end_padded`: the baseline continued by odd
    extension, the rest mirrored), not about the end sample, so a record that
    starts or ends inside a wave is not pulled towards that wave's height for
    seconds. ``ends='odd'`` (for notches): odd extension about the end sample,
    continuous in value and slope. With ``line_hz`` (notches): the lines are
    continued in phase (:func:`line_padded`). Returns an array of ``x``'s dtype.
    """
    n = x.shape[0]
    padlen = min(n - 1, int(math.ceil(fs / lowest_hz)))
    if padlen <= 0:
        return signal.sosfiltfilt(sos, x, padlen=0).astype(x.dtype, copy=False)
    if ends == "odd":
        return signal.sosfiltfilt(sos, x, padtype="odd", padlen=padlen).astype(x.dtype, copy=False)
    if line_hz:
        padded = line_padded(x, fs, padlen, line_hz)
    else:
        padded = baseline.end_padded(x, fs, padlen)
    y = signal.sosfiltfilt(sos, padded, padlen=0)
    return y[padlen : padlen + n].astype(x.dtype, copy=False)


@dataclass(frozen=True)
class Stage:
    """One filtering stage before the shrinkage.

    ``kind`` is ``'iir'`` (``sos`` applied by :func:`zero_phase`, ``lowest_hz`` its
    lowest corner) or ``'median'`` (the robust baseline of
    :mod:`tracevet.cleaning.baseline`). ``overlap`` is the number of samples
    a block must be read with on each side for the result to equal whole-record
    processing.
    """

    kind: str
    sos: np.ndarray | None
    lowest_hz: float
    overlap: int
    ends: str = "baseline"
    line_hz: tuple[float, ...] = ()

    def apply(self, segment: np.ndarray, fs: float) -> np.ndarray:
        """The stage's output for ``segment`` (a new array of its dtype)."""
        if self.kind == "median" or self.sos is None:
            return baseline.remove(segment, fs)
        return zero_phase(segment, self.sos, fs, self.lowest_hz, self.ends, self.line_hz)


def mains_frequencies(
    fs: float, mains_hz: float, harmonics: int, bandwidth_hz: float = MAINS_BANDWIDTH_HZ
) -> list[float]:
    """Multiples of ``mains_hz`` (up to ``harmonics`` of them) that a notch can take at rate ``fs``."""
    out = []
    for k in range(1, int(harmonics) + 1):
        f = k * float(mains_hz)
        if f >= fs / 2 - bandwidth_hz:
            break
        out.append(f)
    return out


def stage_filters(fs: float, settings) -> list[Stage]:
    """The filters ``settings`` asks for, as :class:`Stage` objects, in order.

    ``mains`` must be resolved (``50``, ``60`` or ``off``; see
    :func:`tracevet.cleaning.resolve.resolve_settings`); ``auto`` here counts as off.
    An explicit ``mains=50`` or ``60`` at a rate where no multiple lies below the
    Nyquist frequency is refused (nothing would be removed). Designs are cached
    per rate and settings (the arrays are shared: do not modify them).
    """
    return list(
        _stage_filters(
            float(fs), settings.baseline, settings.baseline_cutoff_hz, settings.mains, settings.mains_harmonics
        )
    )


@lru_cache(maxsize=64)
def _stage_filters(fs: float, baseline_method: str, cutoff_hz: float, mains: str, harmonics: int) -> tuple:
    stages = []
    if baseline_method == "butterworth":
        stages.append(Stage("iir", baseline_sos(fs, cutoff_hz), cutoff_hz, settle_samples(fs, cutoff_hz)))
    elif baseline_method == "median":
        stages.append(Stage("median", None, 0.0, baseline.reach_samples(fs) + 2 * baseline.block_length(fs)))
    if mains in ("50", "60"):
        sos = mains_sos(fs, float(mains), harmonics)
        if sos is None:
            raise SettingsError(
                "mains",
                f"{mains} cannot be notched at {fs:g} Hz: every multiple of {mains} Hz lies at or above the Nyquist "
                f"frequency ({fs / 2:g} Hz) less the notch bandwidth; use mains=off (or auto)",
            )
        lines = tuple(mains_frequencies(fs, float(mains), harmonics))
        stages.append(Stage("iir", sos, MAINS_BANDWIDTH_HZ, settle_samples(fs, MAINS_BANDWIDTH_HZ), "lines", lines))
    return tuple(stages)
