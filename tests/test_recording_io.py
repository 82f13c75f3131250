"""Recordings: readers and writers for CSV, NPY, NPZ and EDF, and their refusals."""

from __future__ import annotations

from datetime import datetime

import numpy as np
import pytest

import mitdb
from tracevet.errors import InputError
from tracevet.recording import Recording, read_recording, write_recording



def _rec(n=1000, ch=2, fs=250.0, units="mV", kind="ecg"):
    rng = np.random.default_rng(1)
    return Recording(
        samples=rng.normal(size=(n, ch)),
        fs=fs,
        channels=tuple(f"lead{i}" for i in range(ch)),
        units=units,
        kind=kind,
        start_time=datetime(2026, 3, 4, 5, 6, 7),
        source="mem",
    )


@pytest.mark.parametrize("suffix", [".csv", ".npz", ".edf"])
def test_round_trip_keeps_samples_rate_and_metadata(tmp_path, suffix):
    rec = _rec()
    path = tmp_path / f"r{suffix}"
    write_recording(rec, path)
    back = read_recording(path)
    assert back.fs == pytest.approx(250.0)
    assert back.channels == rec.channels
    assert back.units == "mV"
    assert back.n_samples == rec.n_samples
    # EDF stores 16-bit integers: error at most half a quantisation step of the range.
    tol = 1e-8 if suffix != ".edf" else (rec.samples.max() - rec.samples.min()) / 65535
    np.testing.assert_allclose(back.samples, rec.samples, atol=tol)
    assert back.start_time == rec.start_time


def test_npy_needs_rate_and_keeps_float32(tmp_path):
    path = tmp_path / "x.npy"
    np.save(path, np.arange(100, dtype=np.float32))
    with pytest.raises(InputError, match="pass --fs"):
        read_recording(path)
    rec = read_recording(path, fs=500)
    assert rec.samples.dtype == np.float32 and rec.samples.shape == (100, 1)


def test_csv_time_column_gives_rate(tmp_path):
    path = tmp_path / "t.csv"
    t = np.arange(720) / 360.0
    lines = ["time,ECG"] + [f"{ti:.3f},{np.sin(ti):.5f}" for ti in t]  # times rounded to 1 ms
    path.write_text("\n".join(lines))
    rec = read_recording(path)
    assert rec.fs == pytest.approx(360.0, rel=1e-4)
    assert rec.channels == ("ECG",)


def test_shipped_excerpt_matches_documented_statistics():
    # Source: SciPy docstring of scipy.misc.electrocardiogram (MIT-BIH record 208 excerpt):
    # mean -0.16510875 mV, standard deviation 0.5992473991177294 mV; mV = (adu - 1024) / 200.
    mv = mitdb.excerpt_mv()
    assert mv.size == 108000
    assert mv.mean() == pytest.approx(-0.16510875, rel=1e-9)
    assert mv.std() == pytest.approx(0.5992473991177294, rel=1e-12)


@pytest.mark.parametrize(
    "name, content, message",
    [
        ("empty.csv", "", "empty file"),
        ("header.csv", "time,ECG\n", "header only"),
        ("text.csv", "time,ECG\n0,1\n0.004,abc\n", "malformed data"),
        ("ragged.csv", "time,ECG\n0,1\n0.004,2,3\n", "malformed data"),
        ("nan.csv", "time,ECG\n0,1\n0.004,nan\n", "non-finite"),
        ("uneven.csv", "time,ECG\n0,1\n0.004,2\n0.020,3\n0.024,4\n", "not uniformly spaced"),
        ("backwards.csv", "time,ECG\n0,1\n0.004,2\n0.002,3\n", "does not increase"),
        ("norate.csv", "ECG\n1\n2\n", "pass --fs"),
        ("bad.edf", "0       this is not an edf header" * 3, "not a valid EDF"),
        ("short.edf", "0", "not a valid EDF"),
        ("thing.xyz", "1", "cannot read"),
    ],
)
def test_bad_files_give_one_line_errors_naming_the_file(tmp_path, name, content, message):
    path = tmp_path / name
    path.write_text(content)
    before = path.read_bytes()
    with pytest.raises(InputError) as info:
        read_recording(path)
    text = str(info.value)
    assert message in text and name in text and "\n" not in text
    assert path.read_bytes() == before  # the input is never changed


def test_npz_refuses_pickled_objects(tmp_path):
    path = tmp_path / "evil.npz"
    np.savez(path, signal=np.array([object(), object()], dtype=object), fs=250)
    with pytest.raises(InputError, match="evil.npz"):
        read_recording(path)


def test_npy_nan_and_bad_rate(tmp_path):
    path = tmp_path / "n.npy"
    np.save(path, np.array([0.0, np.nan, 1.0]))
    with pytest.raises(InputError, match="non-finite"):
        read_recording(path, fs=250)
    np.save(path, np.zeros(10))
    with pytest.raises(InputError, match="positive"):
        read_recording(path, fs=-5.0)


def test_truncated_edf_is_refused(tmp_path):
    path = tmp_path / "r.edf"
    write_recording(_rec(n=1000, ch=1), path)
    data = path.read_bytes()
    path.write_bytes(data[:-100])
    with pytest.raises(InputError, match="truncated EDF"):
        read_recording(path)


def test_edf_physical_units_applied(tmp_path):
    # EDF specification (Kemp et al. 1992): physical = (digital - dmin) * (pmax - pmin) / (dmax - dmin) + pmin.
    # Hand-built file: one signal, 4 samples per 1-s record, dmin=-100, dmax=100, pmin=-1, pmax=1 (mV).
    def f(text, width):
        return text.encode().ljust(width)

    header = (
        f("0", 8) + f("X", 80) + f("X", 80) + f("01.02.03", 8) + f("04.05.06", 8) + f("512", 8) + f("", 44)
        + f("2", 8) + f("1", 8) + f("1", 4)
        + f("ECG I", 16) + f("", 80) + f("mV", 8) + f("-1", 8) + f("1", 8) + f("-100", 8) + f("100", 8)
        + f("", 80) + f("4", 8) + f("", 32)
    )
    body = np.array([-100, 0, 50, 100, 10, 20, 30, 40], dtype="<i2").tobytes()
    path = tmp_path / "hand.edf"
    path.write_bytes(header + body)
    rec = read_recording(path)
    np.testing.assert_allclose(rec.samples[:, 0], [-1, 0, 0.5, 1, 0.1, 0.2, 0.3, 0.4])
    assert rec.fs == 4 and rec.units == "mV" and rec.kind == "ecg"
    assert rec.start_time == datetime(2003, 2, 1, 4, 5, 6)


def test_write_failure_leaves_no_file(tmp_path):
    rec = Recording(samples=np.zeros((10, 1)), fs=100, channels=("a,b",))
    with pytest.raises(InputError):
        write_recording(rec, tmp_path / "out.csv")
    assert list(tmp_path.iterdir()) == []


def test_streamed_npz_is_identical_to_the_in_memory_bytes(tmp_path):
    from tracevet.recording.io import format_recording

    rec = _rec(n=5000, ch=3)
    write_recording(rec, tmp_path / "a.npz")
    back = read_recording(tmp_path / "a.npz")
    np.testing.assert_array_equal(back.samples, rec.samples)
    assert back.channels == rec.channels and back.kind == rec.kind
    (tmp_path / "b.npz").write_bytes(format_recording(rec, ".npz"))
    np.testing.assert_array_equal(read_recording(tmp_path / "b.npz").samples, back.samples)


def test_unwritable_folder_gives_one_line_and_leaves_nothing(tmp_path):
    import os

    folder = tmp_path / "locked"
    folder.mkdir()
    os.chmod(folder, 0o500)
    try:
        if os.access(folder, os.W_OK):
            pytest.skip("running as a user that can write anywhere (root)")
        with pytest.raises(InputError, match="cannot write"):
            write_recording(_rec(), folder / "out.npz")
        assert list(folder.iterdir()) == []
    finally:
        os.chmod(folder, 0o700)
