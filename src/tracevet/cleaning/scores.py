"""Scores of a cleaning against a known truth (labelled sets, benchmarks): SNR, SNR gain, PRD.

Definitions (``x`` the truth, ``y`` the noisy record, ``x^`` the cleaned one):

- SNR_in = 10 log10(sum x^2 / sum (y - x)^2), SNR_out = 10 log10(sum x^2 / sum (x^ - x)^2),
  gain = SNR_out - SNR_in (common practice in the wavelet-denoising literature);
- PRD = 100 sqrt(sum (x - x^)^2 / sum x^2) % (percentage root-mean-square difference; Zigel, Cohen &
  Katz 2000, IEEE Trans. Biomed. Eng. 47(11):1424-1430), so PRD = 100 10^(-SNR_out / 20).

PRD depends on the offset of ``x``: with ``centre=True`` (the default) every trace has its own mean
removed first, as a constant offset changes no shape.
"""

from __future__ import annotations

import math

import numpy as np


def _prepared(*arrays: np.ndarray, centre: bool) -> list[np.ndarray]:
    out = [np.asarray(a, dtype=np.float64).ravel() for a in arrays]
    if len({a.size for a in out}) != 1:
        raise ValueError("the traces must have the same length")
    return [a - a.mean() for a in out] if centre else out


def snr_db(truth: np.ndarray, estimate: np.ndarray, centre: bool = True) -> float:
    """10 log10(sum x^2 / sum (estimate - x)^2) in dB; inf when the estimate is exact."""
    x, e = _prepared(truth, estimate, centre=centre)
    err = float(np.sum((e - x) ** 2))
    return math.inf if err == 0 else 10.0 * math.log10(float(np.sum(x * x)) / err)


def snr_gain_db(truth: np.ndarray, noisy: np.ndarray, cleaned: np.ndarray, centre: bool = True) -> float:
    """SNR_out - SNR_in in dB (positive: the cleaning removed more than it added)."""
    return snr_db(truth, cleaned, centre) - snr_db(truth, noisy, centre)


def prd_percent(truth: np.ndarray, estimate: np.ndarray, centre: bool = True) -> float:
    """PRD = 100 sqrt(sum (x - x^)^2 / sum x^2) % (Zigel, Cohen & Katz 2000)."""
    x, e = _prepared(truth, estimate, centre=centre)
    return 100.0 * math.sqrt(float(np.sum((x - e) ** 2)) / float(np.sum(x * x)))
