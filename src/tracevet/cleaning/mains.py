"""Mains line detection: is there a 50 or 60 Hz line standing out of the spectrum?

``mains: auto`` (the default) notches only what this finds. For each channel a
Welch power spectrum (Welch 1967, IEEE Trans. Audio Electroacoust. 15(2):70-73;
Hann windows of at least 4 s, so bins of 0.25 Hz or finer) is estimated from at
most :data:`MAX_SEGMENTS` windows spread evenly over the record (a 24-hour record
costs no more than a few minutes' worth). A candidate line at ``f`` (50 or 60 Hz
and its multiples below the Nyquist frequency) has a *strength*:

    strength_dB = 10 log10( max P(f +- 0.5 Hz) / median P(f +- [1.5, 5] Hz) )

the peak bin within half a hertz of the line against the median of the
neighbouring spectrum on both sides (a line is narrow; muscle noise and the
QRS spectrum are smooth over a few hertz). The line counts as present when the
fundamental's strength is at least :data:`MARGIN_DB` = 15 dB (our choice: about
tenfold power ratio in one bin; ECG content does not make such a peak within
a few hertz of 50 or 60 Hz, and a hum of 0.01 mV rms on a 1 mV ECG already
stands out by more than 20 dB). When both 50 and 60 Hz pass, the stronger is
taken. The line's amplitude is reported as the rms of the power above the
neighbouring floor within +-1 Hz (Welch PSD integrated over frequency gives
power; common practice).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
from scipy import signal

CANDIDATES_HZ = (50.0, 60.0)
MARGIN_DB = 15.0
MIN_WINDOW_S = 4.0
MAX_SEGMENTS = 48
PEAK_HALF_WIDTH_HZ = 0.5
NEIGHBOUR_HZ = (1.5, 5.0)


@dataclass(frozen=True)
class MainsDetection:
    """What :func:`detect_mains` found in one record.

    Attributes
    ----------
    frequency_hz : float or None
        50.0 or 60.0 when a line stands out by at least ``margin_db``; else None.
    strength_db : float or None
        Strength of the chosen (or, with no line, the stronger) candidate's fundamental,
        in dB above its neighbouring spectrum, on the channel where it is strongest.
    amplitude_rms : float or None
        Estimated rms of the fundamental line, in the record's units.
    harmonics_db : tuple of float
        Strength of each multiple of the reported frequency below the Nyquist frequency.
    channel : int or None
        Channel where the reported strength was measured.
    margin_db : float
        The margin a line must stand out by.
    note : str
        Why nothing could be measured, when that is the case ('' otherwise).
    candidates : dict
        Fundamental strength (dB) of every candidate frequency, by frequency.
    """

    frequency_hz: float | None
    strength_db: float | None
    amplitude_rms: float | None = None
    harmonics_db: tuple[float, ...] = ()
    channel: int | None = None
    margin_db: float = MARGIN_DB
    note: str = ""
    candidates: dict = field(default_factory=dict)

    def to_dict(self) -> dict:
        """JSON-safe form (stored in a queue run's ``run.json`` as ``mains_detection``)."""

        def num(v):
            return None if v is None or not math.isfinite(v) else round(float(v), 2)

        return {
            "frequency_hz": self.frequency_hz,
            "strength_db": num(self.strength_db),
            "amplitude_rms": None if self.amplitude_rms is None else float(f"{self.amplitude_rms:.4g}"),
            "harmonics_db": [num(v) for v in self.harmonics_db],
            "channel": self.channel,
            "margin_db": self.margin_db,
            "note": self.note,
            "candidates": {str(int(k)): num(v) for k, v in self.candidates.items()},
        }

    def describe(self, units: str = "") -> str:
        """One line for people: what was found and what it means for the notch."""
        unit = f" {units}" if units else ""
        if self.note:
            return f"mains auto: not measured ({self.note}); no notch"
        if self.frequency_hz is None:
            best = max(self.candidates.items(), key=lambda kv: kv[1], default=(None, None))
            if best[0] is None:
                return "mains auto: no 50/60 Hz line; no notch"
            return (
                f"mains auto: no 50/60 Hz line (strongest {best[0]:g} Hz at {best[1]:.1f} dB, "
                f"below the {self.margin_db:g} dB margin); no notch"
            )
        amp = f", about {self.amplitude_rms:.3g}{unit} rms" if self.amplitude_rms is not None else ""
        return (
            f"mains auto: {self.frequency_hz:g} Hz line {self.strength_db:.1f} dB above the neighbouring "
            f"spectrum{amp}; notched"
        )


def welch_psd(x: np.ndarray, fs: float) -> tuple[np.ndarray, np.ndarray] | None:
    """Welch PSD of ``x`` from at most :data:`MAX_SEGMENTS` Hann windows spread over the record.

    Window length: the next power of two at or above ``MIN_WINDOW_S * fs``.
    Returns ``(freqs, psd)``, or None when the record is shorter than one window.
    """
    x = np.asarray(x)
    n = x.shape[0]
    if not (math.isfinite(fs) and MIN_WINDOW_S * fs <= n):
        return None
    nper = 1 << int(math.ceil(math.log2(max(2.0, MIN_WINDOW_S * fs))))
    if n < nper:
        return None
    count = min(MAX_SEGMENTS, max(1, (n - nper) // (nper // 2) + 1))
    starts = np.linspace(0, n - nper, count).astype(np.int64)
    window = signal.get_window("hann", nper)
    scale = 1.0 / (fs * float(np.sum(window * window)))
    psd = np.zeros(nper // 2 + 1)
    for s in starts:  # at most MAX_SEGMENTS windows, whatever the record length
        seg = np.asarray(x[s : s + nper], dtype=np.float64)
        seg = (seg - seg.mean()) * window
        spec = np.fft.rfft(seg)
        psd += (spec.real**2 + spec.imag**2) * scale
    psd /= len(starts)
    psd[1:-1] *= 2.0  # one-sided
    freqs = np.fft.rfftfreq(nper, 1.0 / fs)
    return freqs, psd


def line_strength(freqs: np.ndarray, psd: np.ndarray, f0: float) -> tuple[float, float]:
    """``(strength_dB, amplitude_rms)`` of a line at ``f0`` (see the module docstring)."""
    df = freqs[1] - freqs[0]
    dist = np.abs(freqs - f0)
    peak_band = dist <= PEAK_HALF_WIDTH_HZ
    near = (dist >= NEIGHBOUR_HZ[0]) & (dist <= NEIGHBOUR_HZ[1])
    if not peak_band.any() or near.sum() < 4:
        return float("nan"), float("nan")
    floor = float(np.median(psd[near]))
    peak = float(psd[peak_band].max())
    tiny = np.finfo(float).tiny
    strength = 10.0 * math.log10(max(peak, tiny) / max(floor, tiny))
    within = dist <= 1.0
    power = float(np.sum(np.maximum(psd[within] - floor, 0.0)) * df)
    return strength, math.sqrt(power)


def detect_mains(samples: np.ndarray, fs: float, harmonics: int = 3, margin_db: float = MARGIN_DB) -> MainsDetection:
    """Look for a 50 or 60 Hz mains line in every channel of ``samples`` (n x channels or 1-D).

    Parameters
    ----------
    samples : array
        The record, one column per channel.
    fs : float
        Sampling rate in Hz.
    harmonics : int
        Multiples measured for the report (those below the Nyquist frequency).
    margin_db : float
        How far the fundamental must stand out of its neighbouring spectrum.
    """
    data = np.asarray(samples)
    if data.ndim == 1:
        data = data[:, None]
    nyquist = fs / 2.0
    usable = [f for f in CANDIDATES_HZ if f + NEIGHBOUR_HZ[1] < nyquist]
    if not usable:
        note = f"50 and 60 Hz are not below the Nyquist frequency ({nyquist:g} Hz)"
        return MainsDetection(None, None, margin_db=margin_db, note=note)
    best: dict[float, tuple[float, float, int]] = {}
    spectra = []
    for c in range(data.shape[1]):
        est = welch_psd(data[:, c], fs)
        if est is None:
            return MainsDetection(None, None, margin_db=margin_db, note=f"record shorter than {MIN_WINDOW_S:g} s")
        spectra.append(est)
        for f0 in usable:
            strength, amp = line_strength(est[0], est[1], f0)
            if math.isfinite(strength) and (f0 not in best or strength > best[f0][0]):
                best[f0] = (strength, amp, c)
    candidates = {f: v[0] for f, v in best.items()}
    passing = [f for f, v in best.items() if v[0] >= margin_db]
    chosen = max(passing, key=lambda f: best[f][0]) if passing else None
    shown = chosen if chosen is not None else (max(best, key=lambda f: best[f][0]) if best else None)
    if shown is None:
        return MainsDetection(None, None, margin_db=margin_db, note="spectrum too coarse", candidates=candidates)
    strength, amp, channel = best[shown]
    freqs, psd = spectra[channel]
    harm = []
    for k in range(1, int(harmonics) + 1):
        if k * shown + NEIGHBOUR_HZ[1] >= nyquist:
            break
        harm.append(line_strength(freqs, psd, k * shown)[0])
    return MainsDetection(
        chosen,
        strength,
        amp if chosen is not None else None,
        tuple(harm),
        channel,
        margin_db,
        "",
        candidates,
    )
