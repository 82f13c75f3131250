"""Small honesty fixes on the command line: units, wavelet names, beat counts, flag sources."""

from __future__ import annotations

import pywt
import pytest

from tracevet.assessment.limits import _DEFAULTS
from tracevet.assessment.metric_words import channel_metrics
from tracevet.cleaning import CleaningSettings
from tracevet.errors import SettingsError


def test_unknown_units_on_the_command_line_are_refused_with_the_list(run_cli, tmp_path):
    code, out, err = run_cli("assess", tmp_path / "a.csv", tmp_path / "b.csv", "--units", "volts")
    assert code == 2 and err.count("\n") == 1
    assert "unknown units 'volts'" in err and "mV" in err and "pT" in err


def test_an_unknown_wavelet_lists_families_not_every_name():
    with pytest.raises(SettingsError) as caught:
        CleaningSettings.from_dict({"wavelet": "db99"})
    message = str(caught.value)
    # every discrete family of PyWavelets is named, and far fewer words than wavelets are printed
    families = {pywt.Wavelet(n).short_family_name for n in pywt.wavelist(kind="discrete")}
    assert all(family in message for family in families)
    assert "db1-db38" in message or "db1-db" in message
    assert len(message.split()) < len(pywt.wavelist(kind="discrete")) / 2


def test_beat_counts_add_up():
    metrics = {"beat_count": 136, "dominant_beat_count": 134, "other_beat_count": 0}
    values = channel_metrics(metrics, "ch1", False)
    assert values["unmeasured_beat_count"] == 2
    assert values["dominant_beat_count"] + values["other_beat_count"] + values["unmeasured_beat_count"] == 136


def test_flag_sources_read_as_sentences():
    for spec in _DEFAULTS:
        assert "the about" not in spec.source and "  " not in spec.source
