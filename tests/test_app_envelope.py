"""Min/max envelope reduction: exactness and preservation of local extremes."""

from __future__ import annotations

import numpy as np
from hypothesis import given, settings, strategies as st
from hypothesis.extra.numpy import arrays

from tracevet.app.envelope import MinMaxPyramid, reduce_window

finite = st.floats(-1e4, 1e4, allow_nan=False, allow_infinity=False, width=32)


@st.composite
def traces_and_windows(draw):
    data = draw(arrays(np.float32, st.integers(1, 4000), elements=finite))
    n = data.size
    start = draw(st.integers(0, n - 1))
    stop = draw(st.integers(start + 1, n))
    n_bins = draw(st.integers(1, 120))
    factor = draw(st.integers(2, 16))
    return data, start, stop, n_bins, factor


def _local_extrema(x: np.ndarray, start: int, stop: int):
    """Indices in [start, stop) that are >= (or <=) both neighbours inside the window."""
    w = x[start:stop]
    if w.size < 3:
        return np.arange(start, stop), np.arange(start, stop)
    inner = np.arange(1, w.size - 1)
    is_max = (w[inner] >= w[inner - 1]) & (w[inner] >= w[inner + 1])
    is_min = (w[inner] <= w[inner - 1]) & (w[inner] <= w[inner + 1])
    return start + inner[is_max], start + inner[is_min]


@settings(max_examples=200, deadline=None)
@given(traces_and_windows())
def test_reduction_keeps_every_local_maximum_and_minimum_of_the_window(case):
    data, start, stop, n_bins, factor = case
    env = MinMaxPyramid(data, factor=factor).reduce(start, stop, n_bins)
    edges = env.bin_edges
    assert edges[0] <= start and edges[-1] >= stop
    local_max, local_min = _local_extrema(data, start, stop)
    for indices, bound, kept in ((local_max, env.bin_max, "max"), (local_min, env.bin_min, "min")):
        bins = np.searchsorted(edges, indices, side="right") - 1
        for i, b in zip(indices, bins):
            in_bin = (env.positions >= edges[b]) & (env.positions < edges[b + 1])
            drawn = env.values[in_bin]
            # the drawn column reaches (or passes) every local extreme: nothing is clipped
            if kept == "max":
                assert drawn.max() >= data[i]
            else:
                assert drawn.min() <= data[i]
            # an extreme that is the largest (smallest) of its bin is drawn at its exact value
            if data[i] == bound[b]:
                assert data[i] in drawn


@settings(max_examples=200, deadline=None)
@given(traces_and_windows())
def test_reduction_matches_brute_force_min_max_per_bin(case):
    data, start, stop, n_bins, factor = case
    env = MinMaxPyramid(data, factor=factor).reduce(start, stop, n_bins)
    assert env.positions.size <= 2 * n_bins
    assert np.all(np.diff(env.positions) > 0)
    np.testing.assert_array_equal(env.values, data[env.positions])
    edges = env.bin_edges
    brute_min = np.array([data[a:b].min() for a, b in zip(edges[:-1], edges[1:])])
    brute_max = np.array([data[a:b].max() for a, b in zip(edges[:-1], edges[1:])])
    np.testing.assert_array_equal(env.bin_min, brute_min)
    np.testing.assert_array_equal(env.bin_max, brute_max)
    # bins never reach further than one bin beyond the requested window
    if stop - start > 2 * n_bins:
        assert start - edges[0] < (stop - start) / n_bins
        assert edges[-1] - stop < (stop - start) / n_bins


def test_r_peaks_survive_a_whole_day_view():
    # A spike train (one narrow peak per 0.8 s at 250 Hz) in noise, 2 hours long, shown on 160 bins:
    # every bin holding a spike draws it at full height.
    rng = np.random.default_rng(1)
    n = 250 * 7200  # 2 hours at 250 Hz
    x = (0.05 * rng.standard_normal(n)).astype(np.float32)
    peaks = np.arange(100, n, 200)
    x[peaks] = 1.0 + 0.1 * rng.random(peaks.size).astype(np.float32)
    env = MinMaxPyramid(x).reduce(0, n, 160)
    assert env.bin_max.min() >= 1.0
    np.testing.assert_array_equal(env.values, x[env.positions])


def test_short_window_is_returned_whole():
    x = np.arange(10, dtype=np.float32)
    env = reduce_window(x, 2, 8, 5)
    np.testing.assert_array_equal(env.positions, np.arange(2, 8))
    np.testing.assert_array_equal(env.values, x[2:8])
