"""SNR, SNR gain and PRD as defined in the literature."""

from __future__ import annotations

import math

import numpy as np
import pytest

from tracevet.cleaning.scores import prd_percent, snr_db, snr_gain_db


def test_prd_as_zigel_cohen_katz_2000():
    # PRD = 100 sqrt(sum (x - x^)^2 / sum x^2) % (Zigel, Cohen & Katz 2000, IEEE TBME 47(11):1424-1430).
    # x^ = 0.9 x leaves an error of 0.1 x: PRD = 10 % exactly, whatever x.
    x = np.sin(np.linspace(0, 20, 1001))
    x -= x.mean()
    assert prd_percent(x, 0.9 * x) == pytest.approx(10.0, rel=1e-12)
    # Without centring the offset counts (the PRD of raw ADC units is a known pitfall, common practice).
    assert prd_percent(x + 5, 0.9 * x + 5, centre=False) < prd_percent(x + 5, 0.9 * x + 5)


def test_snr_and_prd_agree():
    # SNR_out = 10 log10(sum x^2 / sum e^2) = -20 log10(PRD / 100) (both definitions above): 10 % <-> 20 dB.
    rng = np.random.default_rng(0)
    x = rng.standard_normal(4000)
    est = x + 0.1 * rng.standard_normal(4000)
    assert snr_db(x, est) == pytest.approx(-20 * math.log10(prd_percent(x, est) / 100), rel=1e-12)
    assert snr_db(x, 0.9 * (x - x.mean()) + x.mean()) == pytest.approx(20.0, rel=1e-12)


def test_gain_is_output_minus_input_snr():
    # gain = SNR_out - SNR_in = 10 log10(sum (y - x)^2 / sum (x^ - x)^2) (common practice): halving
    # the error amplitude gains 20 log10(2) = 6.02 dB.
    rng = np.random.default_rng(1)
    x = rng.standard_normal(2000)
    n = rng.standard_normal(2000)
    assert snr_gain_db(x, x + n, x + 0.5 * n) == pytest.approx(20 * math.log10(2), rel=1e-9)
    assert math.isinf(snr_db(x, x))
    with pytest.raises(ValueError):
        snr_db(x, x[:-1])
