"""Synthetic ECG/MCG (McSharry et al. 2003 model) and noise generators."""

import numpy as np
import pytest
from scipy import integrate, signal

from tracevet.synthetic import (
    NORMAL_BEAT,
    SyntheticECG,
    add_noise_at_snr,
    baseline_wander,
    electrode_motion,
    mains_hum,
    measure_snr_db,
    muscle_noise,
    rr_tachogram,
    synthetic_ecg,
    synthetic_mcg,
    white_noise,
)


def _intervals_ms(rec: SyntheticECG):
    """PR, QRS and QT (ms) of each normal beat between two normal beats.

    QRS onset/offset: first/last sample within [Q - 60 ms, S + 60 ms] where the
    slope exceeds 5 % of its maximum there; P onset and T end: tangent method
    (tangent at the steepest slope meets the isoelectric TP level), common practice.
    """
    s, f, fs = rec.signal, rec.fiducials, rec.fs
    ds = np.gradient(s) * fs
    ms = lambda sec: int(round(sec * fs))  # noqa: E731
    out = []
    for k in range(1, len(rec.r_peaks) - 1):
        if rec.beat_labels[k] != "N" or rec.beat_labels[k + 1] != "N" or f["P"][k] < 0:
            continue
        p, q, sw, t = f["P"][k], f["Q"][k], f["S"][k], f["T"][k]
        m0 = (f["T"][k - 1] + p) // 2
        m1 = (t + f["P"][k + 1]) // 2
        iso0 = np.median(s[m0 - ms(0.02) : m0 + ms(0.02) + 1])
        iso1 = np.median(s[m1 - ms(0.02) : m1 + ms(0.02) + 1])
        a, b = q - ms(0.06), sw + ms(0.06)
        act = np.nonzero(np.abs(ds[a:b]) > 0.05 * np.abs(ds[a:b]).max())[0]
        qrs_on, qrs_off = a + act[0], a + act[-1]
        pk = p - ms(0.03) + np.argmax(s[p - ms(0.03) : p + ms(0.03)])
        j = pk - ms(0.08) + np.argmax(ds[pk - ms(0.08) : pk])
        p_on = j - (s[j] - iso0) / ds[j] * fs
        tk = t - ms(0.05) + np.argmax(s[t - ms(0.05) : t + ms(0.05)])
        j = tk + np.argmin(ds[tk : tk + ms(0.15)])
        t_end = j - (s[j] - iso1) / ds[j] * fs
        out.append(((qrs_on - p_on) / fs * 1e3, (qrs_off - qrs_on) / fs * 1e3, (t_end - qrs_on) / fs * 1e3))
    return np.array(out)


def _qrs_width_ms(rec: SyntheticECG, label: str):
    s, f, fs = rec.signal, rec.fiducials, rec.fs
    ds = np.gradient(s) * fs
    widths = []
    for k in np.nonzero(rec.beat_labels == label)[0]:
        a, b = f["Q"][k] - int(0.06 * fs), f["S"][k] + int(0.06 * fs)
        if a < 0 or b > s.size:
            continue
        act = np.nonzero(np.abs(ds[a:b]) > 0.05 * np.abs(ds[a:b]).max())[0]
        widths.append((act[-1] - act[0]) / fs * 1e3)
    return np.array(widths)


def test_mean_rate_is_the_requested_rate():
    rec = synthetic_ecg(300.0, 250.0, heart_rate_bpm=72.0, hrv_std_bpm=2.0, seed=4)
    rr = np.diff(rec.r_peaks) / rec.fs
    assert 60.0 / rr.mean() == pytest.approx(72.0, rel=0.01)
    # Reported exact RR intervals agree with the rounded R indices to one sample.
    assert np.abs(rr - rec.rr_s).max() <= 1.0 / rec.fs
    assert rec.signal.dtype == np.float64 and rec.signal.size == 300 * 250


def test_rr_spectrum_peaks_at_mayer_and_respiratory_frequencies():
    # McSharry et al. 2003: RR spectrum = Gaussians at 0.1 Hz (Mayer waves) and
    # 0.25 Hz (respiration), s.d. 0.01 Hz, LF/HF power ratio as requested.
    rec = synthetic_ecg(1800.0, 125.0, heart_rate_bpm=60.0, hrv_std_bpm=3.0, lf_hf_ratio=2.0, seed=11)
    t_beats = rec.r_peaks[1:] / rec.fs
    grid = np.arange(t_beats[0], t_beats[-1], 0.25)  # 4 Hz resampling, common practice for HRV
    rr = np.interp(grid, t_beats, rec.rr_s)
    f, pxx = signal.welch(rr - rr.mean(), fs=4.0, nperseg=1024)
    lf_band = (f > 0.04) & (f < 0.17)
    hf_band = (f > 0.17) & (f < 0.4)
    f_lf = f[lf_band][np.argmax(pxx[lf_band])]
    f_hf = f[hf_band][np.argmax(pxx[hf_band])]
    assert f_lf == pytest.approx(0.1, abs=0.02)
    assert f_hf == pytest.approx(0.25, abs=0.02)
    ratio = pxx[lf_band].sum() / pxx[hf_band].sum()
    # Sampling the RR process once per beat (about 1 Hz) and interpolating
    # attenuates the HF band, so only the order of magnitude is checked here
    # (the exact ratio is checked on the RR process itself below).
    assert 1.0 < ratio < 8.0


def test_rr_tachogram_lf_hf_ratio_and_moments():
    # McSharry et al. 2003, Eq. 3: mean 60/HR, s.d. 60*hrstd/HR^2, LF/HF power ratio.
    rr = rr_tachogram(8192, heart_rate_bpm=75.0, hrv_std_bpm=2.0, lf_hf_ratio=0.5, seed=3)
    assert rr.mean() == pytest.approx(0.8, abs=1e-12)
    assert rr.std() == pytest.approx(60 * 2.0 / 75.0**2, rel=1e-9)
    f, pxx = signal.welch(rr, fs=1.0, nperseg=1024)
    lf = pxx[(f > 0.05) & (f < 0.15)].sum()
    hf = pxx[(f > 0.2) & (f < 0.3)].sum()
    assert lf / hf == pytest.approx(0.5, rel=0.25)


def test_closed_form_matches_numerical_integration_of_the_published_odes():
    # McSharry et al. 2003, Eq. 2, integrated by SciPy's solve_ivp (x, y, z with
    # alpha = 1 - r, theta = atan2(y, x), signed-remainder dtheta), constant rate.
    fs, hr = 500.0, 60.0
    rec = synthetic_ecg(4.0, fs, heart_rate_bpm=hr, hrv_std_bpm=0.0, seed=1)
    theta_i, a_i, b_i = NORMAL_BEAT.scaled(hr)
    omega = 2 * np.pi * hr / 60.0

    def rhs(t, v):
        x, y, z = v
        alpha = 1.0 - np.hypot(x, y)
        th = np.arctan2(y, x)
        d = np.remainder(th - theta_i + np.pi, 2 * np.pi) - np.pi
        dz = -np.sum(a_i * d * np.exp(-d * d / (2 * b_i * b_i))) - z
        return [alpha * x - omega * y, alpha * y + omega * x, dz]

    t0 = -5.0  # R peaks at whole seconds: start 5 cycles early on (x, y) = (1, 0)
    t_eval = np.arange(rec.signal.size) / fs
    sol = integrate.solve_ivp(rhs, (t0, t_eval[-1]), [1.0, 0.0, 0.0], t_eval=t_eval,
                              rtol=1e-9, atol=1e-12, max_step=1e-3)
    z = sol.y[2]
    z_scaled = z / np.median(z[rec.r_peaks])
    assert np.abs(z_scaled - rec.signal).max() < 5e-3


@pytest.mark.parametrize("fs", [125.0, 360.0, 1000.0])
def test_r_peaks_are_local_maxima(fs):
    rec = synthetic_ecg(30.0, fs, heart_rate_bpm=70.0, ectopic_every=4, seed=2)
    half = int(0.06 * fs)
    for r in rec.r_peaks:
        if r < half or r + half >= rec.signal.size:
            continue
        offset = np.argmax(rec.signal[r - half : r + half + 1]) - half
        assert abs(offset) <= 1


@pytest.mark.parametrize("hr, qt_max", [(60.0, 430.0), (100.0, 340.0)])
def test_intervals_are_physiological(hr, qt_max):
    # Normal adult ranges: PR 120-200 ms, QRS < 120 ms (clinical teaching pages,
    # tertiary; AHA 2009 upper normal about 110 ms, from memory); QT upper normal
    # about 430 ms at 60 bpm and 340 ms at 100 bpm (teaching page citing Hurst).
    rec = synthetic_ecg(40.0, 500.0, heart_rate_bpm=hr, hrv_std_bpm=0.5, seed=7)
    pr, qrs, qt = _intervals_ms(rec).mean(axis=0)
    assert 120.0 <= pr <= 200.0
    assert 60.0 <= qrs < 120.0
    assert 0.75 * qt_max <= qt <= qt_max


def test_ectopic_beats_are_premature_wide_without_p_and_with_inverted_t():
    rec = synthetic_ecg(60.0, 360.0, heart_rate_bpm=65.0, hrv_std_bpm=0.5, ectopic_every=5, seed=5)
    v = np.nonzero(rec.beat_labels == "V")[0]
    assert v.size >= 10 and np.all(rec.beat_labels[v - 1] == "N")
    rr = np.diff(rec.r_peaks) / rec.fs
    sinus = np.median(rr)
    coupling = rr[v - 1]
    pause = rr[v[v < rr.size]]
    assert np.all(coupling < 0.8 * sinus)
    # Full compensatory pause: coupling + pause is about two sinus cycles.
    np.testing.assert_allclose(coupling[: pause.size] + pause, 2 * sinus, rtol=0.08)
    assert np.all(rec.fiducials["P"][v] == -1)
    assert np.all(rec.signal[rec.fiducials["T"][v]] < 0)
    n = np.nonzero(rec.beat_labels == "N")[0]
    assert np.median(rec.signal[rec.fiducials["T"][n]]) > 0
    # Wide QRS: >= 120 ms (common practice for ventricular beats), normal < 120 ms.
    assert _qrs_width_ms(rec, "V").min() >= 120.0
    assert _qrs_width_ms(rec, "N").max() < 120.0


def test_beats_at_requested_times():
    rec = synthetic_ecg(20.0, 250.0, ectopic_times_s=[5.0, 12.0], seed=1)
    v_times = rec.r_peaks[rec.beat_labels == "V"] / rec.fs
    assert v_times.size == 2
    np.testing.assert_allclose(v_times, [5.0, 12.0], atol=1.0)


def test_amplitude_and_reproducibility():
    a = synthetic_ecg(20.0, 250.0, amplitude_mv=1.5, seed=9)
    b = synthetic_ecg(20.0, 250.0, amplitude_mv=1.5, seed=9)
    c = synthetic_ecg(20.0, 250.0, amplitude_mv=1.5, seed=10)
    assert np.median(a.signal[a.r_peaks]) == pytest.approx(1.5)
    np.testing.assert_array_equal(a.signal, b.signal)
    assert not np.array_equal(a.r_peaks, c.r_peaks)
    assert a.units == "mV"


def test_leads_sharing_the_rhythm_arguments_share_the_beats():
    # Several channels of one recording: same seed and rhythm, other morphology.
    from tracevet.synthetic import MCSHARRY_CODE_BEAT

    a = synthetic_ecg(30.0, 500.0, heart_rate_bpm=80.0, ectopic_every=5, seed=4)
    b = synthetic_ecg(30.0, 500.0, heart_rate_bpm=80.0, ectopic_every=5, seed=4,
                      morphology=MCSHARRY_CODE_BEAT, amplitude_mv=0.6)
    np.testing.assert_array_equal(a.r_peaks, b.r_peaks)
    np.testing.assert_array_equal(a.beat_labels, b.beat_labels)
    assert not np.allclose(a.signal, b.signal)


def test_mcg_is_in_picotesla_with_a_larger_t_wave():
    # Adult MCG peaks about 50-100 pT (reference values, secondary history page).
    mcg = synthetic_mcg(20.0, 500.0, amplitude_pt=70.0, seed=3)
    ecg = synthetic_ecg(20.0, 500.0, seed=3)
    assert mcg.units == "pT"
    assert np.median(mcg.signal[mcg.r_peaks]) == pytest.approx(70.0)
    t_ratio = lambda r: np.median(r.signal[r.fiducials["T"][1:-1]] / r.signal[r.r_peaks[1:-1]])  # noqa: E731
    assert t_ratio(mcg) > 1.5 * t_ratio(ecg)


@pytest.mark.parametrize("fs, mains", [(500.0, 50.0), (360.0, 60.0), (125.0, 60.0)])
def test_mains_hum_peaks_at_the_mains_frequency(fs, mains):
    x = mains_hum(int(20 * fs), fs, freq_hz=mains, amplitude_mv=0.1, harmonics=3)
    f, pxx = signal.welch(x, fs=fs, nperseg=int(4 * fs))  # SciPy Welch estimate
    assert f[np.argmax(pxx)] == pytest.approx(mains, abs=0.5)
    assert np.max(np.abs(x)) <= 0.1 * (1 + 1 / 4 + 1 / 9) + 1e-12
    if 2 * mains < fs / 2:
        k2 = np.argmin(np.abs(f - 2 * mains))
        assert pxx[k2] > 1e-3 * pxx.max()


@pytest.mark.parametrize("kind", ["white", "muscle", "wander", "mains", "motion"])
@pytest.mark.parametrize("target", [0.0, 12.0, 24.0])
def test_add_noise_at_snr_reaches_the_target(kind, target):
    # SNR = 10 log10(sum x^2 / sum n^2), common practice (reference values, section 3).
    fs = 360.0
    clean = synthetic_ecg(30.0, fs, seed=1).signal
    n = clean.size
    noise = {
        "white": lambda: white_noise(n, 1.0, seed=2),
        "muscle": lambda: muscle_noise(n, fs, 0.1, seed=2, bursty=True),
        "wander": lambda: baseline_wander(n, fs, seed=2),
        "mains": lambda: mains_hum(n, fs, 60.0, 0.2),
        "motion": lambda: electrode_motion(n, fs, 0.5, events_per_min=10.0, seed=2),
    }[kind]()
    noisy = add_noise_at_snr(clean, noise, target)
    assert measure_snr_db(clean, noisy - clean) == pytest.approx(target, abs=1e-9)


def test_muscle_noise_is_band_limited_and_scaled():
    # EMG spreads over about 20 Hz to several hundred Hz (common practice).
    fs = 1000.0
    x = muscle_noise(int(30 * fs), fs, rms_mv=0.05, seed=1)
    assert np.sqrt(np.mean(x**2)) == pytest.approx(0.05, rel=1e-9)
    f, pxx = signal.welch(x, fs=fs, nperseg=2048)
    in_band = pxx[(f >= 15) & (f <= 180)].sum() / pxx.sum()
    assert in_band > 0.9


def test_baseline_wander_follows_breathing():
    # Respiration moves the baseline at about 0.15-0.3 Hz (Friesen et al. 1990, band from memory).
    fs = 250.0
    x = baseline_wander(int(300 * fs), fs, amplitude_mv=0.15, breathing_hz=0.25, seed=4)
    f, pxx = signal.welch(x, fs=fs, nperseg=int(100 * fs))
    band = f > 0.1
    assert f[band][np.argmax(pxx[band])] == pytest.approx(0.25, abs=0.04)
    assert 0.1 < np.max(np.abs(x)) < 0.4


def test_noise_generators_are_reproducible():
    fs = 250.0
    for gen in (lambda s: white_noise(1000, 0.1, seed=s), lambda s: muscle_noise(1000, fs, 0.1, seed=s),
                lambda s: baseline_wander(1000, fs, seed=s), lambda s: electrode_motion(5000, fs, seed=s)):
        np.testing.assert_array_equal(gen(3), gen(3))
    assert white_noise(1000, 0.5, seed=1).std() == pytest.approx(0.5, rel=0.1)
