"""Thresholds for a whole channel, from record-wide statistics of its detail coefficients.

The statistics are collected block by block on the record's dyadic grid
(every coefficient of a level, or an evenly spaced subsample of a long
level), so that they do not depend on how the record is split into blocks.
"""

from __future__ import annotations

import math

import numpy as np
import pywt

from tracevet.cleaning import shrinkage, thresholds
from tracevet.cleaning.blocks import DEFAULT_BLOCK_SAMPLES, plan_blocks
from tracevet.cleaning.noise import level_sigmas
from tracevet.cleaning.settings import CleaningSettings

# Statistics for the thresholds use at most this many coefficients per level.
STATS_MAX_COEFFS = 1 << 21
# SURE and hybrid sort at most this many of them (evenly spaced).
SURE_MAX_COEFFS = 1 << 16


def wavelet_overlap(wavelet, level: int) -> int:
    """Overlap between blocks for the shrinkage: the SWT's reach, at least ``2 L 2^level``."""
    return max(shrinkage.swt_reach(wavelet, level), 2 * shrinkage.as_wavelet(wavelet).dec_len * (1 << level))


def levels_needed(settings: CleaningSettings, level: int) -> int:
    """How many detail levels the threshold statistics need (finest first)."""
    if settings.rule in ("universal", "minimax") and settings.noise_estimate == "finest":
        return 1
    return level


class LevelStatistics:
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
        full = [
            j == 1 or settings.noise_estimate == "per_level" or settings.rule == "bayes" for j in range(1, levels + 1)
        ]
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
        mags = [
            (p[0] if len(p) == 1 else np.concatenate(p)) if p else np.zeros(1, dtype=np.float32) for p in self.parts
        ]
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


def _dwt_stats_details(segment: np.ndarray, settings: CleaningSettings, levels: int, wavelet) -> list[np.ndarray]:
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
    levels = levels_needed(settings, level)
    stats = LevelStatistics(n, levels, settings)
    for block in plan_blocks(n, block_samples, wavelet_overlap(wavelet, level), 1 << level):
        segment = buf[block.start : block.stop]
        if settings.transform == "swt":
            details, left = shrinkage.swt_phase0_details(segment, wavelet, settings.extension, level, levels)
            stats.add(details, block.core_start, block.core_stop, block.start - left)
        else:
            stats.add(
                _dwt_stats_details(segment, settings, levels, wavelet), block.core_start, block.core_stop, block.start
            )
    return stats.thresholds(settings, level)
