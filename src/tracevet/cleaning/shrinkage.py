"""Wavelet shrinkage of one segment: threshold functions, DWT and SWT paths."""

from __future__ import annotations

from typing import Sequence

import numpy as np
import pywt

MODES = ("garrote", "hard", "soft")


def _soft(x: np.ndarray, lam: float) -> None:
    # eta_soft(x) = sign(x) max(|x| - lam, 0)  (Donoho & Johnstone 1994)
    mag = np.abs(x)
    np.subtract(mag, lam, out=mag)
    np.maximum(mag, 0, out=mag)
    np.copysign(mag, x, out=x)


def _hard(x: np.ndarray, lam: float) -> None:
    # eta_hard(x) = x 1{|x| >= lam}; |x| == lam is kept, as PyWavelets does.
    x[np.abs(x) < lam] = 0


def _garrote(x: np.ndarray, lam: float) -> None:
    # Non-negative garrote x max(1 - lam^2 / x^2, 0)
    # (Gao 1998, J Comput Graph Stat 7(4):469-488; Breiman 1995).
    sq = np.square(x)
    with np.errstate(divide="ignore", invalid="ignore"):
        np.divide(lam * lam, sq, out=sq, where=sq > 0)
    sq[x == 0] = 1.0
    np.subtract(1, sq, out=sq)
    np.maximum(sq, 0, out=sq)
    np.multiply(x, sq, out=x)


_THRESHOLD_FUNCTIONS = {"soft": _soft, "hard": _hard, "garrote": _garrote}


def threshold_inplace(x: np.ndarray, lam: float, mode: str) -> np.ndarray:
    """Threshold ``x`` in place and return it.

    Parameters
    ----------
    x : float array
        Coefficients (modified).
    lam : float
        Threshold, in the units of ``x``.
    mode : {'soft', 'hard', 'garrote'}
        Soft and hard thresholding (Donoho & Johnstone 1994, Biometrika
        81:425-455) or the non-negative garrote (Gao 1998, J Comput Graph
        Stat 7(4):469-488). Same results as ``pywt.threshold``.

    Examples
    --------
    >>> threshold_inplace(np.linspace(1, 4, 7), 2.0, "soft")
    array([0. , 0. , 0. , 0.5, 1. , 1.5, 2. ])
    """
    if mode not in _THRESHOLD_FUNCTIONS:
        raise ValueError(f"unknown threshold mode {mode!r} (choices: {', '.join(MODES)})")
    if lam > 0:
        _THRESHOLD_FUNCTIONS[mode](x, lam)
    return x


def dwt_details(segment: np.ndarray, wavelet: str, mode: str, level: int) -> list[np.ndarray]:
    """Detail coefficients of ``pywt.wavedec``, finest level first."""
    coeffs = pywt.wavedec(segment, wavelet, mode=mode, level=level)
    return coeffs[:0:-1]


def dwt_shrink(segment: np.ndarray, wavelet: str, mode: str, level: int, lams: Sequence[float], threshold_mode: str) -> np.ndarray:
    """Decimated wavelet shrinkage of a segment.

    ``pywt.wavedec``, each detail level ``j`` (``lams[j-1]``, finest first)
    thresholded, the approximation kept, ``pywt.waverec`` and cropped to the
    segment length.
    """
    coeffs = pywt.wavedec(segment, wavelet, mode=mode, level=level)
    for j, lam in enumerate(lams, start=1):
        threshold_inplace(coeffs[-j], lam, threshold_mode)
    out = pywt.waverec(coeffs, wavelet, mode=mode)
    return out[: segment.shape[0]]


def iswt_fast(coeffs: Sequence[np.ndarray], wavelet: str) -> np.ndarray:
    """Inverse stationary wavelet transform of ``pywt.swt(..., trim_approx=True)`` output.

    Same result as ``pywt.iswt`` (Nason & Silverman 1995, The stationary
    wavelet transform and some statistical applications, Lecture Notes in
    Statistics 103:281-299): at level ``j`` the signal is the average of the
    inverse DWTs of its two decimation phases, the odd one shifted by one.
    ``pywt.iswt`` loops in Python over the ``2^(j-1)`` interleaved sub-series
    and gathers them by fancy indexing; here they are the columns of a
    reshaped view and one ``pywt.idwt(..., axis=0)`` call handles them all.
    The length must be a multiple of ``2^level``.
    """
    approx = np.array(coeffs[0], copy=True)
    details = coeffs[1:]
    n = approx.shape[0]
    levels = len(details)
    for j in range(levels, 0, -1):
        step = 1 << (j - 1)
        detail = details[levels - j]
        a3 = approx.reshape(n // (2 * step), 2, step)
        d3 = detail.reshape(n // (2 * step), 2, step)
        even = pywt.idwt(a3[:, 0, :], d3[:, 0, :], wavelet, mode="periodization", axis=0)
        odd = pywt.idwt(a3[:, 1, :], d3[:, 1, :], wavelet, mode="periodization", axis=0)
        odd = np.roll(odd, 1, axis=0)
        np.add(even, odd, out=even)
        even *= 0.5
        approx = even.reshape(n)
    return approx


def swt_reach(wavelet: str, level: int) -> int:
    """Samples over which an SWT of ``level`` reaches: ``2 (L - 1) 2^level``."""
    return 2 * (pywt.Wavelet(wavelet).dec_len - 1) * (1 << level)


def swt_shrink(segment: np.ndarray, wavelet: str, mode: str, level: int, lams: Sequence[float], threshold_mode: str) -> np.ndarray:
    """Stationary (undecimated) wavelet shrinkage of a segment.

    The segment is extended at both ends with boundary mode ``mode`` by the
    transform's reach and up to a multiple of ``2^level`` (``pywt.swt``
    itself wraps around), transformed with ``pywt.swt``, each detail level
    thresholded, inverted with :func:`iswt_fast` and cropped
    (translation-invariant denoising, Coifman & Donoho 1995, Lecture Notes in
    Statistics 103:125-150).
    """
    n = segment.shape[0]
    block = 1 << level
    left = swt_reach(wavelet, level)
    total = n + 2 * left
    right = left + (-total) % block
    pad_mode = "periodic" if mode == "periodization" else mode
    extended = pywt.pad(segment, (left, right), pad_mode)
    coeffs = pywt.swt(extended, wavelet, level=level, trim_approx=True, norm=False)
    del extended
    for j, lam in enumerate(lams, start=1):
        threshold_inplace(coeffs[-j], lam, threshold_mode)
    out = iswt_fast(coeffs, wavelet)
    return out[left : left + n]
