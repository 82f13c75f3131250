"""The cleaning engine: filters, then wavelet shrinkage, per channel, in blocks.

For each channel independently:

1. zero-phase baseline removal and mains notches (:mod:`tracevet.cleaning.filters`),
   if switched on;
2. thresholds: the noise level and one threshold per detail level are
   estimated from the decimated detail coefficients of the whole (filtered)
   channel (:mod:`tracevet.cleaning.thresholds`, :mod:`tracevet.cleaning.noise`);
3. shrinkage with the DWT or SWT (:mod:`tracevet.cleaning.shrinkage`).

Long records are processed in overlapping blocks (:mod:`tracevet.cleaning.blocks`)
with overlaps wide enough that the joins cannot be seen: the result equals
whole-record processing to float rounding, while memory stays bounded. The
statistics behind the thresholds always cover the whole record: every
coefficient of a level when the level has at most ``STATS_MAX_COEFFS``
coefficients, otherwise an evenly spaced subsample of that many.

Float32 input is processed in float32; anything else in float64.
"""

from __future__ import annotations

import math
from typing import Callable

import numpy as np
import pywt

from tracevet.cleaning import filters, shrinkage, thresholds
from tracevet.cleaning.blocks import DEFAULT_BLOCK_SAMPLES, plan_blocks, process_inplace
from tracevet.cleaning.levels import resolve_level
from tracevet.cleaning.noise import level_sigmas
from tracevet.cleaning.settings import CleaningSettings
from tracevet.errors import SettingsError
from tracevet.recording.model import Recording

Progress = Callable[[float], None] | None

# Statistics for the thresholds use at most this many coefficients per level.
STATS_MAX_COEFFS = 1 << 21
# SURE and hybrid sort at most this many of them (evenly spaced).
SURE_MAX_COEFFS = 1 << 16


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


def _apply_filters(buf: np.ndarray, fs: float, settings: CleaningSettings, block_samples: int, report) -> None:
    stages = filters.stage_filters(fs, settings)
    for sos, lowest in stages:
        overlap = filters.settle_samples(fs, lowest)
        blocks = plan_blocks(buf.shape[0], max(block_samples, 4 * overlap), overlap)
        process_inplace(
            buf,
            blocks,
            lambda seg, _b, sos=sos, lowest=lowest: filters.zero_phase(seg, sos, fs, lowest),
            after_block=lambda i, n=len(blocks): report((i + 1) / n),
        )


def _wavelet_overlap(wavelet: str, level: int) -> int:
    return max(shrinkage.swt_reach(wavelet, level), 2 * shrinkage.as_wavelet(wavelet).dec_len * (1 << level))


def _levels_needed(settings: CleaningSettings, level: int) -> int:
    """How many detail levels the threshold statistics need (finest first)."""
    if settings.rule in ("universal", "minimax") and settings.noise_estimate == "finest":
        return 1
    return level


class _LevelStatistics:
    """Evenly spaced coefficient magnitudes of each detail level of the whole channel.

    A level keeps up to ``STATS_MAX_COEFFS`` magnitudes when its median or
    mean square is needed (the finest level, every level for ``per_level``
    noise or BayesShrink), otherwise up to ``SURE_MAX_COEFFS`` (all SURE and
    the sparsity test need). The positions depend only on the record length,
    never on the blocks.
    """

    def __init__(self, n: int, levels: int, settings: CleaningSettings):
        self.n = n
        self.totals = [max(1, n >> j) for j in range(1, levels + 1)]
        full = [j == 1 or settings.noise_estimate == "per_level" or settings.rule == "bayes" for j in range(1, levels + 1)]
        caps = [STATS_MAX_COEFFS if f else SURE_MAX_COEFFS for f in full]
        self.strides = [max(1, math.ceil(t / cap)) for t, cap in zip(self.totals, caps)]
        self.parts: list[list[np.ndarray]] = [[] for _ in range(levels)]
        self.want_peaks = settings.rule == "bayes"
        self.peaks = [0.0] * levels

    def add(self, details: list[np.ndarray], core_start: int, core_stop: int, origin: int) -> None:
        """Take the coefficients of samples ``[core_start, core_stop)`` from one block.

        ``details`` (finest first) come from a decimated transform of samples
        starting at ``origin`` (a multiple of ``2^level``, negative when the
        segment was extended on the left), so coefficient ``k`` of level ``j``
        sits at record position ``origin + k 2^j``.
        """
        for j in range(1, len(self.parts) + 1):
            d = details[j - 1]
            lo = (core_start - origin) >> j
            hi = min(d.shape[0], (core_stop - origin) >> j)
            if hi <= lo:
                continue
            core = d[lo:hi]
            if self.want_peaks:
                self.peaks[j - 1] = max(self.peaks[j - 1], float(np.max(np.abs(core))))
            stride = self.strides[j - 1]
            first = (-(lo + (origin >> j))) % stride
            self.parts[j - 1].append(np.abs(core[first::stride]))

    def thresholds(self, settings: CleaningSettings, level: int) -> list[float]:
        """Thresholds in signal units for detail levels 1..level (finest first)."""
        mags = [(p[0] if len(p) == 1 else np.concatenate(p)) if p else np.zeros(1, dtype=np.float32) for p in self.parts]
        # The magnitudes may be reordered in place only when no later rule needs them.
        reorder = settings.rule in ("universal", "minimax")
        sigmas = level_sigmas(mags, settings.noise_estimate, magnitudes=reorder)
        if len(sigmas) < level:  # finest estimate for every level
            sigmas = sigmas + [sigmas[0]] * (level - len(sigmas))
        n = self.n
        lams = []
        for j in range(1, level + 1):
            sigma = sigmas[j - 1]
            if sigma <= 0:
                lams.append(0.0)
            elif settings.rule == "universal":
                lams.append(thresholds.universal_threshold(n, sigma))
            elif settings.rule == "minimax":
                lams.append(sigma * thresholds.minimax_threshold(n))
            elif settings.rule == "bayes":
                lams.append(thresholds.bayes_threshold(mags[j - 1], sigma, max_abs=self.peaks[j - 1]))
            else:
                d = mags[j - 1]
                if d.size > SURE_MAX_COEFFS:  # evenly spaced subsample for the sort
                    d = d[:: math.ceil(d.size / SURE_MAX_COEFFS)]
                d_level = self.totals[j - 1]
                if settings.rule == "sure":
                    upper = math.sqrt(2.0 * math.log(max(d_level, 2)))
                    lams.append(sigma * thresholds.sure_threshold(d / sigma, upper=upper))
                elif settings.rule == "hybrid":
                    lams.append(sigma * thresholds.hybrid_sure_threshold(d / sigma, n_level=d_level))
                else:  # guarded by CleaningSettings validation
                    raise ValueError(f"unknown rule {settings.rule!r}")
        return lams


def _stats_details(segment: np.ndarray, settings: CleaningSettings, levels: int, wavelet) -> list[np.ndarray]:
    if levels == 1:
        return [pywt.dwt(segment, wavelet, mode=settings.extension)[1]]
    return shrinkage.dwt_details(segment, wavelet, settings.extension, levels)


def level_thresholds(
    buf: np.ndarray, settings: CleaningSettings, level: int, block_samples: int = DEFAULT_BLOCK_SAMPLES
) -> list[float]:
    """Thresholds in signal units for detail levels 1..level (finest first).

    Statistics come from decimated detail coefficients of the whole channel,
    computed block by block on the record's dyadic grid, so that they do not
    depend on the block size: for the DWT its own coefficients (boundary mode
    ``extension``); for the SWT the decimation-phase-0 subset of its own
    coefficients (the periodic DWT of the extended signal), which have the
    same distribution as the rest. The sample size ``n`` of the
    universal and minimax rules is the number of samples of the channel; the
    level size ``d`` of SURE and hybrid is the number of coefficients of the
    level (Donoho & Johnstone 1994, 1995).
    """
    n = buf.shape[0]
    wavelet = shrinkage.as_wavelet(settings.wavelet)
    levels = _levels_needed(settings, level)
    stats = _LevelStatistics(n, levels, settings)
    for block in plan_blocks(n, block_samples, _wavelet_overlap(wavelet, level), 1 << level):
        segment = buf[block.start : block.stop]
        if settings.transform == "swt":
            details, left = shrinkage.swt_phase0_details(segment, wavelet, settings.extension, level, levels)
            stats.add(details, block.core_start, block.core_stop, block.start - left)
        else:
            stats.add(_stats_details(segment, settings, levels, wavelet), block.core_start, block.core_stop, block.start)
    return stats.thresholds(settings, level)


def _dwt_single_block(buf: np.ndarray, settings: CleaningSettings, level: int) -> None:
    """Whole channel in one go: one ``wavedec`` serves statistics and shrinkage."""
    n = buf.shape[0]
    coeffs = pywt.wavedec(buf, settings.wavelet, mode=settings.extension, level=level)
    levels = _levels_needed(settings, level)
    stats = _LevelStatistics(n, levels, settings)
    stats.add(coeffs[:0:-1][:levels], 0, n, 0)
    lams = stats.thresholds(settings, level)
    for j, lam in enumerate(lams, start=1):
        shrinkage.threshold_inplace(coeffs[-j], lam, settings.threshold_mode)
    buf[:] = pywt.waverec(coeffs, settings.wavelet, mode=settings.extension)[:n]


def _swt_single_block(buf: np.ndarray, settings: CleaningSettings, level: int, wavelet) -> None:
    """Whole channel in one go: the SWT's own phase-0 rows give the statistics."""
    n = buf.shape[0]
    levels = _levels_needed(settings, level)

    def thresholds_from(phase0: list[np.ndarray], left: int) -> list[float]:
        stats = _LevelStatistics(n, levels, settings)
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
    n_filters = len(filters.stage_filters(fs, settings))
    weights = [1.0] * n_filters + [0.5, 2.0 if settings.transform == "swt" else 1.0]
    stages = _Stages(progress, 0.0, 1.0, weights)
    stages.report(0, 0.0)
    current = [0]

    def filter_report(fraction: float) -> None:
        stages.report(current[0], fraction)
        if fraction >= 1.0:
            current[0] += 1

    _apply_filters(buf, fs, settings, block_samples, filter_report)
    wavelet = shrinkage.as_wavelet(settings.wavelet)
    blocks = plan_blocks(n, block_samples, _wavelet_overlap(wavelet, level), 1 << level)
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
    if not isinstance(settings, CleaningSettings):
        raise TypeError("settings must be a CleaningSettings")
    samples = recording.samples
    n, n_channels = samples.shape
    dtype = _work_dtype(samples)
    resolve_level(settings, recording.fs, n, settings.wavelet, source=recording.source)
    try:
        filters.stage_filters(recording.fs, settings)
    except SettingsError as exc:
        raise SettingsError(recording.source, f"{exc.source} {exc.problem}") from None
    result = np.empty((n, n_channels), dtype=dtype)
    for c in range(n_channels):
        sub = None
        if progress is not None:
            sub = lambda f, c=c: progress((c + f) / n_channels)  # noqa: E731
        if n_channels == 1:
            clean_channel(samples[:, 0], recording.fs, settings, recording.source, sub, block_samples, out=result.reshape(n))
        else:
            result[:, c] = clean_channel(samples[:, c], recording.fs, settings, recording.source, sub, block_samples)
    if progress is not None:
        progress(1.0)
    return recording.with_samples(result)
