"""QRS bounds at high heart rates, where the P and T waves crowd the QRS.

The bounds follow the slope-threshold delineation (common practice): the
QRS ends where the slope stays below a threshold for a quiet run. At 150 bpm
and above the PR and ST segments are shorter than 30 ms of quiet, so the run
is scaled with RR, and when no quiet run exists at all the bound is the
flattest point between the QRS and the neighbouring wave rather than the end
of the search range (which put the isoelectric window on the P wave and the
ST point in the T wave).
"""

from __future__ import annotations

import numpy as np

from tracevet import synthetic as syn
from tracevet.assessment import assess
from tracevet.assessment.fiducials import qrs_bounds
from tracevet.recording import Recording


def _bump(t, centre, width):
    return np.exp(-0.5 * ((t - centre) / width) ** 2)


def test_bound_without_a_quiet_run_is_the_slope_valley():
    # A slope profile (constructed): QRS slopes at +-20 ms of R, a P-wave
    # slope 60 ms before R and a T-wave slope 70 ms after, overlapping so
    # that the slope stays above the threshold between them and falls below
    # it beyond them for less than the quiet run.
    fs = 1000.0
    t = np.arange(-150, 151) / fs
    slope = _bump(t, -0.02, 0.008) + _bump(t, 0.02, 0.008) + 0.3 * _bump(t, -0.06, 0.012) + 0.3 * _bump(t, 0.07, 0.02)
    r = 150
    threshold = 0.1
    on_limit, off_limit = qrs_bounds(slope, r, threshold, 100, 120, fs, rr_s=0.4)
    assert (on_limit, off_limit) == (50.0, 270.0)  # ends of the search range: not found
    onset, offset = qrs_bounds(slope, r, threshold, 100, 120, fs, rr_s=0.4, fallback="minimum")
    valley_before = r - 55 + int(np.argmin(slope[r - 55 : r - 20]))  # between P and QRS
    valley_after = r + 20 + int(np.argmin(slope[r + 20 : r + 65]))  # between QRS and T
    assert onset == valley_before and offset == valley_after
    assert 150 - 45 < onset < 150 - 30 and 150 + 35 < offset < 150 + 55


def test_quiet_run_scales_with_rr():
    # A 27 ms quiet PR segment: too short for the 30 ms run, long enough for
    # 0.06 RR = 24 ms at 150 bpm.
    fs = 1000.0
    t = np.arange(-150, 151) / fs
    slope = _bump(t, -0.02, 0.006) + _bump(t, 0.02, 0.006) + 0.5 * (np.abs(t + 0.085) < 0.025)
    onset, _ = qrs_bounds(slope, 150, 0.1, 100, 120, fs, rr_s=0.4)
    assert 150 - 40 < onset < 150 - 25
    onset_long, _ = qrs_bounds(slope, 150, 0.1, 100, 120, fs, rr_s=1.0)
    assert onset_long == 50.0


def test_qrs_width_at_high_rate_is_not_the_search_range():
    # McSharry et al. (2003) model at 170 bpm, noise free: the QRS width
    # stays below the 168 ms search range (100 + 88 ms at RR 0.35 s ... at
    # most 0.2 + 0.22 RR) and within 40 ms of the width at 70 bpm.
    for fs in (125.0, 500.0):
        widths = []
        for hr in (70.0, 170.0):
            rec = syn.synthetic_ecg(20.0, fs, heart_rate_bpm=hr, seed=3)
            r = Recording(rec.signal, fs, ("II",), units="mV", kind="ecg")
            result = assess(r, r, detector=lambda s, f, p=rec.r_peaks: p)
            widths.append(result.metrics["qrs_width_ms"])
            assert result.flags == []
        rr = 60.0 / 170.0
        assert widths[1] < 1000.0 * (0.2 + 0.22) * rr - 10.0
        assert abs(widths[1] - widths[0]) < 40.0
