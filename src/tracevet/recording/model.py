"""The in-memory recording model shared by every layer."""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace
from datetime import datetime

import numpy as np

from tracevet.errors import InputError

KINDS = ("ecg", "mcg", "other")
# Largest sample magnitude accepted. The engine works in float32 where that keeps
# accuracy; sums of squares of values near 1e19 overflow float32 (max 3.4e38),
# so 1e15 leaves room for a day of samples. Real values are far below it
# (uV ECG ~1e3, 24-bit ADC counts ~1e7).
MAX_ABS_SAMPLE = 1e15

# Spellings accepted for units, mapped to the canonical ASCII form.
_UNIT_ALIASES = {
    "v": "V",
    "mv": "mV",
    "uv": "uV",
    "µv": "uV",
    "μv": "uV",
    "nv": "nV",
    "t": "T",
    "nt": "nT",
    "pt": "pT",
    "ft": "fT",
    "adu": "adu",
}

# Factor that converts one unit into millivolts (electric) or picotesla (magnetic).
UNIT_TO_MV = {"V": 1e3, "mV": 1.0, "uV": 1e-3, "nV": 1e-6}
UNIT_TO_PT = {"T": 1e12, "nT": 1e3, "pT": 1.0, "fT": 1e-3}


KNOWN_UNITS = tuple(dict.fromkeys(_UNIT_ALIASES.values()))


def units_option(text: str) -> str:
    """Units typed on the command line (``--units``): a known unit, or InputError listing them.

    Files may carry other unit strings (kept as given, judged with relative
    limits); a unit a person types that tracevet does not know is refused,
    so a typo such as ``volts`` does not silently turn absolute limits off.
    """
    known = _UNIT_ALIASES.get(str(text).strip().lower())
    if known is None:
        raise InputError("--units", f"unknown units {str(text)[:20]!r} (known: {', '.join(KNOWN_UNITS)})")
    return known


def normalise_units(units: str | None, source: str = "units") -> str | None:
    """Return the canonical spelling of ``units`` (``mV``, ``uV``, ``pT``...).

    Unknown but printable unit strings are kept as given (stripped), so a
    recording in an unusual unit is still readable; the assessment then uses
    relative limits. ``None`` or an empty string means unknown units.
    """
    if units is None:
        return None
    text = str(units).strip()
    if not text:
        return None
    if len(text) > 16 or any(ord(c) < 32 or ord(c) == 127 for c in text):
        raise InputError(source, f"unusable units {text[:20]!r}")
    return _UNIT_ALIASES.get(text.lower(), text)


@dataclass(frozen=True)
class Recording:
    """A multi-channel recording held in memory.

    Attributes
    ----------
    samples : numpy.ndarray
        Shape ``(n_samples, n_channels)``, float32 or float64, all finite.
    fs : float
        Sampling rate in Hz, positive and finite.
    channels : tuple of str
        One name per column of ``samples``.
    units : str or None
        Physical units (``mV``, ``uV``, ``pT``, ``fT``...) or ``None`` if unknown.
    kind : str
        ``ecg``, ``mcg`` or ``other``.
    start_time : datetime or None
        When the recording started, if known.
    source : str
        Where it came from (a path), used in error messages.
    """

    samples: np.ndarray
    fs: float
    channels: tuple[str, ...]
    units: str | None = None
    kind: str = "other"
    start_time: datetime | None = None
    source: str = "<memory>"
    metadata: dict = field(default_factory=dict, compare=False)

    def __post_init__(self) -> None:
        src = self.source
        samples = np.asarray(self.samples)
        if samples.ndim == 1:
            samples = samples[:, None]
        if samples.ndim != 2:
            raise InputError(src, f"samples must be 1-D or 2-D, got {samples.ndim}-D")
        if samples.dtype not in (np.float32, np.float64):
            if not (np.issubdtype(samples.dtype, np.integer) or np.issubdtype(samples.dtype, np.floating)):
                raise InputError(src, f"samples must be numeric, got dtype {samples.dtype}")
            samples = samples.astype(np.float32 if samples.dtype.itemsize <= 2 else np.float64)
        if samples.shape[0] == 0:
            raise InputError(src, "no samples")
        if samples.shape[1] == 0:
            raise InputError(src, "no channels")
        if not np.isfinite(samples).all():
            bad = np.argwhere(~np.isfinite(samples))[0]
            raise InputError(src, f"non-finite sample (NaN or inf) at sample {int(bad[0])}, channel {int(bad[1]) + 1}")
        peak = max(abs(float(samples.max())), abs(float(samples.min())))
        if peak > MAX_ABS_SAMPLE:
            raise InputError(
                src,
                f"sample values reach {peak:.3g}, beyond the {MAX_ABS_SAMPLE:.0e} tracevet can process "
                "without overflow; check the units or rescale the recording",
            )
        try:
            fs = float(self.fs)
        except (TypeError, ValueError):
            raise InputError(src, f"sampling rate {self.fs!r} is not a number") from None
        if not math.isfinite(fs) or fs <= 0:
            raise InputError(src, f"sampling rate must be positive and finite, got {self.fs!r}")
        channels = tuple(str(c) for c in self.channels)
        if len(channels) != samples.shape[1]:
            raise InputError(src, f"{len(channels)} channel names for {samples.shape[1]} channels")
        if self.kind not in KINDS:
            raise InputError(src, f"kind must be one of {', '.join(KINDS)}, got {self.kind!r}")
        object.__setattr__(self, "samples", samples)
        object.__setattr__(self, "fs", fs)
        object.__setattr__(self, "channels", channels)
        object.__setattr__(self, "units", normalise_units(self.units, src))

    @property
    def n_samples(self) -> int:
        """Number of samples per channel."""
        return int(self.samples.shape[0])

    @property
    def n_channels(self) -> int:
        """Number of channels."""
        return int(self.samples.shape[1])

    @property
    def duration_s(self) -> float:
        """Duration in seconds (``n_samples / fs``)."""
        return self.n_samples / self.fs

    def channel(self, index: int) -> np.ndarray:
        """Return one channel as a 1-D view."""
        return self.samples[:, index]

    def with_samples(self, samples: np.ndarray, **changes) -> "Recording":
        """Return a copy carrying new samples (same shape) and the same metadata."""
        samples = np.asarray(samples)
        if samples.ndim == 1:
            samples = samples[:, None]
        if samples.shape != self.samples.shape:
            raise InputError(self.source, f"new samples have shape {samples.shape}, expected {self.samples.shape}")
        return replace(self, samples=samples, **changes)

    def describe(self) -> dict:
        """Plain metadata (no samples) for logs, reports and the queue."""
        return {
            "fs": self.fs,
            "n_samples": self.n_samples,
            "channels": list(self.channels),
            "units": self.units,
            "kind": self.kind,
            "start_time": self.start_time.isoformat() if self.start_time else None,
            "duration_s": self.duration_s,
        }
