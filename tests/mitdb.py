"""The shipped real ECG: MIT-BIH Arrhythmia Database record 208, lead MLII, first 300 s at 360 Hz.

Moody & Mark (2001), IEEE Eng. Med. Biol. 20(3):45-50; Goldberger et al. (2000), PhysioNet.
Stored as 11-bit ADC units (tests/data/README.md); millivolts are ``(adu - 1024) / 200``, the
conversion of SciPy's ``scipy.misc.electrocardiogram``, whose docstring gives the mean
(-0.16510875 mV) and standard deviation (0.5992473991177294 mV) that
``tests/test_recording_io.py`` checks.
"""

from __future__ import annotations

from functools import lru_cache
from pathlib import Path

import numpy as np

FS = 360.0
PATH = Path(__file__).resolve().parent / "data" / "mitdb-208-excerpt.npz"


@lru_cache(maxsize=1)
def _all_mv() -> np.ndarray:
    with np.load(PATH) as data:
        mv = (data["ecg"].astype(np.float64) - 1024.0) / 200.0
    mv.setflags(write=False)
    return mv


def excerpt_mv(seconds: float | None = None, start_s: float = 0.0) -> np.ndarray:
    """The excerpt in millivolts (a fresh float64 copy), from ``start_s`` for ``seconds`` (all by default)."""
    mv = _all_mv()
    a = int(round(start_s * FS))
    b = mv.size if seconds is None else a + int(round(seconds * FS))
    return mv[a:b].copy()
