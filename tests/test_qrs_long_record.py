"""QRS detection on float32 records: no full-length float64 copy, same beats as in float64.

A day at 250 Hz is 86 MB in float32; a float64 copy of the whole record
would add 173 MB to every assessment (and to every worker of
``tracevet clean``). The detector filters chunk by chunk in float64; the
record itself must reach the chunking step as given.
"""

from __future__ import annotations


import numpy as np

from mitdb import excerpt_mv
from tracevet.assessment import qrs
from tracevet.assessment.qrs import detect_qrs



def _mitdb_mv() -> np.ndarray:
    # MIT-BIH 208 excerpt, 360 Hz, in mV (tests/mitdb.py)
    return excerpt_mv()


def test_float32_record_reaches_the_chunked_filters_without_a_float64_copy(monkeypatch):
    x = np.tile(_mitdb_mv(), 4).astype(np.float32)
    seen = []
    original_candidates = qrs._candidates

    def spy(signal, fs, refractory):
        seen.append(signal)
        return original_candidates(signal, fs, refractory)

    monkeypatch.setattr(qrs, "_candidates", spy)
    peaks32 = detect_qrs(x, 360.0)
    assert len(seen) == 1 and seen[0].dtype == np.float32 and np.shares_memory(seen[0], x)
    # float32 -> float64 is exact, so the beats are the same as from a float64 copy
    np.testing.assert_array_equal(peaks32, detect_qrs(x.astype(np.float64), 360.0))
    assert peaks32.size > 0


def test_non_finite_samples_are_replaced_in_a_copy_never_in_the_input():
    x = _mitdb_mv()[: 360 * 60].astype(np.float32)
    x[5000:5010] = np.nan
    before = x.copy()
    peaks = detect_qrs(x, 360.0)
    np.testing.assert_array_equal(x, before)  # NaNs still there: the input is never changed
    # documented behaviour: non-finite samples count as the median of the others
    filled = before.astype(np.float64)
    filled[5000:5010] = np.median(filled[np.isfinite(filled)])
    np.testing.assert_array_equal(peaks, detect_qrs(filled, 360.0))
    assert peaks.size > 0
