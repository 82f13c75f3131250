"""Plot summaries of a long multi-channel record: no full-length copy of any channel is kept.

A 2-hour, 2-channel record at 250 Hz (1.8 million samples per channel) is
the small stand-in for a day-long one (benchmarks/bench_day_long.py measures
the real thing). Each channel of a ``(samples, channels)`` array is a strided
column; the pyramids must keep that view, not a contiguous float32 copy per
trace (a day of 2 channels at 500 Hz would otherwise hold 4 extra copies of
86 MB), and must still reduce exactly as over a contiguous copy.
"""

from __future__ import annotations

import numpy as np

from tracevet.app.queue_view import RunData, pyramids_for
from tracevet.recording import Recording

FS = 250.0


def _two_channel_record(seconds: float) -> tuple[Recording, Recording]:
    rng = np.random.default_rng(5)
    n = int(seconds * FS)
    original = rng.normal(size=(n, 2)).astype(np.float32)
    cleaned = (original * np.float32(0.8)).astype(np.float32)
    return (Recording(original, FS, ("II", "V5"), units="mV", kind="ecg"),
            Recording(cleaned, FS, ("II", "V5"), units="mV", kind="ecg"))


def test_pyramids_of_a_two_hour_two_channel_record_share_the_recording_memory():
    original, cleaned = _two_channel_record(2 * 3600)
    run = RunData(info=None, cleaned=cleaned, assessment=None)
    for channel in (0, 1):
        traces = pyramids_for(run, original, channel)
        assert np.shares_memory(traces.original.data, original.samples)
        assert np.shares_memory(traces.cleaned.data, cleaned.samples)
        # exactness against plain numpy min/max over the same bins of a contiguous copy
        column = np.ascontiguousarray(original.samples[:, channel])
        start, stop, bins = 123_457, 1_500_000, 97
        envelope = traces.original.reduce(start, stop, bins)
        edges = envelope.bin_edges
        expected_min = np.minimum.reduceat(column[: edges[-1]], edges[:-1])
        expected_max = np.maximum.reduceat(column[: edges[-1]], edges[:-1])
        np.testing.assert_array_equal(envelope.bin_min, expected_min)
        np.testing.assert_array_equal(envelope.bin_max, expected_max)
        # the removed trace is original - cleaned (its own, new array)
        removed = traces.removed.reduce(0, column.size, 50)
        diff = column - np.ascontiguousarray(cleaned.samples[:, channel])
        assert removed.values.max() == diff.max() and removed.values.min() == diff.min()
