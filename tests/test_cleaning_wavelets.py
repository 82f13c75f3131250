"""Wavelet paths against PyWavelets: perfect reconstruction, same coefficients, same thresholding."""

from __future__ import annotations

import numpy as np
import pytest
import pywt

from tracevet.cleaning.shrinkage import dwt_shrink, swt_forward, swt_inverse, swt_shrink, threshold_inplace

ALL_WAVELETS = pywt.wavelist(kind="discrete")
FAMILIES = sorted({pywt.Wavelet(w).short_family_name for w in ALL_WAVELETS})


def _signal(n=1024, seed=0):
    return np.random.default_rng(seed).normal(size=n)


def test_every_discrete_family_is_covered():
    # Source: PyWavelets families (pywt.families(short=True)), the discrete ones.
    assert set(FAMILIES) == {"haar", "db", "sym", "coif", "bior", "rbio", "dmey"}


@pytest.mark.parametrize("wavelet", ALL_WAVELETS)
def test_zero_thresholds_reconstruct_like_pywavelets(wavelet):
    # Source: PyWavelets as reference. waverec(wavedec(x)) and iswt(swt(x)) return x
    # (~1e-12 for orthogonal wavelets, common practice); with thresholds at zero both
    # engine paths must do the same. PyWavelets' dmey is an FIR approximation of the
    # Meyer wavelet and does not reconstruct exactly: there the engine must match
    # PyWavelets' own round-trip error.
    x = _signal()
    level = 3
    ref_dwt = pywt.waverec(pywt.wavedec(x, wavelet, mode="symmetric", level=level), wavelet, mode="symmetric")[: x.size]
    ref_swt = pywt.iswt(pywt.swt(x, wavelet, level=level, trim_approx=True), wavelet)
    ours_dwt = dwt_shrink(x, wavelet, "symmetric", level, [0.0] * level, "soft")
    approx, details = swt_forward(x, wavelet, level)
    ours_swt = swt_inverse(approx, details, wavelet)
    if wavelet == "dmey":
        assert np.max(np.abs(ours_dwt - x)) == pytest.approx(np.max(np.abs(ref_dwt - x)), rel=1e-6)
        assert np.max(np.abs(ours_swt - x)) == pytest.approx(np.max(np.abs(ref_swt - x)), rel=1e-6)
        return
    np.testing.assert_allclose(ours_dwt, x, atol=1e-9)
    np.testing.assert_allclose(ours_swt, x, atol=1e-9)
    np.testing.assert_allclose(swt_shrink(x, wavelet, "symmetric", level, [0.0] * level, "soft"), x, atol=1e-9)


@pytest.mark.parametrize("wavelet", ["haar", "db4", "sym8", "coif2", "bior3.5", "rbio2.4"])
def test_swt_coefficients_are_pywavelets_swt_coefficients(wavelet):
    # Source: PyWavelets pywt.swt. The engine's SWT holds the same values per level,
    # in rows instead of interleaved.
    x = _signal(512, seed=1)
    approx, details = swt_forward(x, wavelet, 3)
    ref = pywt.swt(x, wavelet, level=3, trim_approx=True)
    np.testing.assert_allclose(np.sort(approx.ravel()), np.sort(ref[0]), atol=1e-10)
    for j in range(3):
        np.testing.assert_allclose(np.sort(details[j].ravel()), np.sort(ref[-1 - j]), atol=1e-10)


@pytest.mark.parametrize("mode", ["soft", "hard", "garrote"])
@pytest.mark.parametrize("wavelet", ["db2", "sym4", "bior2.2"])
def test_thresholded_swt_equals_pywavelets_swt_threshold_iswt(mode, wavelet):
    # Source: PyWavelets: iswt(threshold(swt(x))) with the same threshold per level.
    x = np.cumsum(_signal(1024, seed=2)) * 0.1 + _signal(1024, seed=3)
    lams = [0.8, 0.6, 0.4]
    ref = pywt.swt(x, wavelet, level=3, trim_approx=True)
    ref = [ref[0]] + [pywt.threshold(c, lams[2 - i], mode) for i, c in enumerate(ref[1:])]
    approx, details = swt_forward(x, wavelet, 3)
    for d, lam in zip(details, lams):
        threshold_inplace(d, lam, mode)
    np.testing.assert_allclose(swt_inverse(approx, details, wavelet), pywt.iswt(ref, wavelet), atol=1e-12)


@pytest.mark.parametrize("wavelet", ["db4", "sym4"])
def test_thresholded_dwt_equals_pywavelets_pipeline(wavelet):
    # Source: PyWavelets: waverec(threshold(wavedec(x))) per level.
    x = np.cumsum(_signal(1000, seed=4)) * 0.1 + _signal(1000, seed=5)
    lams = [1.0, 0.7, 0.5, 0.3]
    ref = pywt.wavedec(x, wavelet, mode="symmetric", level=4)
    ref = [ref[0]] + [pywt.threshold(c, lams[3 - i], "soft") for i, c in enumerate(ref[1:])]
    ours = dwt_shrink(x, wavelet, "symmetric", 4, lams, "soft")
    np.testing.assert_allclose(ours, pywt.waverec(ref, wavelet, mode="symmetric")[: x.size], atol=1e-12)


@pytest.mark.parametrize(
    "mode, expected",
    [
        # Source: PyWavelets pywt.threshold docstring, data = linspace(1, 4, 7), value 2.
        ("soft", [0, 0, 0, 0.5, 1.0, 1.5, 2.0]),
        ("hard", [0, 0, 2.0, 2.5, 3.0, 3.5, 4.0]),
        # garrote x - lam^2 / x (Gao 1998, JCGS 7:469-488), computed by hand: 2.5 - 4/2.5 = 0.9.
        ("garrote", [0, 0, 0, 0.9, 1.6666667, 2.3571429, 3.0]),
    ],
)
def test_threshold_modes_match_pywavelets_docstring_example(mode, expected):
    data = np.linspace(1.0, 4.0, 7)
    np.testing.assert_allclose(threshold_inplace(data.copy(), 2.0, mode), expected, atol=1e-7)
    np.testing.assert_allclose(threshold_inplace(data.copy(), 2.0, mode), pywt.threshold(data, 2.0, mode), atol=1e-12)
    negative = -data
    np.testing.assert_allclose(
        threshold_inplace(negative.copy(), 2.0, mode), pywt.threshold(negative, 2.0, mode), atol=1e-12
    )


def test_threshold_float32_in_place_matches_pywavelets():
    x = _signal(10000, seed=6).astype(np.float32)
    for mode in ("soft", "hard", "garrote"):
        y = x.copy()
        out = threshold_inplace(y, 1.3, mode)
        assert out is y and y.dtype == np.float32
        np.testing.assert_allclose(y, pywt.threshold(x.astype(np.float64), 1.3, mode), atol=1e-6)
