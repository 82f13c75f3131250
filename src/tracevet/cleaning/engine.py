"""The cleaning engine: filters, then wavelet shrinkage, per channel, in blocks.

For each channel independently:

1. zero-phase baseline removal and mains notches (:mod:`tracevet.cleaning.filters`),
   if switched on;
2. thresholds: the noise level and one threshold per detail level are
   estimated from the decimated detail coefficients of the whole (filtered)
   channel (:mod:`tracevet.cleaning.level_statistics`,
   :mod:`tracevet.cleaning.thresholds`, :mod:`tracevet.cleaning.noise`);
3. shrinkage with the DWT or SWT (:mod:`tracevet.cleaning.shrinkage`).

Long records are processed in overlapping blocks (:mod:`tracevet.cleaning.blocks`)
with overlaps wide enough that the joins cannot be seen: the result equals
whole-record processing to float rounding, while memory stays bounded. The
statistics behind the thresholds always cover the whole record (see
:mod:`tracevet.cleaning.level_statistics`).

Float32 input is processed in float32; anything else in float64.
"""

from __future__ import annotations

from typing import Callable

import numpy as np
import pywt

from tracevet.cleaning import baseline, filters, shrinkage
from tracevet.cleaning.blocks import DEFAULT_BLOCK_SAMPLES, plan_blocks, process_inplace
from tracevet.cleaning.level_statistics import LevelStatistics, level_thresholds, levels_needed, wavelet_overlap
from tracevet.cleaning.levels import resolve_level
from tracevet.cleaning.resolve import CleaningReport, resolve_settings, resolve_settings_for
from tracevet.cleaning.settings import CleaningSettings
from tracevet.errors import SettingsError
from tracevet.recording.model import Recording

Progress = Callable[[float], None] | None


def _work_dtype(x: np.ndarray) -> np.dtype:
    return np.dtype(np.float32) if x.dtype == np.float32 else np.dtype(np.float64)


class _Stages:
    """Turns (stage, block) progress into overall fractions for one channel."""

    def __init__(self, progress: Progress, start: float, width: float, weights: list[float]):
        self.progress, self.start, self.width = progress, start, width
        total = sum(weights) or 1.0
        self.bounds = np.concatenate(([0.0], np.cumsum(weights) / total))

    def report(self, stage: int, fraction: float) -> None:
        if self.progress is None:
            return
        lo, hi = self.bounds[stage], self.bounds[stage + 1]
        self.progress(float(self.start + self.width * (lo + (hi - lo) * min(max(fraction, 0.0), 1.0))))


def _apply_filters(buf: np.ndarray, fs: float, stages: list, block_samples: int, report) -> None:
    for stage in stages:
        align = baseline.block_length(fs) if stage.kind == "median" else 1
        blocks = plan_blocks(buf.shape[0], max(block_samples, 4 * stage.overlap), stage.overlap, align)

        def run_stage(seg, _block, stage=stage):
            return stage.apply(seg, fs)

        def block_done(i, n=len(blocks)):
            report((i + 1) / n)

        process_inplace(buf, blocks, run_stage, after_block=block_done)


def _dwt_single_block(buf: np.ndarray, settings: CleaningSettings, level: int) -> None:
    """Whole channel in one go: one ``wavedec`` serves statistics and shrinkage."""
    n = buf.shape[0]
    coeffs = pywt.wavedec(buf, settings.wavelet, mode=settings.extension, level=level)
    levels = levels_needed(settings, level)
    stats = LevelStatistics(n, levels, settings)
    stats.add(coeffs[:0:-1][:levels], 0, n, 0)
    lams = stats.thresholds(settings, level)
    for j, lam in enumerate(lams, start=1):
        shrinkage.threshold_inplace(coeffs[-j], lam, settings.threshold_mode)
    buf[:] = pywt.waverec(coeffs, settings.wavelet, mode=settings.extension)[:n]


def _swt_single_block(buf: np.ndarray, settings: CleaningSettings, level: int, wavelet) -> None:
    """Whole channel in one go: the SWT's own phase-0 rows give the statistics."""
    n = buf.shape[0]
    levels = levels_needed(settings, level)

    def thresholds_from(phase0: list[np.ndarray], left: int) -> list[float]:
        stats = LevelStatistics(n, levels, settings)
        stats.add(phase0[:levels], 0, n, -left)
        return stats.thresholds(settings, level)

    buf[:] = shrinkage.swt_shrink(buf, wavelet, settings.extension, level, thresholds_from, settings.threshold_mode)


def clean_channel(
    x: np.ndarray,
    fs: float,
    settings: CleaningSettings,
    source: str = "recording",
    progress: Progress = None,
    block_samples: int = DEFAULT_BLOCK_SAMPLES,
    out: np.ndarray | None = None,
) -> np.ndarray:
    """Clean one channel and return it (float32 in, float32 out; else float64).

    Parameters
    ----------
    x : 1-D array
        The channel.
    fs : float
        Sampling rate in Hz.
    settings : CleaningSettings
    source : str
        Named in error messages.
    progress : callable(fraction), optional
        Called with fractions in [0, 1] between stages and blocks; an
        exception it raises stops the cleaning and propagates.
    block_samples : int
        Core length of the blocks long records are processed in.
    out : 1-D array, optional
        Where to write the result (may share memory with nothing else).
    """
    x = np.asarray(x)
    n = x.shape[0]
    level = resolve_level(settings, fs, n, settings.wavelet, source=source)
    dtype = _work_dtype(x)
    if out is None:
        out = np.empty(n, dtype=dtype)
    buf = out
    buf[:] = x
    if settings.mains == "auto":
        settings = resolve_settings_for(x, fs, settings).settings
    filter_stages = filters.stage_filters(fs, settings)
    n_filters = len(filter_stages)
    weights = [1.0] * n_filters + [0.5, 2.0 if settings.transform == "swt" else 1.0]
    stages = _Stages(progress, 0.0, 1.0, weights)
    stages.report(0, 0.0)
    current = [0]

    def filter_report(fraction: float) -> None:
        stages.report(current[0], fraction)
        if fraction >= 1.0:
            current[0] += 1

    _apply_filters(buf, fs, filter_stages, block_samples, filter_report)
    wavelet = shrinkage.as_wavelet(settings.wavelet)
    blocks = plan_blocks(n, block_samples, wavelet_overlap(wavelet, level), 1 << level)
    if len(blocks) == 1:  # one transform serves statistics and shrinkage
        if settings.transform == "dwt":
            _dwt_single_block(buf, settings, level)
        else:
            _swt_single_block(buf, settings, level, wavelet)
        stages.report(n_filters + 1, 1.0)
        return buf
    lams = level_thresholds(buf, settings, level, block_samples)
    stages.report(n_filters, 1.0)
    shrink = shrinkage.swt_shrink if settings.transform == "swt" else shrinkage.dwt_shrink
    process_inplace(
        buf,
        blocks,
        lambda seg, _b: shrink(seg, wavelet, settings.extension, level, lams, settings.threshold_mode),
        after_block=lambda i: stages.report(n_filters + 1, (i + 1) / len(blocks)),
    )
    return buf


def clean(
    recording: Recording,
    settings: CleaningSettings,
    progress: Progress = None,
    block_samples: int = DEFAULT_BLOCK_SAMPLES,
) -> Recording:
    """Clean every channel of ``recording`` independently with ``settings``.

    Returns a new :class:`Recording` with the same shape, dtype (float32
    stays float32), rate, channel names, units, kind and start time.
    ``mains: auto`` is resolved on the record first (:func:`clean_with_report`
    also returns what was resolved and applied).

    Parameters
    ----------
    recording : Recording
    settings : CleaningSettings
    progress : callable(fraction: float), optional
        Called between stages, blocks and channels with the fraction done
        (0 to 1). If it raises, cleaning stops and the exception propagates
        (used to cancel).
    block_samples : int
        Core length of the blocks long records are processed in; the result
        does not depend on it beyond float rounding.

    Raises
    ------
    SettingsError
        The record is too short for the requested level, or a filter does not
        fit the sampling rate; the message names the recording's source.
    """
    return clean_with_report(recording, settings, progress, block_samples)[0]


def clean_with_report(
    recording: Recording,
    settings: CleaningSettings,
    progress: Progress = None,
    block_samples: int = DEFAULT_BLOCK_SAMPLES,
) -> tuple[Recording, CleaningReport]:
    """:func:`clean`, also returning the :class:`CleaningReport`.

    The report's ``settings`` are the settings actually applied (``mains``
    resolved to ``50``, ``60`` or ``off``): record those, and their digest,
    as the run's settings.
    """
    if not isinstance(settings, CleaningSettings):
        raise TypeError("settings must be a CleaningSettings")
    samples = recording.samples
    n, n_channels = samples.shape
    dtype = _work_dtype(samples)
    resolve_level(settings, recording.fs, n, settings.wavelet, source=recording.source)
    report = resolve_settings(recording, settings)
    applied = report.settings
    try:
        filters.stage_filters(recording.fs, applied)
    except SettingsError as exc:
        raise SettingsError(recording.source, f"{exc.source} {exc.problem}") from None
    result = np.empty((n, n_channels), dtype=dtype)
    for c in range(n_channels):
        sub = None
        if progress is not None:
            sub = lambda f, c=c: progress((c + f) / n_channels)  # noqa: E731
        if n_channels == 1:
            clean_channel(
                samples[:, 0], recording.fs, applied, recording.source, sub, block_samples, out=result.reshape(n)
            )
        else:
            result[:, c] = clean_channel(samples[:, c], recording.fs, applied, recording.source, sub, block_samples)
    if progress is not None:
        progress(1.0)
    return recording.with_samples(result), report
