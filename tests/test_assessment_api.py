"""The assessment API: worked PRD/PRDN example, JSON contract, bad input, no beats,
several channels, limits from YAML, save and load."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest

from tracevet import synthetic as syn
from tracevet.assessment import Assessment, assess, default_limits, limits_from_mapping
from tracevet.assessment.comparison import correlation, prd, prdn, rmse
from tracevet.errors import InputError
from tracevet.recording import Recording

# The JSON contract of one flag (docs/assessment.md): the six original keys and the stretches.
FLAG_KEYS = {"id", "severity", "message", "value", "limit", "source", "where", "where_more", "beats_affected",
             "beats_measured"}


def test_prd_prdn_worked_example():
    # Computed by hand (PRD and PRDN definitions, common practice; PRD as in Zigel, Cohen & Katz 2000,
    # IEEE TBME 47(11):1424-1430):
    # x = (1, 2, 3, 4), x_hat = (1, 2, 3, 3): sum (x - x_hat)^2 = 1, sum x^2 = 30,
    # mean x = 2.5, sum (x - mean)^2 = 2.25 + 0.25 + 0.25 + 2.25 = 5.
    x = np.array([1.0, 2.0, 3.0, 4.0])
    x_hat = np.array([1.0, 2.0, 3.0, 3.0])
    assert prd(x, x_hat) == pytest.approx(100.0 * math.sqrt(1.0 / 30.0))  # 18.257 %
    assert prd(x, x_hat) == pytest.approx(18.2574, abs=1e-4)
    assert prdn(x, x_hat) == pytest.approx(100.0 * math.sqrt(1.0 / 5.0))  # 44.721 %
    assert prdn(x, x_hat) == pytest.approx(44.7214, abs=1e-4)
    assert rmse(x, x_hat) == pytest.approx(0.5)
    assert correlation(x, 2 * x + 1) == pytest.approx(1.0)


def test_prd_depends_on_offset_prdn_does_not():
    # PRD depends on the DC offset of x, PRDN does not (common practice: PRDN subtracts the mean of x).
    rng = np.random.default_rng(0)
    x = rng.standard_normal(1000)
    x_hat = x + 0.05 * rng.standard_normal(1000)
    assert prdn(x + 10, x_hat + 10) == pytest.approx(prdn(x, x_hat))
    assert prd(x + 10, x_hat + 10) < prd(x, x_hat) / 5


@pytest.fixture(scope="module")
def pair():
    rec = syn.synthetic_ecg(15.0, 360.0, heart_rate_bpm=75.0, seed=5)
    noisy = rec.signal + syn.white_noise(rec.signal.size, 0.03, seed=6)
    original = Recording(noisy, 360.0, ("II",), units="mV", kind="ecg", source="orig.npz")
    cleaned = Recording(rec.signal, 360.0, ("II",), units="mV", kind="ecg", source="clean.npz")
    return original, cleaned, rec.r_peaks


def _detector(peaks):
    return lambda signal, fs: peaks


def test_json_contract_exact_keys(pair):
    original, cleaned, peaks = pair
    bad = Recording(cleaned.samples[:, 0] * 0.7, 360.0, ("II",), units="mV", kind="ecg")
    result = assess(original, bad, detector=_detector(peaks))
    doc = result.to_json_dict()
    assert set(doc) == {"metrics", "flags"}
    assert doc["flags"], "a 30 % R loss must be flagged"
    for flag in doc["flags"]:
        assert set(flag) == FLAG_KEYS
        assert flag["severity"] in ("warn", "fail")
    text = json.dumps(doc, allow_nan=False)  # no NaN or inf anywhere
    assert json.loads(text) == doc
    assert result.worst_severity == "fail"


def test_faithful_noisy_pair_is_not_flagged(pair):
    original, cleaned, peaks = pair
    result = assess(original, cleaned, detector=_detector(peaks))
    assert result.flags == []
    assert result.worst_severity is None
    assert result.metrics["dominant_beat_count"] >= 15


@pytest.mark.parametrize(
    "change, message",
    [
        (lambda r: Recording(r.samples[:-1], r.fs, r.channels, units="mV", kind="ecg"), "samples per channel"),
        (lambda r: Recording(r.samples, 250.0, r.channels, units="mV", kind="ecg"), "Hz"),
        (lambda r: Recording(np.hstack([r.samples, r.samples]), r.fs, ("a", "b"), units="mV", kind="ecg"), "channel"),
        (lambda r: Recording(r.samples, r.fs, r.channels, units="pT", kind="ecg"), "pT"),
    ],
)
def test_mismatched_pairs_raise_one_line_input_error(pair, change, message):
    original, cleaned, peaks = pair
    with pytest.raises(InputError) as info:
        assess(original, change(cleaned), detector=_detector(peaks))
    assert message in str(info.value) and "\n" not in str(info.value)


def test_nan_in_samples_is_refused():
    # The recording model refuses NaN at construction (one-line InputError).
    with pytest.raises(InputError):
        Recording(np.array([0.0, np.nan, 1.0]), 100.0, ("a",))


def test_no_beats_is_a_result_not_an_exception():
    flat = Recording(np.zeros(3600), 360.0, ("II",), units="mV", kind="ecg")
    result = assess(flat, flat, detector=lambda s, f: np.empty(0, dtype=np.int64))
    assert [f.id for f in result.flags] == ["no-beats"]
    assert result.flags[0].severity == "fail"
    assert result.metrics["r_amplitude_ratio"] is None
    assert result.beat_count == 0
    json.dumps(result.to_json_dict(), allow_nan=False)


def test_several_channels_suffix_metrics_and_name_channel_in_flags(pair):
    original, cleaned, peaks = pair
    two_orig = Recording(np.hstack([original.samples, original.samples]), 360.0, ("I", "II"), units="mV", kind="ecg")
    damaged = np.hstack([cleaned.samples, cleaned.samples * 0.7])
    two_clean = Recording(damaged, 360.0, ("I", "II"), units="mV", kind="ecg")
    result = assess(two_orig, two_clean, detector=_detector(peaks))
    assert "r_amplitude_ratio@I" in result.metrics and "r_amplitude_ratio@II" in result.metrics
    assert result.metrics["r_amplitude_ratio@II"] == pytest.approx(0.7, abs=0.02)
    assert result.flags and all(f.channel == "II" for f in result.flags)
    assert all("channel II" in f.message for f in result.flags)
    assert [c.channel for c in result.channels] == ["I", "II"]


def test_limits_from_yaml_mapping_override_defaults(pair):
    original, cleaned, peaks = pair
    bad = Recording(cleaned.samples[:, 0] * 0.9, 360.0, ("II",), units="mV", kind="ecg")
    assert not [f for f in assess(original, bad, detector=_detector(peaks)).flags if f.id == "r-peak-change"]
    strict = {"r-peak-change": {"warn": 0.02, "fail": 0.05}, "removed-beat-structure": "off"}
    result = assess(original, bad, limits=strict, detector=_detector(peaks))
    assert [f.severity for f in result.flags if f.id == "r-peak-change"] == ["fail"]
    assert not [f for f in result.flags if f.id == "removed-beat-structure"]
    specs = limits_from_mapping(strict, "queue.yaml")
    assert assess(original, bad, limits=specs, detector=_detector(peaks)).worst_severity == "fail"


@pytest.mark.parametrize(
    "mapping, words",
    [
        ({"no-such-flag": {"fail": 1}}, "unknown flag id"),
        ({"r-peak-change": {"fail": "high"}}, "must be a number"),
        ({"r-peak-change": {"fail": -1}}, ">= 0"),
        ({"r-peak-change": {"warn": 0.3, "fail": 0.2}}, "above fail"),
        ({"r-peak-change": {"fail_relative": 0.2}}, "amplitude flags only"),
        ({"r-peak-change": {"max": 0.2}}, "unknown key"),
        (["r-peak-change"], "must be a mapping"),
    ],
)
def test_bad_limits_give_one_line_errors(mapping, words):
    with pytest.raises(InputError) as info:
        limits_from_mapping(mapping, "queue.yaml")
    text = str(info.value)
    assert text.startswith("queue.yaml: ") and words in text and "\n" not in text


def test_limit_mode_follows_kind_and_units():
    assert default_limits("ecg", "mV").absolute
    assert default_limits("ecg", "uV").mv_per_unit == pytest.approx(1e-3)
    assert not default_limits("mcg", "pT").absolute
    assert not default_limits("ecg", None).absolute
    assert not default_limits("other", "mV").absolute


def test_save_and_load_round_trip(pair, tmp_path):
    original, cleaned, peaks = pair
    bad = Recording(cleaned.samples[:, 0] * 0.75, 360.0, ("II",), units="mV", kind="ecg")
    result = assess(original, bad, detector=_detector(peaks))
    result.save(tmp_path)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["assessment.json", "beats.npz"]
    back = Assessment.load(tmp_path)
    assert back.to_json_dict() == json.loads(json.dumps(result.to_json_dict()))
    assert [f.channel for f in back.flags] == [f.channel for f in result.flags]
    assert back.worst_severity == "fail"
    ch, orig_ch = back.channels[0], result.channels[0]
    assert np.array_equal(ch.r_peaks, orig_ch.r_peaks)
    assert np.allclose(ch.template_original, orig_ch.template_original)
    assert ch.regions == orig_ch.regions and ch.regions
    assert all(start < end for start, end, _ in ch.regions)


def test_load_refuses_missing_or_damaged_files(tmp_path):
    with pytest.raises(InputError):
        Assessment.load(tmp_path)
    (tmp_path / "assessment.json").write_text("{not json")
    with pytest.raises(InputError):
        Assessment.load(tmp_path)


def test_assessment_never_changes_its_inputs(pair):
    original, cleaned, peaks = pair
    before_o, before_c = original.samples.copy(), cleaned.samples.copy()
    assess(original, cleaned, detector=_detector(peaks))
    assert np.array_equal(original.samples, before_o) and np.array_equal(cleaned.samples, before_c)
