"""Plain comparisons of two sequences: PRD, PRDN, RMSE, correlation (pure functions)."""

from __future__ import annotations

import numpy as np


def prd(x: np.ndarray, x_hat: np.ndarray) -> float:
    """Percentage root-mean-square difference, PRD = 100 sqrt(sum (x - x_hat)^2 / sum x^2).

    Common practice in ECG compression and denoising (e.g. Zigel, Cohen &
    Katz 2000, IEEE TBME 47(11):1424). Depends on the offset of ``x``: use
    zero-offset data or :func:`prdn`. Returns ``inf`` if ``x`` is all zero.
    """
    x = np.asarray(x, dtype=np.float64)
    x_hat = np.asarray(x_hat, dtype=np.float64)
    denom = float(np.sum(x * x))
    num = float(np.sum((x - x_hat) ** 2))
    return float("inf") if denom == 0 else 100.0 * np.sqrt(num / denom)


def prdn(x: np.ndarray, x_hat: np.ndarray) -> float:
    """Normalised PRD, PRDN = 100 sqrt(sum (x - x_hat)^2 / sum (x - mean x)^2).

    Common practice; independent of the offset of ``x``. Returns ``inf`` if
    ``x`` is constant.
    """
    x = np.asarray(x, dtype=np.float64)
    x_hat = np.asarray(x_hat, dtype=np.float64)
    centred = x - x.mean()
    denom = float(np.sum(centred * centred))
    num = float(np.sum((x - x_hat) ** 2))
    return float("inf") if denom == 0 else 100.0 * np.sqrt(num / denom)


def rmse(x: np.ndarray, x_hat: np.ndarray) -> float:
    """Root-mean-square error sqrt(mean (x - x_hat)^2) (common practice)."""
    diff = np.asarray(x, dtype=np.float64) - np.asarray(x_hat, dtype=np.float64)
    return float(np.sqrt(np.mean(diff * diff)))


def correlation(x: np.ndarray, y: np.ndarray) -> float | None:
    """Pearson correlation coefficient; ``None`` if either input is constant."""
    x = np.asarray(x, dtype=np.float64) - np.mean(x)
    y = np.asarray(y, dtype=np.float64) - np.mean(y)
    denom = float(np.sqrt(np.sum(x * x) * np.sum(y * y)))
    return None if denom == 0 else float(np.sum(x * y) / denom)
