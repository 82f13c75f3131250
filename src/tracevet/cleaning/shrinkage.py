"""Wavelet shrinkage of one segment: threshold functions, DWT and SWT paths."""

from __future__ import annotations

from typing import Callable, Sequence

import numpy as np
import pywt

MODES = ("garrote", "hard", "soft")


def as_wavelet(wavelet: str | pywt.Wavelet) -> pywt.Wavelet:
    """A ``pywt.Wavelet`` for a name (built once per channel, not per call)."""
    return wavelet if isinstance(wavelet, pywt.Wavelet) else pywt.Wavelet(wavelet)


def _soft(x: np.ndarray, lam: float) -> None:
    # eta_soft(x) = sign(x) max(|x| - lam, 0)  (Donoho & Johnstone 1994)
    mag = np.abs(x)
    mag -= x.dtype.type(lam)
    np.maximum(mag, 0, out=mag)
    np.copysign(mag, x, out=x)


def _hard(x: np.ndarray, lam: float) -> None:
    # eta_hard(x) = x 1{|x| >= lam}; |x| == lam is kept, as PyWavelets does.
    np.copyto(x, 0, where=np.abs(x) < lam)


def _garrote(x: np.ndarray, lam: float) -> None:
    # Non-negative garrote x max(1 - lam^2 / x^2, 0) = x - lam^2 / x for |x| > lam, else 0
    # (Gao 1998, J Comput Graph Stat 7(4):469-488; Breiman 1995, Technometrics 37:373-384).
    drop = np.abs(x) <= lam
    with np.errstate(divide="ignore", invalid="ignore"):
        shrink = np.divide(x.dtype.type(lam * lam), x)
    x -= shrink
    np.copyto(x, 0, where=drop)


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
        if x.flags.c_contiguous:
            _THRESHOLD_FUNCTIONS[mode](x.reshape(-1), lam)
        else:
            flat = x.ravel()  # a copy
            _THRESHOLD_FUNCTIONS[mode](flat, lam)
            x[...] = flat.reshape(x.shape)
    return x


def dwt_details(segment: np.ndarray, wavelet: str, mode: str, level: int) -> list[np.ndarray]:
    """Detail coefficients of ``pywt.wavedec``, finest level first."""
    coeffs = pywt.wavedec(segment, wavelet, mode=mode, level=level)
    return coeffs[:0:-1]


def dwt_shrink(
    segment: np.ndarray, wavelet: str, mode: str, level: int, lams: Sequence[float], threshold_mode: str
) -> np.ndarray:
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


def swt_forward(x: np.ndarray, wavelet: str, level: int) -> tuple[np.ndarray, list[np.ndarray]]:
    """Stationary wavelet transform with periodic boundaries, in polyphase layout.

    The SWT at level ``j`` is the DWT of both decimation phases of every
    sub-series of level ``j - 1`` (Nason & Silverman 1995, The stationary
    wavelet transform and some statistical applications, in: Wavelets and
    Statistics, Springer LNS 103:281-299). Here the ``2^j`` sub-series of level ``j`` are the
    rows of a 2-D array and one ``pywt.dwt(..., mode='periodization',
    axis=-1)`` call per phase filters all of them, contiguously. The
    coefficients are those of ``pywt.swt`` (same values, rows instead of
    interleaved); thresholding does not care about the order.

    Parameters
    ----------
    x : 1-D array, length a multiple of ``2^level``
    wavelet : str
    level : int

    Returns
    -------
    approx : 2-D array ``(2^level, n / 2^level)``
    details : list of 2-D arrays, finest level first (level ``j``: ``(2^j, n / 2^j)``)
    """
    rows = x.reshape(1, -1)
    details = []
    scratch = np.empty(2 * x.shape[0], dtype=x.dtype)  # reused: both phases of every row
    for _ in range(level):
        count, length = rows.shape
        stacked = scratch.reshape(2 * count, length)
        stacked[:count] = rows
        stacked[count:, :-1] = rows[:, 1:]
        stacked[count:, -1] = rows[:, 0]
        rows, detail = pywt.dwt(stacked, wavelet, mode="periodization", axis=-1)
        details.append(detail)
    return rows, details


def swt_inverse(approx: np.ndarray, details: Sequence[np.ndarray], wavelet: str) -> np.ndarray:
    """Inverse of :func:`swt_forward` (the ``pywt.iswt`` average of both phases).

    At each level the signal is the mean of the inverse DWTs of its two
    decimation phases, the odd one shifted back by one sample, as in
    ``pywt.iswt``; the rows hold every sub-series, so one ``pywt.idwt`` call
    per phase does a whole level.
    """
    rows = approx
    for detail in reversed(details):
        half = rows.shape[0] // 2
        even = pywt.idwt(rows[:half], detail[:half], wavelet, mode="periodization", axis=-1)
        odd = pywt.idwt(rows[half:], detail[half:], wavelet, mode="periodization", axis=-1)
        even[:, 1:] += odd[:, :-1]
        even[:, 0] += odd[:, -1]
        even *= 0.5
        rows = even
        del odd
    return rows.reshape(-1)


def swt_reach(wavelet: str, level: int) -> int:
    """Samples over which an SWT of ``level`` reaches: ``2 (L - 1) 2^level``."""
    return 2 * (as_wavelet(wavelet).dec_len - 1) * (1 << level)


def swt_extend(segment: np.ndarray, wavelet, mode: str, level: int) -> tuple[np.ndarray, int]:
    """Extend a segment for the SWT: by the transform's reach on both sides
    (boundary mode ``mode``) and up to a multiple of ``2^level``.

    Returns the extended array and the length of the left extension (a
    multiple of ``2^level``, so the dyadic grid is kept).
    """
    n = segment.shape[0]
    left = swt_reach(wavelet, level)
    right = left + (-(n + 2 * left)) % (1 << level)
    pad_mode = "periodic" if mode == "periodization" else mode
    return pywt.pad(segment, (left, right), pad_mode), left


def swt_phase0_details(
    segment: np.ndarray, wavelet, mode: str, level: int, levels: int
) -> tuple[list[np.ndarray], int]:
    """The decimation-phase-0 detail rows of :func:`swt_shrink`'s transform, finest first.

    They are the periodic DWT (``pywt.wavedec``, mode ``periodization``) of
    the extended segment, computed without the rest of the SWT; returns them
    with the left extension length.
    """
    extended, left = swt_extend(segment, wavelet, mode, level)
    coeffs = pywt.wavedec(extended, wavelet, mode="periodization", level=levels)
    return coeffs[:0:-1], left


def swt_shrink(
    segment: np.ndarray,
    wavelet,
    mode: str,
    level: int,
    lams: Sequence[float] | Callable[[list[np.ndarray], int], Sequence[float]],
    threshold_mode: str,
) -> np.ndarray:
    """Stationary (undecimated) wavelet shrinkage of a segment.

    The segment is extended (:func:`swt_extend`; the transform itself wraps
    around), transformed with :func:`swt_forward`, each detail level
    thresholded, inverted with :func:`swt_inverse` and cropped
    (translation-invariant denoising, Coifman & Donoho 1995, in: Wavelets and
    Statistics, Springer LNS 103:125-150).

    ``lams`` is one threshold per detail level (finest first), or a function
    that receives the decimation-phase-0 detail rows (finest first, as
    :func:`swt_phase0_details` returns them) and the left extension length,
    and returns the thresholds: then one transform serves both.
    """
    n = segment.shape[0]
    extended, left = swt_extend(segment, wavelet, mode, level)
    approx, details = swt_forward(extended, wavelet, level)
    del extended
    if callable(lams):
        lams = lams([d[0] for d in details], left)
    for detail, lam in zip(details, lams):
        threshold_inplace(detail, lam, threshold_mode)
    out = swt_inverse(approx, details, wavelet)
    return out[left : left + n]
