"""Suggestion engine and ``tracevet suggest``: ranking, the noise-removed estimate, bounded search, the CLI."""

from __future__ import annotations

import json
import threading
from pathlib import Path

import numpy as np
import pytest
import scipy.stats

import tracevet.cleaning as cleaning_pkg
from tracevet import synthetic as syn
from tracevet.assessment.flags import Flag
from tracevet.cleaning import DEFAULT_SETTINGS, apply_overrides, clean, load_profile
from tracevet.recording import Recording, read_recording, write_recording
from tracevet.suggestion import (
    NoBeats,
    SuggestionCancelled,
    flagged_stretches,
    plan_windows,
    rank_key,
    suggest,
)
from tracevet.suggestion import search as search_mod
from tracevet.suggestion.noise import estimate, kendall_tau, pair_agreement
from tracevet.suggestion.result import CandidateResult

DATA = Path(__file__).parent / "data"


def _noisy(seconds=20.0, fs=250.0, muscle=0.05, seed=1):
    ecg = syn.synthetic_ecg(seconds, fs, heart_rate_bpm=72, seed=seed)
    n = ecg.signal.size
    noise = syn.muscle_noise(n, fs, muscle, seed=seed + 1, high_hz=min(150.0, 0.45 * fs))
    return ecg.signal, noise


def _record(values, fs, name="rec"):
    return Recording(
        np.asarray(values, dtype=np.float32).reshape(-1, 1), fs, ("chest",), units="mV", kind="ecg", source=name
    )


# ----------------------------------------------------------------------------- rank agreement


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_kendall_tau_agrees_with_scipy(seed):
    rng = np.random.default_rng(seed)
    a = rng.normal(size=25)
    b = a + rng.normal(scale=1.0, size=25)
    b[:5] = b[5]  # ties in one sequence
    a[10:13] = a[13]  # and in the other
    # Outside source: scipy.stats.kendalltau (tau-b, its default variant).
    expected = scipy.stats.kendalltau(a, b)[0]  # the statistic (SciPy < 1.10 has no .statistic)
    assert kendall_tau(a, b) == pytest.approx(expected, abs=1e-12)


def test_pair_agreement_counts_untied_pairs():
    # Hand count: pairs (1,2),(1,3),(2,3): a orders 1<2<3, b orders 1<3<2 -> (1,2),(1,3) agree, (2,3) disagrees.
    assert pair_agreement([1, 2, 3], [1, 3, 2]) == (2, 3)
    assert pair_agreement([1, 1, 2], [1, 2, 3]) == (2, 2)  # the pair tied in a is not compared


# ----------------------------------------------------------------------------- noise estimate


@pytest.mark.parametrize("kept", [0.5, 0.25])
def test_noise_removed_estimate_matches_the_truth_for_a_known_residual(kept):
    # Truth: a cleaning that leaves a fraction k of the noise gains 20 log10(1/k) dB of SNR
    # (SNR definition, common practice): 6.0 dB for k = 0.5, 12.0 dB for k = 0.25.
    clean_signal, noise = _noisy(seconds=30.0, fs=360.0, muscle=0.08)
    original = clean_signal + noise
    cleaned = clean_signal + kept * noise
    from tracevet.assessment.qrs import detect_qrs

    peaks = detect_qrs(original, 360.0)
    est = estimate(original, cleaned, peaks, 360.0)
    truth = 20 * np.log10(1 / kept)
    # Beat-to-beat variation of the heart itself (rate-dependent waves) adds to every trace's
    # off-beat power, so the estimate falls somewhat short of the truth, never above it.
    assert truth - 2.5 <= est.removed_db <= truth + 0.3
    assert est.signal_lost < 0.02 * est.noise_in


def test_noise_removed_estimate_counts_lost_signal_against_the_cleaning():
    clean_signal, noise = _noisy(seconds=30.0, fs=360.0, muscle=0.08)
    original = clean_signal + noise
    from tracevet.assessment.qrs import detect_qrs

    peaks = detect_qrs(original, 360.0)
    faithful = estimate(original, clean_signal + 0.5 * noise, peaks, 360.0)
    damaging = estimate(original, 0.7 * clean_signal + 0.5 * noise, peaks, 360.0)  # R, P, T to 70 %
    assert damaging.signal_lost > 10 * faithful.signal_lost
    assert damaging.removed_db < faithful.removed_db - 1.0


# ----------------------------------------------------------------------------- ranking


def _cand(flags=(), noise=5.0, shape=1.0, changes=1):
    made = [Flag(fid, sev, "m", 1.0, 0.5, "s", "c") for fid, sev in flags]
    return CandidateResult(
        DEFAULT_SETTINGS, "x", flags=made, noise_removed_db=noise, shape_change_percent=shape, n_changes=changes
    )


def test_rank_order_fail_then_warn_then_noise_then_shape():
    fail = _cand([("r-peak-change", "fail")], noise=20.0)
    warn = _cand([("ringing", "warn")], noise=15.0)
    quiet_less = _cand(noise=4.0)
    quiet_more = _cand(noise=6.0, shape=9.0)
    tie_small_shape = _cand(noise=6.05, shape=2.0)
    ranked = sorted([fail, warn, quiet_less, quiet_more, tie_small_shape], key=rank_key)
    assert ranked == [tie_small_shape, quiet_more, quiet_less, warn, fail]


# ----------------------------------------------------------------------------- windows


def test_short_records_are_searched_whole_long_ones_on_windows():
    fs = 250.0
    assert plan_windows(int(60 * fs), fs) == [search_mod.Window(0, 15000, 0, 15000)]
    n = int(24 * 3600 * fs)
    windows = plan_windows(n, fs, [(3600.0, 3601.0), (3600.5, 3602.0), (7200.0, 7300.0), (10.0, 11.0)])
    cores = [(w.start / fs, w.stop / fs) for w in windows]
    core = search_mod.WINDOW_S
    assert cores[0] == (0.0, core) and cores[-1] == (n / fs - core, n / fs)
    assert any(a <= 3600.0 < b for a, b in cores) and any(a <= 7250.0 < b for a, b in cores)
    assert len(windows) == 5  # start, 1 h, 2 h, middle, end (10 s lies in the start window; 3600.5 merged)
    margin = int(search_mod.MARGIN_S * fs)
    assert windows[0].read_start == 0 and windows[1].read_start == windows[1].start - margin


# ----------------------------------------------------------------------------- same code path as denoise


def test_every_candidate_cleaning_is_the_denoise_cleaning(tmp_path, run_cli, monkeypatch):
    clean_signal, noise = _noisy(seconds=12.0, fs=250.0)
    rec = _record(clean_signal + noise, 250.0)
    calls = []
    real_clean = cleaning_pkg.clean_with_report

    def spy(recording, settings, *args, **kwargs):
        out, report = real_clean(recording, settings, *args, **kwargs)
        calls.append((recording, settings, out))
        return out, report

    monkeypatch.setattr(cleaning_pkg, "clean_with_report", spy)
    result = suggest(rec, threads=1)
    monkeypatch.undo()
    assert len(calls) == len(result.ranked) >= 15
    # Outside reference: the `tracevet denoise` command with the same settings as a profile.
    for recording, settings, out in calls[:: max(1, len(calls) // 4)] + [calls[-1]]:
        src, dst, profile = tmp_path / "in.npz", tmp_path / "out.npz", tmp_path / "p.yaml"
        write_recording(recording, src)
        profile.write_text(settings.to_yaml())
        code, _, err = run_cli("denoise", src, dst, "--profile", profile)
        assert code == 0, err
        np.testing.assert_array_equal(read_recording(dst).samples, out.samples)
    best = [c for c in calls if c[1] == result.best.settings][0]
    np.testing.assert_array_equal(result.cleaned.samples, best[2].samples)


def test_long_record_searched_on_windows_and_winner_verified_whole(monkeypatch):
    monkeypatch.setattr(search_mod, "WHOLE_RECORD_MAX_S", 20.0)
    monkeypatch.setattr(search_mod, "WINDOW_S", 6.0)
    monkeypatch.setattr(search_mod, "MARGIN_S", 2.0)
    clean_signal, noise = _noisy(seconds=40.0, fs=250.0)
    rec = _record(clean_signal + noise, 250.0)
    seen = []
    real_clean = cleaning_pkg.clean_with_report
    def counting(r, s, *a, **k):
        seen.append(r.n_samples)
        return real_clean(r, s, *a, **k)

    monkeypatch.setattr(cleaning_pkg, "clean_with_report", counting)
    result = suggest(rec, flagged_stretches_s=[(13.0, 14.0)], threads=2)
    assert len(result.windows_s) == 4
    assert result.best.scope == "whole record" and result.ranked[0].scope == "sampled windows"
    full = [n for n in seen if n == rec.n_samples]
    assert 1 <= len(full) <= search_mod.FULL_RUNS_MAX  # only the winner (and fallbacks) on the whole record
    assert max(n for n in seen if n != rec.n_samples) <= int(10.0 * 250)
    np.testing.assert_array_equal(result.cleaned.samples, real_clean(rec, result.best.settings)[0].samples)
    assert "sampled windows" in result.searched_on


# ----------------------------------------------------------------------------- outcomes


def test_aggressive_current_settings_get_a_suggestion_without_fail():
    # A hard universal threshold down to level 7 with the Haar wavelet (one of the demo's bad cleanings).
    clean_signal, noise = _noisy(seconds=30.0, fs=250.0, muscle=0.06, seed=4)
    rec = _record(clean_signal + noise, 250.0)
    current = apply_overrides(
        DEFAULT_SETTINGS,
        [
            "transform=dwt",
            "wavelet=haar",
            "level=7",
            "rule=universal",
            "threshold_mode=hard",
            "noise_estimate=per_level",
        ],
    )
    result = suggest(rec, current=current)
    assert result.current is not None and result.current.n_fail > 0
    assert result.found and result.best.n_fail == 0
    assert rank_key(result.best) <= rank_key(result.base)
    assert "current settings give" in result.reason
    assert len(result.runners_up) == 2
    assert result.assessment.worst_severity == result.best.worst_severity


def test_no_beats_is_refused():
    flat = _record(np.zeros(5000), 250.0, name="flat.npz")
    with pytest.raises(NoBeats, match="cannot suggest: no beats"):
        suggest(flat)


def test_progress_and_cancel():
    clean_signal, noise = _noisy(seconds=10.0)
    rec = _record(clean_signal + noise, 250.0)
    seen = []
    suggest(rec, progress=lambda f, m: seen.append(f), threads=1)
    assert seen[0] == 0.0 and seen[-1] == 1.0 and all(b >= a for a, b in zip(seen, seen[1:]))
    stop = threading.Event()
    count = []

    def progress(fraction, message):
        count.append(fraction)
        if len(count) == 4:
            stop.set()

    with pytest.raises(SuggestionCancelled):
        suggest(rec, progress=progress, cancel=stop, threads=1)
    assert len(count) == 4


def test_flagged_stretches_leave_out_whole_record_flags():
    class A:
        flags = [Flag("clipping", "fail", "m", 1, 0, "s", "c")]
        channels = []

    a = A()
    # the issue-9 ``where`` field: a whole-record stretch is not local
    object.__setattr__(a.flags[0], "where", ((0.0, 100.0), (40.0, 41.0)))
    assert flagged_stretches(a, 100.0) == [(40.0, 41.0)]


# ----------------------------------------------------------------------------- CLI


def test_cli_prints_a_profile_denoise_accepts_and_writes(tmp_path, run_cli):
    clean_signal, noise = _noisy(seconds=12.0)
    src = tmp_path / "rec.npz"
    write_recording(_record(clean_signal + noise, 250.0), src)
    out = tmp_path / "cleaned.npz"
    code, stdout, stderr = run_cli("suggest", src, "--write", out)
    assert code == 0, stderr
    profile = tmp_path / "s.yaml"
    profile.write_text(stdout)
    settings = load_profile(profile)
    assert f"# digest: {settings.digest()}" in stdout and "predicted" in stdout and "#2:" in stdout
    code, _, err = run_cli("denoise", src, tmp_path / "again.npz", "--profile", profile)
    assert code == 0, err
    np.testing.assert_array_equal(read_recording(out).samples, read_recording(tmp_path / "again.npz").samples)


def test_cli_json_is_one_object(tmp_path, run_cli):
    clean_signal, noise = _noisy(seconds=12.0)
    src = tmp_path / "rec.npz"
    write_recording(_record(clean_signal + noise, 250.0), src)
    code, stdout, _ = run_cli("suggest", src, "--json")
    assert code == 0
    doc = json.loads(stdout)
    assert doc["found"] is True and len(doc["runners_up"]) == 2
    assert set(doc["predicted"]) >= {"flags", "worst_severity", "noise_removed_db", "metrics"}
    assert len(doc["candidate_set_digest"]) == 64 and doc["reason"]


def test_cli_no_beats_exit_1_and_bad_input_exit_2(tmp_path, run_cli):
    flat = tmp_path / "flat.npz"
    write_recording(_record(np.zeros(5000), 250.0), flat)
    code, stdout, stderr = run_cli("suggest", flat, "--write", tmp_path / "o.npz")
    assert code == 1 and "cannot suggest: no beats" in stderr and stdout == ""
    assert not (tmp_path / "o.npz").exists()
    bad = tmp_path / "bad.csv"
    bad.write_text("not,a\nrecording,here\n")
    code, stdout, stderr = run_cli("suggest", bad, "--write", tmp_path / "o.npz")
    assert code == 2 and stderr.count("\n") == 1 and "Traceback" not in stderr
    assert not (tmp_path / "o.npz").exists()
    code, _, stderr = run_cli("suggest", flat, "--write", tmp_path / "o.txt")
    assert code == 2 and "o.txt" in stderr


def test_noise_removed_estimate_orders_cleanings_like_the_truth():
    # Truth: SNR gain against the noise-free McSharry signal (tracevet.synthetic), both traces
    # referred to their mean (SNR definition, common practice). Pairs counted within a record.
    from tracevet.assessment.qrs import detect_qrs

    variants = [
        [], ["rule=sure"], ["rule=bayes", "threshold_mode=soft"], ["rule=universal"], ["rule=minimax"],
        ["threshold_mode=hard"], ["noise_estimate=per_level"], ["wavelet=sym8"], ["level=3"], ["level=5"],
        ["transform=dwt"], ["rule=universal", "threshold_mode=soft", "level=6"],
    ]
    agree = compared = 0
    for fs, kind in ((360.0, "white"), (250.0, "muscle")):
        ecg = syn.synthetic_ecg(30.0, fs, heart_rate_bpm=70, seed=5)
        truth = ecg.signal
        if kind == "white":
            noise = syn.white_noise(truth.size, 0.06, seed=6)
        else:
            noise = syn.muscle_noise(truth.size, fs, 0.08, seed=6, high_hz=0.45 * fs)
        noisy = truth + noise
        rec = _record(noisy, fs)
        peaks = detect_qrs(noisy, fs)
        est, tru = [], []
        s0, x0 = truth - truth.mean(), noisy - noisy.mean()
        for overrides in variants:
            y = clean(rec, apply_overrides(DEFAULT_SETTINGS, overrides)).samples[:, 0].astype(np.float64)
            est.append(estimate(noisy, y, peaks, fs).removed_db)
            y0 = y - y.mean()
            tru.append(10 * np.log10(np.sum((x0 - s0) ** 2) / np.sum((y0 - s0) ** 2)))
        a, m = pair_agreement(est, tru)
        agree, compared = agree + a, compared + m
    assert agree / compared >= 0.8
