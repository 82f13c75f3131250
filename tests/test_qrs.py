"""QRS detection (Pan & Tompkins 1985) and EC57 beat matching."""

import numpy as np
import pytest
from scipy import signal

from mitdb import excerpt_mv
from tracevet.assessment.qrs import detect_qrs, match_beats, pan_tompkins_stages
from tracevet.synthetic import (
    add_noise_at_snr,
    synthetic_mcg,
    baseline_wander,
    electrode_motion,
    mains_hum,
    muscle_noise,
    synthetic_ecg,
    white_noise,
)

# ANSI/AAMI EC57 beat-by-beat comparison: match window 150 ms, Se = TP/(TP+FN),
# +P = TP/(TP+FP); target from the assessment requirements: both >= 99 %.
EC57_WINDOW_S = 0.15
TARGET = 0.99


def _score(rec, found):
    """EC57 matching of detections against the model's beats; an R peak within
    50 ms of either end of the record (a QRS cut by the boundary) is not scored."""
    duration = rec.signal.size / rec.fs
    return match_beats(rec.r_peaks, found, rec.fs, window_s=EC57_WINDOW_S, start_s=0.05, end_s=duration - 0.05)


def _mitdb_excerpt_mv():
    # MIT-BIH Arrhythmia Database record 208 excerpt, 360 Hz, mV = (adu - 1024)/200
    # (SciPy documentation of scipy.misc.electrocardiogram).
    return excerpt_mv(), 360.0


def _noisy(rec, kind, seed):
    x, fs, n = rec.signal, rec.fs, rec.signal.size
    if kind == "clean":
        return x
    if kind == "baseline":
        return x + baseline_wander(n, fs, amplitude_mv=0.5, seed=seed)
    if kind == "muscle":  # moderate SNR, bursty EMG
        return add_noise_at_snr(x, muscle_noise(n, fs, 1.0, seed=seed, bursty=True), 12.0)
    if kind == "mains50":
        return x + mains_hum(n, fs, 50.0, 0.2)
    if kind == "mains60":
        return x + mains_hum(n, fs, 60.0, 0.2)
    if kind == "all":
        return (x + baseline_wander(n, fs, 0.3, seed=seed) + mains_hum(n, fs, 60.0, 0.1)
                + muscle_noise(n, fs, 0.05, seed=seed))
    raise AssertionError(kind)


@pytest.mark.parametrize("fs", [125.0, 250.0, 360.0, 500.0, 1000.0, 2000.0])
@pytest.mark.parametrize("kind", ["clean", "baseline", "muscle", "mains50", "mains60", "all"])
def test_se_and_ppv_on_synthetic_records_with_ectopics(fs, kind):
    seed = int(fs) % 97 + len(kind)
    rec = synthetic_ecg(120.0, fs, heart_rate_bpm=55.0 + seed % 40, hrv_std_bpm=2.0, ectopic_every=7, seed=seed)
    m = _score(rec, detect_qrs(_noisy(rec, kind, seed), fs))
    assert m.sensitivity >= TARGET and m.positive_predictivity >= TARGET, (m.tp, m.fn, m.fp)


@pytest.mark.parametrize("case", ["bigeminy", "inverted", "fast", "slow", "emg_6db", "motion"])
def test_se_and_ppv_on_harder_rhythms_and_noise(case):
    fs = 360.0
    hr = {"fast": 150.0, "slow": 40.0}.get(case, 72.0)
    every = 2 if case == "bigeminy" else 5
    rec = synthetic_ecg(120.0, fs, heart_rate_bpm=hr, hrv_std_bpm=2.0, ectopic_every=every, seed=3)
    x = rec.signal
    if case == "inverted":
        x = -x
    if case == "emg_6db":
        x = add_noise_at_snr(x, muscle_noise(x.size, fs, 1.0, seed=4, bursty=True), 6.0)
    if case == "motion":
        x = x + electrode_motion(x.size, fs, 0.5, events_per_min=6.0, seed=4)
    m = _score(rec, detect_qrs(x, fs))
    assert m.sensitivity >= TARGET and m.positive_predictivity >= TARGET, (m.tp, m.fn, m.fp)


@pytest.mark.parametrize("fs", [125.0, 500.0, 2000.0])
@pytest.mark.parametrize("sign", [1.0, -1.0])
def test_r_peaks_are_placed_on_the_true_extremum(fs, sign):
    # The model's R peak (phase crossing 0) is within one sample of the signal's
    # extremum (see test_synthetic); normal and inverted polarity alike.
    rec = synthetic_ecg(60.0, fs, heart_rate_bpm=70.0, ectopic_every=6, seed=8)
    found = detect_qrs(sign * rec.signal, fs)
    m = _score(rec, found)
    err = np.abs(rec.r_peaks[m.matched_reference] - found[m.matched_detected])
    assert m.fn == 0 and m.fp == 0
    assert np.max(err) <= max(1, int(round(0.004 * fs)))


def _scipy_reference_beats(x, fs):
    """Independent reference: SciPy find_peaks on |5-20 Hz band-pass|.

    2nd-order Butterworth 5-20 Hz, zero phase (sosfiltfilt); peaks of the
    absolute value at least 300 ms apart (distance) and standing 0.3 mV above
    their surroundings (prominence), so that both upright beats and inverted
    ventricular beats are found.
    """
    sos = signal.butter(2, [5.0, 20.0], btype="bandpass", fs=fs, output="sos")
    env = np.abs(signal.sosfiltfilt(sos, x))
    peaks, _ = signal.find_peaks(env, distance=int(0.3 * fs), prominence=0.3)
    return peaks


def test_real_excerpt_agrees_with_an_independent_scipy_reference():
    # MIT-BIH record 208 excerpt: sinus beats, many PVCs from about 16 s, large
    # artefacts (e.g. 207-215 s) (SciPy documentation). Measured: 499 beats by
    # each method, 498 matched within 150 ms (Se = +P = 99.8 % against the
    # reference). The two disagreements: at 20.12 s the detector takes a narrow
    # (about 10 ms) spike 240 ms after a beat, whose 5-20 Hz prominence is under
    # the reference's 0.3 mV; at 92.88 s the reference finds a wide, low-slope
    # (probably ventricular) complex whose 5-15 Hz energy stays under the
    # detector's adaptive threshold, and the 0.98 s gap it leaves is just under
    # the 166 % search-back limit. Matched positions differ by 0 ms (median) but
    # up to 130 ms on PVCs, where |band-pass| peaks on another deflection.
    x, fs = _mitdb_excerpt_mv()
    found = detect_qrs(x, fs)
    ref = _scipy_reference_beats(x, fs)
    assert abs(found.size - ref.size) <= 0.01 * ref.size
    m = match_beats(ref, found, fs, window_s=EC57_WINDOW_S)
    assert m.sensitivity >= 0.99 and m.positive_predictivity >= 0.99, (m.tp, m.fn, m.fp)
    # 209.5-213.8 s is a slow saturation-recovery swing without QRS complexes:
    # neither method may put a beat there.
    for beats in (found, ref):
        assert not np.any((beats > 209.5 * fs) & (beats < 213.8 * fs))
    # The same lead recorded with reversed electrodes gives the same beats at
    # the same samples (one fiducial per beat shape, either polarity).
    np.testing.assert_array_equal(detect_qrs(-x, fs), found)


@pytest.mark.parametrize("fs_new", [125, 250, 1000])
def test_real_excerpt_gives_the_same_beats_at_other_rates(fs_new):
    # Resampled with SciPy's polyphase resampler: the detector must find the same
    # beats (EC57 matching, 150 ms) at the new rate.
    x, fs = _mitdb_excerpt_mv()
    base = detect_qrs(x, fs) / fs
    y = signal.resample_poly(x, fs_new, 360)
    found = detect_qrs(y, fs_new) / fs_new
    m = match_beats(np.rint(base * 1000), np.rint(found * 1000), 1000.0)
    assert m.sensitivity >= 0.99 and m.positive_predictivity >= 0.99, (m.tp, m.fn, m.fp)


@pytest.mark.parametrize("fs", [250.0, 360.0, 1000.0])
def test_no_beats_in_flat_lines_and_noise(fs):
    n = int(120 * fs)
    assert detect_qrs(np.zeros(n), fs).size == 0
    assert detect_qrs(np.full(n, 3.7, dtype=np.float32), fs).size == 0
    for seed in range(2):
        assert detect_qrs(white_noise(n, 0.1, seed=seed), fs).size <= 1
        assert detect_qrs(muscle_noise(n, fs, 0.1, seed=seed), fs).size <= 1
    assert detect_qrs(np.zeros(10), fs).size == 0


def test_no_beats_in_a_noise_only_stretch():
    # A lead-off stretch of noise inside a record: beats before and after it are
    # found (EC57 matching) and none inside, except while the adaptive
    # thresholds come down from the ECG level at the start of the stretch (up to
    # about 20 s, the noise-block judgement needs a settled acceptance rate).
    fs = 250.0
    rec = synthetic_ecg(300.0, fs, heart_rate_bpm=70.0, ectopic_every=9, seed=12)
    x = rec.signal.copy()
    a, b = int(60 * fs), int(200 * fs)
    for noise in (white_noise(b - a, 0.2, seed=1), muscle_noise(b - a, fs, 0.2, seed=1)):
        x[a:b] = noise
        found = detect_qrs(x, fs)
        assert not np.any((found > a + 25 * fs) & (found < b - 0.5 * fs))
        outside = rec.r_peaks[(rec.r_peaks < a - 0.5 * fs) | (rec.r_peaks > b + 0.5 * fs)]
        m = match_beats(outside, found[(found < a) | (found > b)], fs, start_s=0.05, end_s=299.95)
        assert m.sensitivity >= TARGET and m.positive_predictivity >= TARGET


def test_units_do_not_matter_and_mcg_beats_are_found():
    # Thresholds are relative: the same trace in uV (x1000) gives the same beats.
    fs = 500.0
    rec = synthetic_ecg(60.0, fs, ectopic_every=6, seed=5)
    np.testing.assert_array_equal(detect_qrs(rec.signal, fs), detect_qrs(1000.0 * rec.signal, fs))
    # MCG-like record in pT with sensor white noise and 50 Hz mains.
    mcg = synthetic_mcg(120.0, 1000.0, amplitude_pt=60.0, ectopic_every=8, seed=6)
    y = mcg.signal + white_noise(mcg.signal.size, 2.0, seed=1) + mains_hum(mcg.signal.size, 1000.0, 50.0, 5.0)
    m = _score(mcg, detect_qrs(y, 1000.0))
    assert m.sensitivity >= TARGET and m.positive_predictivity >= TARGET, (m.tp, m.fn, m.fp)


def test_long_records_processed_in_chunks_give_the_same_beats(monkeypatch):
    # Chunked processing (bounded memory for 24 h records) must not change the
    # result: force 20 s chunks on a 2-min record and compare with one chunk.
    import tracevet.assessment.qrs as qrs_module

    fs = 250.0
    rec = synthetic_ecg(120.0, fs, heart_rate_bpm=80.0, ectopic_every=5, seed=21)
    x = add_noise_at_snr(rec.signal, muscle_noise(rec.signal.size, fs, 1.0, seed=2), 12.0)
    whole = detect_qrs(x, fs)
    monkeypatch.setattr(qrs_module, "_CHUNK_SAMPLES", 1)
    chunked = detect_qrs(x, fs)
    np.testing.assert_array_equal(whole, chunked)


def test_input_types_and_bad_samples():
    rec = synthetic_ecg(30.0, 250.0, seed=1)
    f64 = detect_qrs(rec.signal, 250.0)
    f32 = detect_qrs(rec.signal.astype(np.float32), 250.0)
    assert f64.dtype == np.int64 and np.all(np.diff(f64) > 0)
    np.testing.assert_array_equal(f64, f32)
    x = rec.signal.copy()
    x[1000:1010] = np.nan
    x[2000] = np.inf
    m = _score(rec, detect_qrs(x, 250.0))
    assert m.sensitivity >= 0.95
    assert detect_qrs(np.full(1000, np.nan), 250.0).size == 0


def test_match_beats_worked_example():
    # EC57 rule by hand, fs = 100 Hz, window 150 ms = 15 samples (inclusive).
    ref = [100, 400, 700, 1000, 1300]
    det = [110, 385, 395, 716, 1000, 1600]
    # 100-110 match; 400 takes the closer 395 (385 becomes FP); 700-716 is 160 ms
    # apart: no match (FN 700, FP 716); 1000-1000 match; 1300 missed; 1600 extra.
    m = match_beats(ref, det, 100.0)
    assert (m.tp, m.fn, m.fp) == (3, 2, 3)
    assert m.sensitivity == pytest.approx(3 / 5)
    assert m.positive_predictivity == pytest.approx(3 / 6)
    # |dt| = 150 ms exactly is a match.
    assert match_beats([100], [115], 100.0).tp == 1
    assert match_beats([100], [116], 100.0).tp == 0
    # One-to-one: a detection between two beats serves only one of them.
    m = match_beats([100, 120], [110], 100.0)
    assert (m.tp, m.fn, m.fp) == (1, 1, 0)
    # EC57 learning period: beats before start_s are not scored.
    m = match_beats([50, 500, 900], [500, 900, 60], 100.0, start_s=3.0)
    assert (m.tp, m.fn, m.fp) == (2, 0, 0)
    # Scored interval [start_s, end_s): outside it nothing counts, but a detection
    # just outside may still match a beat inside.
    m = match_beats([100, 500, 990], [105, 1003, 1200], 100.0, end_s=10.0)
    assert (m.tp, m.fn, m.fp) == (2, 1, 0)
    empty = match_beats([], [], 100.0)
    assert (empty.tp, empty.fn, empty.fp, empty.sensitivity) == (0, 0, 0, 1.0)


def test_five_point_derivative_stage_matches_the_published_formula():
    # Pan & Tompkins 1985: y(n) = (1/8T)(-x(n-2) - 2x(n-1) + 2x(n+1) + x(n+2)),
    # with a 5 ms step (200 Hz); at 400 Hz the step is 2 samples.
    fs = 400.0
    rec = synthetic_ecg(10.0, fs, seed=2)
    st = pan_tompkins_stages(rec.signal, fs)
    bp, m, n = st.bandpassed, 2, 1000
    expected = (-bp[n - 2 * m] - 2 * bp[n - m] + 2 * bp[n + m] + bp[n + 2 * m]) / (8 * m / fs)
    assert st.derivative[n] == pytest.approx(expected, rel=1e-12)
    # 150 ms moving-window integration of the squared derivative.
    w = int(round(0.15 * fs))
    assert st.integrated[n] == pytest.approx(np.mean(st.derivative[n - w // 2 : n - w // 2 + w] ** 2), rel=1e-9)
    # 5-15 Hz pass band: a 10 Hz sinusoid passes, 1 Hz and 40 Hz are attenuated (SciPy Butterworth design).
    t = np.arange(int(20 * fs)) / fs

    def gain(f):
        tone = np.sin(2 * np.pi * f * t)
        return np.std(pan_tompkins_stages(tone, fs).bandpassed[800:-800]) / np.std(tone)

    assert gain(10.0) > 0.9 and gain(1.0) < 0.05 and gain(40.0) < 0.2
