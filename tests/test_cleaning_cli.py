"""``tracevet denoise``: the script contract (exit codes, one-line errors, nothing written)."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from mitdb import excerpt_mv
from tracevet.cleaning import DEFAULT_SETTINGS, SETTING_CHOICES, SETTING_HELP, apply_overrides, clean
from tracevet.recording import Recording, read_recording, write_recording



def _excerpt(seconds: float = 20.0) -> np.ndarray:
    # MIT-BIH record 208 excerpt in mV (tests/mitdb.py).
    return excerpt_mv(seconds)


@pytest.mark.parametrize("suffix", [".npy", ".csv", ".npz", ".edf"])
def test_denoise_writes_output_equal_to_the_engine(tmp_path, run_cli, suffix):
    src = tmp_path / "in.npz"
    rec = Recording(_excerpt(), 360.0, ("MLII",), units="mV", kind="ecg")
    write_recording(rec, src)
    out = tmp_path / f"out{suffix}"
    code, stdout, stderr = run_cli("denoise", src, out, "--set", "mains=60")
    assert code == 0, stderr
    assert stderr == "" and "cleaned" in stdout
    back = read_recording(out, fs=360.0 if suffix == ".npy" else None)
    expected = clean(rec, apply_overrides(DEFAULT_SETTINGS, ["mains=60"])).samples
    # EDF stores 16-bit integers: half a step of the written range.
    tol = 1e-6 if suffix != ".edf" else (expected.max() - expected.min()) / 65535
    np.testing.assert_allclose(back.samples, expected, atol=tol)


def test_denoise_profile_and_set_and_show_settings(tmp_path, run_cli):
    profile = tmp_path / "study.yaml"
    profile.write_text("transform: dwt\nrule: sure\nmains: 50\n")
    code, stdout, _ = run_cli("denoise", "--profile", profile, "--set", "level=3", "--show-settings")
    assert code == 0
    settings = apply_overrides(DEFAULT_SETTINGS, ["transform=dwt", "rule=sure", "mains=50", "level=3"])
    assert stdout == settings.to_yaml() + f"# digest: {settings.digest()}\n"


def test_denoise_help_explains_every_setting(run_cli):
    code, stdout, _ = run_cli("denoise", "--help")
    assert code == 0
    for option in ("--fs", "--kind", "--units", "--profile", "--set", "--show-settings", "INPUT", "OUTPUT"):
        assert option in stdout
    for name in SETTING_HELP:
        assert f"{name} (default: {DEFAULT_SETTINGS.to_dict()[name]})" in stdout
    for name in ("rule", "threshold_mode", "transform", "extension", "mains", "baseline", "noise_estimate"):
        assert "choices: " + ", ".join(SETTING_CHOICES[name]) in stdout
    assert "not a medical device" in stdout
    code, stdout, _ = run_cli("--help")
    assert code == 0 and "denoise" in stdout


def _write(path: Path, content) -> Path:
    if isinstance(content, bytes):
        path.write_bytes(content)
    elif isinstance(content, np.ndarray):
        np.save(path, content)
    else:
        path.write_text(content)
    return path


GOOD_CSV = "time,ECG\n" + "\n".join(f"{i / 250:.4f},{np.sin(i / 10):.4f}" for i in range(2000)) + "\n"

BAD_INPUTS = [
    # (name, file name, content, extra args, expected fragment of the message)
    ("empty file", "empty.csv", "", [], "empty"),
    ("header only", "header.csv", "time,ECG\n", [], "header only"),
    ("non-numeric cell", "text.csv", "time,ECG\n0,1\n0.004,abc\n0.008,2\n", [], "abc"),
    ("ragged rows", "ragged.csv", "time,ECG,V1\n0,1,2\n0.004,1\n0.008,1,2\n", [], "number of columns"),
    ("NaN sample", "nan.npy", np.array([0.0, 1.0, np.nan] * 400), ["--fs", "250"], "NaN"),
    ("inf sample", "inf.csv", "ECG\n1\ninf\n2\n", ["--fs", "250"], "inf"),
    ("non-uniform time", "uneven.csv", "time,ECG\n0,1\n0.004,1\n0.008,1\n0.020,1\n0.024,1\n", [], "time"),
    ("missing rate", "norate.npy", np.zeros(2000), [], "--fs"),
    ("zero rate", "zero.npy", np.zeros(2000), ["--fs", "0"], "sampling rate"),
    ("negative rate", "neg.npy", np.zeros(2000), ["--fs", "-250"], "sampling rate"),
    ("too short for level", "short.csv", GOOD_CSV, ["--set", "level=9"], "too short for level 9"),
    ("too short for any level", "tiny.npy", np.zeros(4), ["--fs", "250"], "too short"),
    ("unknown wavelet", "w.csv", GOOD_CSV, ["--set", "wavelet=db99"], "unknown wavelet 'db99'"),
    ("unknown rule", "r.csv", GOOD_CSV, ["--set", "rule=fancy"], "unknown rule 'fancy'"),
    ("unknown setting", "s.csv", GOOD_CSV, ["--set", "speed=9"], "unknown setting 'speed'"),
    ("override without value", "o.csv", GOOD_CSV, ["--set", "rule"], "KEY=VALUE"),
    ("unreadable EDF", "broken.edf", b"0       garbage that is not an EDF header", [], "broken.edf"),
    (
        "baseline cutoff above Nyquist",
        "b.npy",
        np.zeros(4000),
        ["--fs", "8", "--set", "baseline=butterworth", "--set", "baseline_cutoff_hz=5"],
        "half the sampling rate",
    ),
]


@pytest.mark.parametrize("name, filename, content, extra, fragment", BAD_INPUTS, ids=[b[0] for b in BAD_INPUTS])
def test_bad_input_exit_2_one_line_nothing_written(tmp_path, run_cli, name, filename, content, extra, fragment):
    src = _write(tmp_path / filename, content)
    before = src.read_bytes()
    out = tmp_path / "out.npz"
    code, stdout, stderr = run_cli("denoise", src, out, *extra)
    assert code == 2, (name, stderr)
    assert stderr.count("\n") == 1 and stderr.startswith("tracevet"), stderr
    assert fragment in stderr, stderr
    assert "Traceback" not in stderr
    assert not out.exists()
    assert src.read_bytes() == before
    assert sorted(p.name for p in tmp_path.iterdir()) == [filename]  # no temporary files left


def test_unsafe_yaml_profile_is_refused_in_one_line(tmp_path, run_cli_process):
    src = _write(tmp_path / "in.csv", GOOD_CSV)
    marker = tmp_path / "pwned"
    profile = _write(tmp_path / "evil.yaml", f"!!python/object/apply:os.system ['touch {marker}']\n")
    out = tmp_path / "out.csv"
    code, stdout, stderr = run_cli_process("denoise", src, out, "--profile", profile)
    assert code == 2
    assert stderr.count("\n") == 1 and "evil.yaml" in stderr and "unsafe or unknown YAML tag" in stderr
    assert not marker.exists() and not out.exists()


def test_output_errors_are_caught_before_any_work(tmp_path, run_cli):
    src = _write(tmp_path / "in.csv", GOOD_CSV)
    code, _, stderr = run_cli("denoise", src, tmp_path / "out.txt")
    assert code == 2 and "cannot write '.txt'" in stderr
    code, _, stderr = run_cli("denoise", src, tmp_path / "missing" / "out.csv")
    assert code == 2 and "folder does not exist" in stderr
    code, _, stderr = run_cli("denoise", src, src)
    assert code == 2 and "never overwrites its input" in stderr
    assert src.read_text() == GOOD_CSV
    code, _, stderr = run_cli("denoise", tmp_path / "nothere.csv", tmp_path / "o.csv")
    assert code == 2 and "no such file" in stderr
    code, _, stderr = run_cli("denoise", src)
    assert code == 2 and "needs INPUT and OUTPUT" in stderr


def test_denoise_in_a_child_process(tmp_path, run_cli_process):
    src = _write(tmp_path / "in.csv", GOOD_CSV)
    out = tmp_path / "out.npy"
    code, stdout, stderr = run_cli_process("denoise", src, out, "--kind", "ecg", "--units", "mV")
    assert code == 0, stderr
    assert np.load(out).shape == (2000,)
    code, _, stderr = run_cli_process("denoise", src, tmp_path / "x.npz", "--set", "level=nine")
    assert code == 2 and stderr.count("\n") == 1 and "level must be" in stderr
