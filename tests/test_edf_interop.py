"""EDF written by tracevet, read by an independent EDF reader, and the other way round.

The independent reader is pyEDFlib (PyPI ``pyedflib``), a Python wrapper around
Teunis van Beelen's C library EDFlib, which checks a file against the EDF and
EDF+ specifications (Kemp et al. 1992; Kemp & Olivan 2003) and refuses files
that break them, such as an ``EDF+C`` header without an ``EDF Annotations``
signal.
"""

from __future__ import annotations

from datetime import datetime

import numpy as np
import pyedflib
import pytest

from tracevet.recording import Recording
from tracevet.recording.io import read_recording, write_recording


def _read_with_pyedflib(path):
    reader = pyedflib.EdfReader(str(path))
    try:
        n = reader.signals_in_file
        return {
            "filetype": reader.filetype,
            "labels": reader.getSignalLabels(),
            "rates": [reader.getSampleFrequency(i) for i in range(n)],
            "units": [reader.getPhysicalDimension(i) for i in range(n)],
            "start": reader.getStartdatetime(),
            "signals": [reader.readSignal(i) for i in range(n)],
        }
    finally:
        reader.close()


def _ecg_like(n: int, channels: int, fs: float) -> np.ndarray:
    t = np.arange(n) / fs
    rng = np.random.default_rng(3)
    beats = np.exp(-(((t % 0.8) - 0.4) ** 2) / (2 * 0.01**2))  # one narrow peak every 0.8 s
    return np.column_stack([(1.0 + 0.2 * c) * beats + 0.05 * rng.standard_normal(n) - 0.3 for c in range(channels)])


@pytest.mark.parametrize(
    "fs, n, channels",
    [
        (250.0, 250 * 8, 1),  # 1 s data records
        (360.0, 360 * 7 + 180, 3),  # 0.5 s data records (7.5 s at 360 Hz)
        (1000.0, 1000 * 3, 2),
    ],
)
def test_written_edf_is_plain_edf_that_pyedflib_reads(tmp_path, fs, n, channels):
    x = _ecg_like(n, channels, fs)
    names = tuple(f"ECG {lead}" for lead in ("I", "II", "III")[:channels])
    start = datetime(2024, 5, 17, 9, 30, 5)
    path = tmp_path / "out.edf"
    write_recording(Recording(x, fs, names, "mV", "ecg", start_time=start), path)
    # The header's reserved field is blank: plain EDF, not EDF+ (which needs an annotation signal).
    assert path.read_bytes()[192:236] == b" " * 44
    got = _read_with_pyedflib(path)
    assert got["filetype"] == pyedflib.FILETYPE_EDF
    assert got["labels"] == list(names)
    assert got["rates"] == [fs] * channels
    assert got["units"] == ["mV"] * channels
    assert got["start"] == start
    for c in range(channels):
        # 16-bit samples over the channel's range: one quantisation step is range / 65535 (EDF: Kemp et al. 1992).
        step = (x[:, c].max() - x[:, c].min()) / 65535
        assert got["signals"][c].shape == (n,)
        np.testing.assert_allclose(got["signals"][c], x[:, c], atol=step)


def test_hostile_channel_names_still_give_a_file_pyedflib_accepts(tmp_path):
    # Labels with control characters and non-ASCII letters become printable ASCII ('?'), as EDF requires.
    x = _ecg_like(500, 2, 250.0)
    path = tmp_path / "names.edf"
    write_recording(Recording(x, 250.0, ("\x1b[31mred", "Ableitung Ü"), "mV", "ecg"), path)
    got = _read_with_pyedflib(path)
    assert got["labels"] == ["?[31mred", "Ableitung ?"]


# Older pyEDFlib releases (0.1.38 and earlier at least) warn about their own internal use of 'sample_rate'.
@pytest.mark.filterwarnings("ignore:`sample_rate` is deprecated:DeprecationWarning")
def test_edf_plus_written_by_pyedflib_is_read_by_tracevet(tmp_path):
    # An EDF+C file with its 'EDF Annotations' signal, written by EDFlib through pyEDFlib:
    # tracevet reads the ordinary signals and skips the annotation signal.
    fs, n = 200, 200 * 6
    x = _ecg_like(n, 2, fs)
    path = tmp_path / "plus.edf"
    writer = pyedflib.EdfWriter(str(path), 2, file_type=pyedflib.FILETYPE_EDFPLUS)
    try:
        headers = []
        for name in ("ECG V1", "ECG V2"):
            headers.append(
                {
                    "label": name,
                    "dimension": "mV",
                    "sample_frequency": fs,
                    "physical_min": -5.0,
                    "physical_max": 5.0,
                    "digital_min": -32768,
                    "digital_max": 32767,
                    "transducer": "",
                    "prefilter": "",
                }
            )
        writer.setSignalHeaders(headers)
        writer.writeAnnotation(1.0, -1, "marker")
        writer.writeSamples([x[:, 0].copy(), x[:, 1].copy()])
    finally:
        writer.close()
    assert path.read_bytes()[192:197] == b"EDF+C"
    assert b"EDF Annotations" in path.read_bytes()[:256 * 4]
    rec = read_recording(path)
    assert rec.channels == ("ECG V1", "ECG V2")
    assert rec.fs == pytest.approx(fs)
    assert rec.units == "mV"
    assert rec.n_samples == n
    np.testing.assert_allclose(rec.samples, x, atol=10.0 / 65535)
