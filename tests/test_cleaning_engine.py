"""Cleaning engine: shape and metadata kept, blockwise equals whole, progress and cancel."""

from __future__ import annotations


import numpy as np
import pytest

from mitdb import excerpt_mv
from tracevet.cleaning import DEFAULT_SETTINGS, CleaningSettings, apply_overrides, clean, resolve_level
from tracevet.errors import InputError, SettingsError
from tracevet.recording import Recording



def _excerpt_mv() -> np.ndarray:
    # MIT-BIH record 208 excerpt in mV (tests/mitdb.py).
    return excerpt_mv()


def _noisy(n_repeat=1, dtype=np.float64, channels=1, seed=3):
    rng = np.random.default_rng(seed)
    x = np.tile(_excerpt_mv(), n_repeat)
    cols = [x + rng.normal(scale=0.05, size=x.size) for _ in range(channels)]
    return Recording(
        np.stack(cols, axis=1).astype(dtype),
        360.0,
        tuple(f"c{i}" for i in range(channels)),
        units="mV",
        kind="ecg",
        source="mem.npz",
    )


def test_clean_keeps_shape_dtype_and_metadata():
    for dtype in (np.float32, np.float64):
        rec = _noisy(dtype=dtype, channels=2)
        out = clean(rec, DEFAULT_SETTINGS)
        assert out.samples.shape == rec.samples.shape and out.samples.dtype == dtype
        assert (out.fs, out.channels, out.units, out.kind, out.source) == (
            rec.fs,
            rec.channels,
            rec.units,
            rec.kind,
            rec.source,
        )
        assert np.isfinite(out.samples).all()
        assert not np.shares_memory(out.samples, rec.samples)


def test_channels_are_cleaned_independently():
    rec = _noisy(channels=2)
    both = clean(rec, DEFAULT_SETTINGS).samples
    single = clean(Recording(rec.samples[:, 1], rec.fs, ("c1",)), DEFAULT_SETTINGS).samples[:, 0]
    np.testing.assert_array_equal(both[:, 1], single)


@pytest.mark.parametrize("transform", ["dwt", "swt"])
@pytest.mark.parametrize("dtype, tol", [(np.float64, 1e-9), (np.float32, 1e-5)])
def test_blockwise_equals_whole_record(transform, dtype, tol):
    # Blocks with overlap must not show at the joins: all stages switched on,
    # several baseline-filter blocks and many shrinkage blocks.
    settings = apply_overrides(DEFAULT_SETTINGS, [f"transform={transform}", "mains=60", "rule=bayes"])
    rec = _noisy(n_repeat=3, dtype=dtype)
    whole = clean(rec, settings, block_samples=1 << 22).samples
    blockwise = clean(rec, settings, block_samples=8192).samples
    assert np.max(np.abs(whole - blockwise)) < tol


def test_input_is_not_modified():
    rec = _noisy()
    before = rec.samples.copy()
    clean(rec, DEFAULT_SETTINGS)
    np.testing.assert_array_equal(rec.samples, before)


def test_progress_is_monotone_and_reaches_one():
    seen = []
    clean(
        _noisy(channels=2), apply_overrides(DEFAULT_SETTINGS, ["mains=60"]), progress=seen.append, block_samples=16384
    )
    assert seen[-1] == 1.0 and len(seen) > 5
    assert all(b >= a for a, b in zip(seen, seen[1:]))
    assert all(0.0 <= f <= 1.0 for f in seen)


def test_progress_exception_cancels():
    class Cancelled(Exception):
        pass

    calls = []

    def stop_half_way(fraction):
        calls.append(fraction)
        if fraction > 0.5:
            raise Cancelled

    with pytest.raises(Cancelled):
        clean(_noisy(channels=2), DEFAULT_SETTINGS, progress=stop_half_way, block_samples=16384)
    assert calls[-1] > 0.5 and calls[-1] < 1.0


def test_too_short_for_level_names_the_source():
    rec = Recording(np.zeros(100), 360.0, ("a",), source="short.csv")
    with pytest.raises(SettingsError, match="too short for level 6") as info:
        clean(rec, apply_overrides(DEFAULT_SETTINGS, ["level=6"]))
    assert info.value.source == "short.csv"
    assert isinstance(info.value, InputError)
    with pytest.raises(SettingsError, match="too short"):
        clean(Recording(np.zeros(5), 360.0, ("a",)), DEFAULT_SETTINGS)


def test_resolve_level_rule():
    # Detail level j covers fs/2^(j+1)..fs/2^j (common practice; reference table for 360 Hz:
    # D4 11.25-22.5 Hz, A4 below 11.25 Hz). auto = deepest level whose band stays >= 10 Hz.
    for fs, expected in [(250.0, 3), (360.0, 4), (500.0, 4), (1000.0, 5), (200.0, 3)]:
        level = resolve_level(DEFAULT_SETTINGS, fs, 10**6, "sym4")
        assert level == expected
        assert fs / 2 ** (level + 1) >= 10.0 > fs / 2 ** (level + 2)
    # auto never goes deeper than the record allows (pywt.dwt_max_level: 64 / 7 -> 3)
    assert resolve_level(DEFAULT_SETTINGS, 1000.0, 64, "sym4") == 3
    assert resolve_level(CleaningSettings(level=7), 360.0, 10**6, "sym4") == 7


def test_constant_record_stays_finite():
    rec = Recording(np.full(4000, 2.5), 250.0, ("a",))
    out = clean(rec, apply_overrides(DEFAULT_SETTINGS, ["baseline=off"])).samples
    np.testing.assert_allclose(out, 2.5, atol=1e-9)
