"""Ends that add nothing, and the impulse test, for every built-in profile."""

from __future__ import annotations

import numpy as np
import pytest

from tracevet.cleaning import PROFILES, clean
from tracevet.cleaning.baseline import estimate
from tracevet.recording import Recording
from tracevet.synthetic import synthetic_ecg


def _clean(x: np.ndarray, fs: float, profile: str) -> np.ndarray:
    return clean(Recording(x[:, None], fs, ("I",), units="mV", kind="ecg"), PROFILES[profile]).samples[:, 0]


@pytest.fixture(scope="module")
def long_record():
    fs = 360.0
    e = synthetic_ecg(70, fs, heart_rate_bpm=70, seed=4)
    return e, fs, {name: _clean(e.signal, fs, name) for name in PROFILES}


@pytest.mark.parametrize("profile", sorted(PROFILES))
def test_a_record_cut_at_any_phase_of_the_beat_gets_no_end_transient(long_record, profile):
    # What the ends add = (cleaning of the cut record) - (the same stretch cleaned inside a longer
    # record). The cut starts at 12 phases of the beat cycle (on the R peak, in the ST segment, on
    # the T wave, in the PR segment...), and so ends at 12 others. Our limits, for a 1 mV R: at most
    # 0.08 mV anywhere and 0.04 mV rms over the first and the last 3 s. Odd extension about the end
    # sample (the previous padding) gave up to 1.0 mV and 0.76 mV rms on this record.
    e, fs, whole = long_record
    rr = int(np.median(np.diff(e.r_peaks)))
    n, k = int(30 * fs), int(3 * fs)
    for phase in np.linspace(0, 1, 12, endpoint=False):
        s0 = int(e.r_peaks[15] + phase * rr)
        added = _clean(e.signal[s0 : s0 + n], fs, profile) - whole[profile][s0 : s0 + n]
        assert np.max(np.abs(added)) <= 0.08, phase
        assert np.sqrt(np.mean(added[:k] ** 2)) <= 0.04, phase
        assert np.sqrt(np.mean(added[-k:] ** 2)) <= 0.04, phase


@pytest.mark.parametrize("fs", [250.0, 360.0, 500.0, 1000.0])
@pytest.mark.parametrize("profile", sorted(PROFILES))
def test_every_profile_passes_the_impulse_test(profile, fs):
    # IEC 60601-2-25 / AAMI EC11 low-frequency test: a rectangular 3 mV x 100 ms pulse on a flat
    # baseline; after the pulse the baseline may move at most 0.1 mV [from memory, IEC 60601-2-25]
    # with a slope of at most 0.30 mV/s [AAMI EC11:1991/(R)2001]. The whole cleaning runs (filters
    # and shrinkage), evaluated from the end of the pulse to 10 s later.
    n = int(60 * fs)
    x = np.zeros(n)
    start = int(30 * fs)
    stop = start + int(round(0.1 * fs))
    x[start:stop] = 3.0
    y = _clean(x, fs, profile)
    after = y[stop + 1 : stop + int(10 * fs)]
    assert np.max(np.abs(after)) <= 0.1
    assert np.max(np.abs(np.diff(after))) * fs <= 0.30


@pytest.mark.parametrize("f, limit", [(0.1, 0.03), (0.25, 0.12), (0.4, 0.30)])
def test_median_baseline_follows_respiratory_wander(f, limit):
    # Respiratory wander at 0.1-0.4 Hz (Friesen et al. 1990 band, from memory) of 0.5 mV on a flat
    # line: what the estimate misses stays within our stated share of the amplitude (the 1.2 s
    # median flattens the crests of fast breathing: 28 % left at 0.4 Hz, 11 % at 0.25 Hz), and it
    # removes most of the wander's power.
    fs = 500.0
    t = np.arange(int(40 * fs)) / fs
    wander = 0.5 * np.sin(2 * np.pi * f * t + 0.3)
    err = (estimate(wander, fs) - wander)[int(2 * fs) : -int(2 * fs)]
    assert np.max(np.abs(err)) <= limit * 0.5
    assert np.sqrt(np.mean(err**2)) <= limit * np.sqrt(np.mean(wander**2))


@pytest.mark.parametrize("phase", [0.0, np.pi / 2, np.pi, 3 * np.pi / 2])
def test_median_baseline_follows_wander_into_the_ends(phase):
    # Respiratory wander of 0.3 mV at 0.25 Hz (Friesen et al. 1990 band, from memory) under a
    # McSharry et al. (2003) model ECG, starting and ending at four phases: at the steepest
    # (0.47 mV/s) the estimate held at the first full window left 0.31 mV in the first 0.5 s.
    # The window shrinking to the record's own samples keeps the first and last 0.5 s within
    # 0.2 mV of the wander (after the model's isoelectric offset, the median of the error).
    fs = 360.0
    e = synthetic_ecg(20.0, fs, heart_rate_bpm=70.0, seed=3)
    t = np.arange(e.signal.size) / fs
    wander = 0.3 * np.cos(2 * np.pi * 0.25 * t + phase)
    err = estimate(e.signal + wander, fs) - wander
    err -= np.median(err)
    half_s = int(0.5 * fs)
    assert np.max(np.abs(err[:half_s])) <= 0.2
    assert np.max(np.abs(err[-half_s:])) <= 0.2


def test_median_baseline_ignores_beats():
    # On a noise-free McSharry-model ECG the estimate stays nearly constant: its variation is a small
    # part of the beat (the level it sits at is the record's median level, a constant).
    fs = 360.0
    x = synthetic_ecg(30, fs, heart_rate_bpm=75, seed=2).signal
    b = estimate(x, fs)
    assert np.ptp(b[int(fs) : -int(fs)]) <= 0.05 * np.ptp(x)


@pytest.mark.parametrize("fs", [250.0, 360.0, 500.0])
def test_notches_leave_no_hum_at_the_ends(fs):
    # A 0.5 mV 60 Hz line (with harmonics, tracevet.synthetic.mains_hum) on a McSharry-model ECG: the
    # lines are continued in phase into the end extension, so the first and last second keep no more
    # hum than the interior (odd extension about the end sample left the line ringing there).
    from tracevet.cleaning import apply_overrides
    from tracevet.synthetic import mains_hum

    x = synthetic_ecg(20, fs, seed=3).signal
    y = x + mains_hum(x.size, fs, 60.0, 0.5)
    rec = Recording(y[:, None], fs, ("I",), units="mV", kind="ecg")
    out = clean(rec, apply_overrides(PROFILES["default"], ["mains=60"])).samples[:, 0]
    d = out - x
    d -= np.median(d)
    k = int(fs)
    interior = np.max(np.abs(d[2 * k : -2 * k]))
    assert np.max(np.abs(d[:k])) <= max(1.5 * interior, 0.03)
    assert np.max(np.abs(d[-k:])) <= max(1.5 * interior, 0.03)
