"""``tracevet assess``: report, JSON contract, exit codes, bad input."""

from __future__ import annotations

import json
import re

import numpy as np
import pytest

import fidelity_cases as fc
from tracevet import synthetic as syn
from tracevet.recording import Recording, write_recording

# The JSON contract of one flag (docs/assessment.md): the six original keys and the stretches.
FLAG_KEYS = {"id", "severity", "message", "value", "limit", "source", "where", "where_more", "beats_affected",
             "beats_measured"}


@pytest.fixture(scope="module")
def files(tmp_path_factory):
    folder = tmp_path_factory.mktemp("assess")
    rec = syn.synthetic_ecg(20.0, 360.0, heart_rate_bpm=72.0, seed=21)
    noisy = rec.signal + syn.white_noise(rec.signal.size, 0.03, seed=22)
    src = fc.Source(
        "t", rec.signal, noisy, 360.0, rec.r_peaks, rec.fiducials["P"], rec.fiducials["T"], "ecg", "mV", 1.0
    )

    def save(name, values, **meta):
        path = folder / name
        write_recording(Recording(values, 360.0, ("II",), **meta), path)
        return path

    return {
        "original": save("original.npz", noisy, units="mV", kind="ecg"),
        "faithful": save("faithful.npz", rec.signal, units="mV", kind="ecg"),
        "flattened": save("flattened.npz", fc.scale_r(rec.signal, src, 0.7), units="mV", kind="ecg"),
        "short": save("short.npz", rec.signal[:-10], units="mV", kind="ecg"),
        "flat": save("flat.npz", np.zeros(7200), units="mV", kind="ecg"),
        "folder": folder,
    }


def test_faithful_pair_passes_with_readable_report(run_cli, files):
    code, out, err = run_cli("assess", files["original"], files["faithful"])
    assert code == 0, err
    assert "flags: none" in out and "result: PASS" in out
    assert "R amplitude ratio" in out and "not a medical device" in out


def test_flattened_r_peaks_fail_with_exit_1(run_cli, files):
    code, out, err = run_cli("assess", files["original"], files["flattened"])
    assert code == 1, err
    assert "FAIL r-peak-change" in out and "source:" in out
    # The report says where each flag applies: stretches in seconds and beats affected of beats measured.
    assert re.search(r"where: \d+\.\d-\d+\.\d s.*, \d+ of \d+ beats", out)


def test_json_is_exactly_one_object_with_the_contract(run_cli_process, files):
    code, out, err = run_cli_process("assess", files["original"], files["flattened"], "--json")
    assert code == 1, err
    doc = json.loads(out)  # one object, nothing else on stdout
    assert set(doc) == {"metrics", "flags"}
    assert all(set(f) == FLAG_KEYS for f in doc["flags"])
    assert any(f["id"] == "r-peak-change" and f["severity"] == "fail" for f in doc["flags"])
    assert 0.65 < doc["metrics"]["r_amplitude_ratio"] < 0.75


def test_limits_file_and_save_folder(run_cli, files, tmp_path):
    limits = tmp_path / "limits.yaml"
    limits.write_text("flag_limits:\n  r-peak-change: off\n  removed-beat-structure: off\n  beat-shape-change: off\n")
    code, out, err = run_cli(
        "assess", files["original"], files["flattened"], "--limits", limits, "--save", tmp_path, "--json"
    )
    doc = json.loads(out)
    assert not [f for f in doc["flags"] if f["id"] in ("r-peak-change", "removed-beat-structure", "beat-shape-change")]
    assert (tmp_path / "assessment.json").exists() and (tmp_path / "beats.npz").exists()
    assert code == (1 if any(f["severity"] == "fail" for f in doc["flags"]) else 0)


def test_no_beats_is_reported_not_crashed(run_cli, files):
    code, out, err = run_cli("assess", files["flat"], files["flat"], "--json")
    doc = json.loads(out)
    assert [f["id"] for f in doc["flags"]] == ["no-beats"]
    assert code == 1


@pytest.mark.parametrize(
    "args, words",
    [
        (("original", "short"), "samples per channel"),
        (("original", "missing"), "no such file"),
    ],
)
def test_bad_input_exits_2_with_one_line(run_cli, files, args, words):
    paths = [files.get(a, files["folder"] / f"{a}.npz") for a in args]
    code, out, err = run_cli("assess", *paths)
    assert code == 2 and out == ""
    assert words in err and err.count("\n") == 1


def test_bad_limits_file_exits_2(run_cli, files, tmp_path):
    bad = tmp_path / "bad.yaml"
    bad.write_text("flag_limits:\n  r-peak-change: {fail: lots}\n")
    code, out, err = run_cli("assess", files["original"], files["faithful"], "--limits", bad)
    assert code == 2 and "must be a number" in err and err.count("\n") == 1


def test_denoise_with_assess_cleans_and_assesses_in_one_pass(run_cli, files, tmp_path):
    out_file = tmp_path / "cleaned.npz"
    json_file = tmp_path / "assessment.json"
    code, out, err = run_cli("denoise", files["original"], out_file, "--assess", "--assess-json", json_file)
    assert code in (0, 1), err
    assert out_file.exists() and "cleaned " in out and "result:" in out
    doc = json.loads(json_file.read_text())
    assert set(doc) == {"metrics", "flags"}
    assert code == (1 if any(f["severity"] == "fail" for f in doc["flags"]) else 0)


def test_denoise_assess_json_path_checked_before_cleaning(run_cli, files, tmp_path):
    out_file = tmp_path / "never.npz"
    code, out, err = run_cli("denoise", files["original"], out_file, "--assess-json", tmp_path / "report.txt")
    assert code == 2 and ".json" in err and not out_file.exists()
    code, out, err = run_cli("denoise", files["original"], out_file, "--limits", tmp_path / "x.yaml")
    assert code == 2 and "--assess" in err and not out_file.exists()
