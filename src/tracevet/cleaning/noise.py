"""Noise level estimates from wavelet detail coefficients."""

from __future__ import annotations

import numpy as np

# Phi^-1(3/4), the 0.75 quantile of the standard normal distribution: for
# zero-mean Gaussian noise median(|Z|) = sigma * Phi^-1(3/4)
# (Donoho & Johnstone 1994, Biometrika 81:425-455, section 4.2).
MAD_TO_SIGMA = 0.6744897501960817


def mad_sigma(coeffs: np.ndarray) -> float:
    """Robust noise standard deviation ``median(|d|) / 0.6745``.

    The median of absolute values ignores the few large coefficients that
    carry the signal (Donoho & Johnstone 1994, Biometrika 81:425-455,
    section 4.2). Use it on the finest detail level for white noise, or on
    each level separately for coloured noise (Johnstone & Silverman 1997,
    J R Stat Soc B 59(2):319-351).

    Parameters
    ----------
    coeffs : array
        Detail coefficients (any shape; a subsample is fine).

    Returns
    -------
    float
        The estimate; 0.0 for an empty array.
    """
    d = np.abs(np.asarray(coeffs, dtype=np.float64).ravel())
    if d.size == 0:
        return 0.0
    return float(np.median(d)) / MAD_TO_SIGMA


def level_sigmas(details: list[np.ndarray], estimate: str) -> list[float]:
    """Noise standard deviation for each detail level (finest first).

    Parameters
    ----------
    details : list of arrays
        Detail coefficients, ``details[0]`` the finest level.
    estimate : {'finest', 'per_level'}
        ``finest``: one MAD estimate from the finest level used for every
        level (white noise; the orthonormal DWT keeps white-noise variance
        equal across levels). ``per_level``: a MAD estimate per level
        (coloured noise, Johnstone & Silverman 1997).
    """
    if estimate == "finest":
        sigma = mad_sigma(details[0])
        return [sigma] * len(details)
    if estimate == "per_level":
        return [mad_sigma(d) for d in details]
    raise ValueError(f"unknown noise estimate {estimate!r} (choices: finest, per_level)")
