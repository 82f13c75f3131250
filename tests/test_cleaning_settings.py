"""Cleaning settings: validation, canonical form, digest, profiles and overrides."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest
import pywt

from tracevet.cleaning import (
    DEFAULT_SETTINGS,
    SETTING_CHOICES,
    SETTING_HELP,
    CleaningSettings,
    apply_overrides,
    load_profile,
)
from tracevet.errors import InputError, SettingsError


def test_every_setting_has_help_and_every_choice_list_is_sorted():
    names = set(DEFAULT_SETTINGS.to_dict())
    assert set(SETTING_HELP) == names
    assert set(SETTING_CHOICES) <= names
    for name, choices in SETTING_CHOICES.items():
        assert list(choices) == sorted(choices), name
        assert getattr(DEFAULT_SETTINGS, name) in choices


def test_wavelet_choices_are_pywavelets_discrete_wavelets():
    # Source: PyWavelets, pywt.wavelist(kind='discrete').
    assert set(SETTING_CHOICES["wavelet"]) == set(pywt.wavelist(kind="discrete"))
    assert set(SETTING_CHOICES["extension"]) == set(pywt.Modes.modes)


def test_settings_error_is_an_input_error_listing_sorted_choices():
    with pytest.raises(SettingsError) as info:
        CleaningSettings(rule="visushrink")
    assert isinstance(info.value, InputError)
    assert "choices: bayes, hybrid, minimax, sure, universal" in str(info.value)


@pytest.mark.parametrize(
    "changes, fragment",
    [
        ({"transform": "cwt"}, "unknown transform"),
        ({"wavelet": "morl"}, "unknown wavelet"),  # continuous wavelet: not for DWT/SWT
        ({"extension": "mirror"}, "unknown extension"),
        ({"level": 0}, "level must be"),
        ({"level": 2.5}, "level must be"),
        ({"level": True}, "level must be"),
        ({"threshold_mode": "firm"}, "unknown threshold_mode"),
        ({"noise_estimate": "mean"}, "unknown noise_estimate"),
        ({"baseline": "spline"}, "unknown baseline"),
        ({"baseline_cutoff_hz": 0.0}, "baseline_cutoff_hz"),
        ({"baseline_cutoff_hz": float("nan")}, "baseline_cutoff_hz"),
        ({"mains": "55"}, "unknown mains"),
        ({"mains_harmonics": 0}, "mains_harmonics"),
    ],
)
def test_invalid_values_are_refused(changes, fragment):
    with pytest.raises(SettingsError, match=fragment):
        CleaningSettings(**changes)


def test_to_dict_from_dict_round_trip_and_unknown_keys():
    d = DEFAULT_SETTINGS.to_dict()
    json.dumps(d)  # JSON-safe
    assert CleaningSettings.from_dict(d) == DEFAULT_SETTINGS
    assert CleaningSettings.from_dict({"rule": "sure"}).rule == "sure"
    with pytest.raises(SettingsError, match="unknown setting 'colour'") as info:
        CleaningSettings.from_dict({"colour": "red"}, source="p.yaml")
    assert info.value.source == "p.yaml"


def test_digest_is_sha256_of_sorted_canonical_json_and_stable_across_processes():
    import hashlib

    canonical = json.dumps(DEFAULT_SETTINGS.to_dict(), sort_keys=True, separators=(",", ":"))
    assert DEFAULT_SETTINGS.digest() == hashlib.sha256(canonical.encode()).hexdigest()
    other = apply_overrides(DEFAULT_SETTINGS, ["level=5"])
    assert other.digest() != DEFAULT_SETTINGS.digest()
    code = "from tracevet.cleaning import DEFAULT_SETTINGS as s; print(s.digest())"
    src = str(Path(__file__).resolve().parents[1] / "src")
    out = subprocess.run(
        [sys.executable, "-c", code], capture_output=True, text=True, env={"PYTHONPATH": src, "PYTHONHASHSEED": "123"}
    )
    assert out.stdout.strip() == DEFAULT_SETTINGS.digest()


def test_overrides_convert_types():
    s = apply_overrides(
        DEFAULT_SETTINGS,
        ["level=5", "baseline_cutoff_hz=0.5", "mains=50", "mains_harmonics=2", "transform=dwt", "rule = sure"],
    )
    assert (s.level, s.baseline_cutoff_hz, s.mains, s.mains_harmonics, s.transform, s.rule) == (
        5,
        0.5,
        "50",
        2,
        "dwt",
        "sure",
    )
    assert apply_overrides(s, ["level=auto"]).level == "auto"


@pytest.mark.parametrize(
    "override, fragment",
    [
        ("rule", "expected KEY=VALUE"),
        ("speed=9", "unknown setting 'speed'"),
        ("level=deep", "level must be"),
        ("baseline_cutoff_hz=low", "number"),
    ],
)
def test_bad_overrides(override, fragment):
    with pytest.raises(SettingsError, match=fragment) as info:
        apply_overrides(DEFAULT_SETTINGS, [override])
    assert info.value.source == "--set"


def test_profile_round_trip_and_yaml_off(tmp_path):
    path = tmp_path / "p.yaml"
    path.write_text(DEFAULT_SETTINGS.to_yaml())
    assert load_profile(path) == DEFAULT_SETTINGS
    # YAML 1.1 reads an unquoted `off` as false and `60` as an integer.
    path.write_text("baseline: off\nmains: 60\nlevel: 3\n")
    s = load_profile(path)
    assert (s.baseline, s.mains, s.level) == ("off", "60", 3)


@pytest.mark.parametrize(
    "text, fragment",
    [
        ("!!python/object/apply:os.system ['echo hi']\n", "unsafe or unknown YAML tag"),
        ("rule: !!python/name:os.system\n", "unsafe or unknown YAML tag"),
        ("rule: [unclosed\n", "not a valid YAML profile"),
        ("", "profile is empty"),
        ("- rule\n", "mapping"),
        ("rule: sure\nrule: bayes\n", "duplicate setting"),
        ("wavelet: nope\n", "unknown wavelet"),
    ],
)
def test_bad_profiles_give_one_line_naming_the_file(tmp_path, text, fragment):
    path = tmp_path / "bad.yaml"
    path.write_text(text)
    with pytest.raises(SettingsError, match=fragment) as info:
        load_profile(path)
    assert info.value.source == str(path)
    assert "\n" not in info.value.one_line()


def test_missing_profile():
    with pytest.raises(SettingsError, match="no such profile"):
        load_profile("/nonexistent/profile.yaml")
