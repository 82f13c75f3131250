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
    return median_inplace(np.abs(np.asarray(coeffs).ravel())) / MAD_TO_SIGMA


def median_inplace(values: np.ndarray) -> float:
    """Median of a 1-D array, reordering the array (one partition, no copy).

    For an even count it is the mean of the two middle values, as
    ``numpy.median``; the lower one is the maximum of the lower part.
    """
    n = values.size
    if n == 0:
        return 0.0
    k = n // 2
    values.partition(k)
    upper = float(values[k])
    if n % 2:
        return upper
    return 0.5 * (float(values[:k].max()) + upper)


def level_sigmas(details: list[np.ndarray], estimate: str, magnitudes: bool = False) -> list[float]:
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
    magnitudes : bool
        True when ``details`` already hold ``|d|`` in arrays the caller no
        longer needs in order: they are then partitioned in place.
    """
    one = (lambda d: median_inplace(d.reshape(-1)) / MAD_TO_SIGMA) if magnitudes else mad_sigma
    if estimate == "finest":
        sigma = one(details[0])
        return [sigma] * len(details)
    if estimate == "per_level":
        return [one(d) for d in details]
    raise ValueError(f"unknown noise estimate {estimate!r} (choices: finest, per_level)")
