"""Shape measures on beat templates: original versus cleaned, beat-aligned.

Comparing raw samples is useless when the original is noisy. Every measure
here compares median beat templates, in which noise shrinks as sigma/sqrt(N),
and every measure comes with a noise allowance: ``NOISE_K`` standard errors of
the same measure estimated from the beat-to-beat spread of the removed
component. A flag limit is never tighter than that allowance, so a faithful
cleaning of a noisy record is not flagged because of its noise.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from tracevet.assessment.beats import BeatWindows, median_standard_error, median_template
from tracevet.assessment.comparison import correlation, prd, prdn, rmse
from tracevet.assessment.fiducials import (
    SLOPE_SMOOTH_S,
    Fiducials,
    at_limit,
    find_fiducials,
    moving_average,
    qrs_bounds,
    slope_of,
)
from tracevet.assessment.removed_part import detrended, remove_slow_trend, slope_noise, smooth_rows_same


def noise_k(n_beats: int) -> float:
    """Standard errors a measure must exceed to count as more than noise.

    4 s.e. (one-sided false-alarm rate about 3e-5 for normal errors), widened
    for few beats where the MAD-based s.e. is itself uncertain:
    ``4 + 10 / N`` (common practice).
    """
    return 4.0 + 10.0 / max(n_beats, 1)


@dataclass(frozen=True)
class TemplateMeasures:
    """Templates, fiducials, shape metrics and their noise allowances.

    Attributes
    ----------
    original, cleaned, removed : numpy.ndarray
        Median templates (record units).
    time_s : numpy.ndarray
        Template time axis (s) relative to the aligned fiducial.
    fiducials : Fiducials
        Points found on the original template.
    r_amplitude : float
        R amplitude of the original template above its isoelectric level.
    template_noise : float
        Typical template noise (one s.e., record units).
    metrics : dict
        Metric name -> value (``None`` when not measurable).
    allowance : dict
        Metric name -> noise allowance in the metric's unit.
    """

    original: np.ndarray
    cleaned: np.ndarray
    removed: np.ndarray
    time_s: np.ndarray
    fiducials: Fiducials
    r_amplitude: float
    template_noise: float
    metrics: dict
    allowance: dict


def _peak_near(values: np.ndarray, index: int, reach: int, polarity: float) -> tuple[int, float]:
    lo, hi = max(0, index - reach), min(values.size, index + reach + 1)
    segment = polarity * values[lo:hi]
    best = int(np.argmax(segment))
    return lo + best, float(segment[best])


def _plateau(values: np.ndarray, peak: int, tol: float, reach: int) -> slice:
    """The contiguous samples around ``peak`` (at most ``reach`` each side) within ``tol`` of its value."""
    lo, hi = max(0, peak - reach), min(values.size, peak + reach + 1)
    low = np.flatnonzero(values[lo:hi] < values[peak] - tol) + lo
    left = low[low < peak]
    right = low[low > peak]
    return slice(int(left[-1]) + 1 if left.size else lo, int(right[0]) if right.size else hi)


def _lag_ms(reference: np.ndarray, other: np.ndarray, lo: int, hi: int, max_lag: int, fs: float) -> float:
    """Lag (ms) of ``other`` behind ``reference`` on [lo, hi), parabolic peak interpolation.

    Cross-correlation time-delay estimate with three-point parabolic
    interpolation of the peak (common practice).
    """
    ref = reference[lo:hi] - reference[lo:hi].mean()
    lags = np.arange(-max_lag, max_lag + 1)
    scores = np.empty(lags.size)
    for j, lag in enumerate(lags):
        a, b = lo + lag, hi + lag
        if a < 0 or b > other.size:
            scores[j] = -np.inf
            continue
        seg = other[a:b] - other[a:b].mean()
        scores[j] = float(np.dot(ref, seg))
    j = int(np.argmax(scores))
    shift = float(lags[j])
    if 0 < j < lags.size - 1 and np.isfinite(scores[j - 1]) and np.isfinite(scores[j + 1]):
        denom = scores[j - 1] - 2 * scores[j] + scores[j + 1]
        if denom < 0:
            shift += 0.5 * (scores[j - 1] - scores[j + 1]) / denom
    return 1000.0 * shift / fs


def measure_templates(windows: BeatWindows) -> TemplateMeasures:
    """Compute every template shape measure with its noise allowance.

    Parameters
    ----------
    windows : BeatWindows
        Aligned beat windows of the dominant morphology.

    Notes
    -----
    Measures (record units unless stated):

    * ``prd_percent``, ``prdn_percent``: PRD and PRDN of the cleaned template
      against the original template with its isoelectric level removed
      (common practice; see :func:`prd`). ``rmse``, ``correlation``: same pair.
    * ``r_amplitude_ratio``: cleaned R amplitude (largest same-polarity
      deviation within +-25 ms of the original R) over the original
      template's value at the same sample (its highest value under the
      plateau when the cleaned peak is flat to 1 %, as a clipped one is),
      both above their own isoelectric level (common practice).
    * ``r_timing_shift_ms``: cross-correlation lag of the cleaned QRS against
      the original QRS, positive when the cleaned beat is late.
    * ``qrs_width_change_ms``: QRS width (outermost 12 %-of-R crossings, see
      :func:`find_fiducials`) of the cleaned template minus the original's,
      same threshold for both.
    * ``st_change``: (ST - iso) cleaned minus (ST - iso) original, ST read at
      J+80 ms (J+60 ms above 100 bpm) as in the Long-Term ST Database.
    * ``p_amplitude_ratio``, ``t_amplitude_ratio``: retained P and T amplitude
      on 40 ms-smoothed templates (common practice); ``None`` when the wave is
      not above noise.
    * ``ringing_rms``: r.m.s. of the linearly detrended removed template in
      the flanks beside the QRS (onset-70..onset-10 ms, J+10..J+90 ms), the
      larger side, with the expected template noise (or the energy of the
      same template far from the QRS, if larger) subtracted in quadrature
      (common practice).
    * ``removed_beat_fraction``: <removed, cleaned> / <original, cleaned> over
      the mean-removed templates: the share of the beat shape found in the
      removed component (common practice; projection on the cleaned template
      so that noise in the original does not bias it).
    * ``beat_shape_change_percent``: PRDN of the template pair with the
      expected noise energy subtracted (Zigel et al. 2000 for PRD bands).
    """
    fs = windows.fs
    n_beats = windows.n_used
    k = noise_k(n_beats)
    # First pass: the isoelectric window on the raw original template.
    raw = median_template(windows.original)
    slope_noise0 = slope_noise(windows.removed, fs)
    iso0 = find_fiducials(raw, windows.pre, fs, windows.rr_s, slope_noise0).iso
    # Each beat is referred to its own isoelectric level (PR segment), so slow
    # offsets between beats (baseline wander) neither blur the templates nor
    # make the medians of original and cleaned disagree (common practice).
    x_w = windows.original - windows.original[:, iso0].mean(axis=1, keepdims=True)
    y_w = windows.cleaned - windows.cleaned[:, iso0].mean(axis=1, keepdims=True)
    removed = remove_slow_trend(x_w - y_w, iso0, fs)
    x_t = median_template(x_w)
    r_t = median_template(removed)
    shown_cleaned = median_template(y_w)
    # Measures compare the original template with "original minus the
    # beat-locked removed part", so every difference below is a function of
    # the removed template, whose noise the beat-to-beat spread estimates.
    y_t = x_t - r_t
    # Template noise per sample: s.e. of the median of the removed component.
    sigma_t = median_standard_error(removed)
    noise_level = float(np.median(sigma_t))
    fid = find_fiducials(x_t, windows.pre, fs, windows.rr_s, slope_noise(removed, fs))
    iso = fid.iso
    iso_x, iso_y = float(np.mean(x_t[iso])), float(np.mean(y_t[iso]))
    dev_x, dev_y = x_t - iso_x, y_t - iso_y
    amp_x = abs(float(dev_x[fid.r]))
    metrics: dict[str, float | None] = {}
    allowance: dict[str, float] = {}
    per_beat_iso = removed[:, iso].mean(axis=1)

    # Whole-template comparisons (common practice).
    metrics["prd_percent"] = prd(dev_x, y_t - iso_x) if amp_x > 0 else None
    metrics["prdn_percent"] = prdn(x_t, y_t) if np.ptp(x_t) > 0 else None
    metrics["rmse"] = rmse(x_t, y_t)
    metrics["correlation"] = correlation(x_t, y_t)

    # R amplitude.
    reach = max(1, int(round(0.025 * fs)))
    # Both amplitudes are read at the cleaned template's peak. The cleaned
    # template (original minus the removed median) carries little noise, so
    # its peak position does not depend on the original's noise; reading the
    # original at its own noisiest maximum would bias the ratio low.
    r_y, amp_y = _peak_near(dev_y, fid.r, reach, fid.polarity)
    # On a flat top (a clipped peak) the cleaned maximum is only one sample
    # of the plateau; the original is read at its highest point under the
    # whole plateau (samples within 1 % of the cleaned peak, contiguous).
    top = _plateau(fid.polarity * dev_y, r_y, 0.01 * abs(amp_y), reach)
    amp_x_at = float(np.max(fid.polarity * dev_x[top]))
    if amp_x > 0:
        ratio = amp_y / amp_x_at if amp_x_at > 0.5 * amp_x else amp_y / amp_x
        metrics["r_amplitude_ratio"] = ratio
        se = float(median_standard_error(removed[:, fid.r] - per_beat_iso))
        allowance["r_amplitude_ratio"] = k * se / amp_x
    else:
        metrics["r_amplitude_ratio"] = None

    # Timing: cross-correlation over the QRS +-20 ms.
    lo = max(0, int(np.floor(fid.onset)) - int(round(0.02 * fs)))
    hi = min(x_t.size, int(np.ceil(fid.offset)) + int(round(0.02 * fs)) + 1)
    max_lag = max(2, int(round(0.05 * fs)))
    if hi - lo >= 3 and amp_x > 0:
        metrics["r_timing_shift_ms"] = _lag_ms(x_t, y_t, lo, hi, max_lag, fs)
        slope = np.diff(x_t[lo:hi])
        energy = float(np.sum(slope * slope))
        sigma_qrs = float(np.sqrt(np.mean(sigma_t[lo:hi] ** 2)))
        allowance["r_timing_shift_ms"] = (
            k * 1000.0 / fs * np.sqrt(2.0) * sigma_qrs / np.sqrt(energy) if energy > 0 else float("inf")
        )
    else:
        metrics["r_timing_shift_ms"] = None

    # QRS width change: the median over five slope thresholds (4-8 % of
    # each template's own steepest QRS slope, so that a mere change of
    # amplitude does not count as a change of width) of the width change at
    # that threshold, so that a Q or S shoulder lying near one threshold
    # cannot decide the result.
    before = max(1, int(round(min(0.10, 0.20 * windows.rr_s) * fs)))
    after = max(1, int(round(min(0.12, 0.22 * windows.rr_s) * fs)))
    slope_x = np.abs(slope_of(x_t, fs))
    slope_y = np.abs(slope_of(y_t, fs))
    r_y = _peak_near(dev_y, fid.r, reach, fid.polarity)[0]
    steep_x = float(slope_x[max(0, fid.r - reach) : fid.r + reach + 1].max())
    steep_y = float(slope_y[max(0, r_y - reach) : r_y + reach + 1].max())
    sigma_slope = median_standard_error(np.gradient(smooth_rows_same(removed, int(round(SLOPE_SMOOTH_S * fs))), axis=1))
    floor = 5.0 * float(np.median(sigma_slope))
    curvature = np.gradient(slope_x)
    changes, allows = [], []
    for fraction in (0.04, 0.05, 0.06, 0.07, 0.08):
        on_x, off_x = qrs_bounds(slope_x, fid.r, max(fraction * steep_x, floor), before, after, fs)
        on_y, off_y = qrs_bounds(slope_y, r_y, max(fraction * steep_y, floor), before, after, fs)
        # A bound at the end of its search range was not found (the QRS runs
        # into the T or P wave at this threshold): that threshold says nothing.
        if at_limit(on_x, off_x, fid.r, before, after, x_t.size) or at_limit(on_y, off_y, r_y, before, after, x_t.size):
            continue
        changes.append(((off_y - on_y) - (off_x - on_x)) / fs * 1000.0)
        # Crossing-time error = slope noise / rate of change of the slope there.
        parts = []
        for point in (on_x, off_x):
            i = min(max(int(round(point)), 0), x_t.size - 1)
            c = abs(float(curvature[i]))
            parts.append((float(sigma_slope[i]) / c) ** 2 if c > 0 else float("inf"))
        allows.append(k * np.sqrt(2.0 * sum(parts)) / fs * 1000.0)
    metrics["qrs_width_ms"] = (fid.offset - fid.onset) / fs * 1000.0
    metrics["qrs_width_change_ms"] = float(np.median(changes)) if (amp_x > 0 and changes) else None
    allowance["qrs_width_change_ms"] = float(np.median(allows)) if allows else float("inf")

    # ST level change.
    st_x = float(np.mean(x_t[fid.st])) - iso_x
    st_y = float(np.mean(y_t[fid.st])) - iso_y
    metrics["st_change"] = st_y - st_x
    metrics["st_delay_ms"] = fid.st_delay_ms
    per_beat_st = removed[:, fid.st].mean(axis=1) - per_beat_iso
    allowance["st_change"] = k * float(median_standard_error(per_beat_st))

    # P and T waves on smoothed templates.
    smooth_width = int(round(0.04 * fs))
    sm_x = moving_average(dev_x, smooth_width)
    sm_y = moving_average(dev_y, smooth_width)
    wave_reach = max(1, int(round(0.02 * fs)))
    for name, index in (("p", fid.p), ("t", fid.t)):
        key = f"{name}_amplitude_ratio"
        metrics[key] = None
        if index is None:
            continue
        polarity = 1.0 if sm_x[index] >= 0 else -1.0
        amp_wave = abs(float(sm_x[index]))
        half = max(1, smooth_width // 2)
        sl = slice(max(0, index - half), min(x_t.size, index + half + 1))
        se = float(median_standard_error(removed[:, sl].mean(axis=1) - per_beat_iso))
        # A wave is measurable when it stands clear of noise and of the
        # resolution of the template (3 s.e. and 3 % of R).
        if amp_wave <= max(3.0 * se, 0.03 * amp_x):
            continue
        at, kept = _peak_near(sm_y, index, wave_reach, polarity)
        at_x = polarity * float(sm_x[at])
        metrics[key] = kept / at_x if at_x > 0.5 * amp_wave else kept / amp_wave
        allowance[key] = k * se / amp_wave

    # Energy measures use the mean removed template: its noise energy is
    # estimated without bias by the beat-to-beat variance, whatever the noise
    # distribution (a sinusoidal hum is far from normal).
    r_mean = removed.mean(axis=0)
    var_mean = removed.var(axis=0, ddof=1) / n_beats if n_beats > 1 else np.zeros_like(r_mean)

    # Ringing beside the QRS in the removed template: 60 ms before the QRS
    # onset and 80 ms after the J point (10 ms away from each), each side
    # measured on its own so ringing on one side is not diluted by the other.
    gap = max(1, int(round(0.01 * fs)))
    left_len = max(3, int(round(0.06 * fs)))
    right_len = max(3, int(round(0.08 * fs)))
    flanks = []
    left_hi = int(np.floor(fid.onset)) - gap
    if left_hi - left_len >= 0:
        flanks.append(slice(left_hi - left_len, left_hi))
    right_lo = int(np.ceil(fid.offset)) + gap
    if right_lo + right_len <= x_t.size:
        flanks.append(slice(right_lo, right_lo + right_len))
    # Control windows far from the QRS (start and end of the template): a
    # narrow-band residue such as mains hum has the same energy there, true
    # ringing does not.
    control_len = max(3, int(round(0.05 * fs)))
    controls = [slice(0, control_len), slice(x_t.size - control_len, x_t.size)]
    if flanks and n_beats > 1:
        control_sq = float(np.mean(np.concatenate([detrended(r_mean[sl][None, :])[0] for sl in controls]) ** 2))
        best: tuple[float, float] = (0.0, 0.0)
        found = False
        for sl in flanks:
            part = detrended(r_mean[sl][None, :])[0]
            floor_sq = float(np.mean(detrended(removed[:, sl]).var(axis=0, ddof=1))) / n_beats
            reference = max(floor_sq, control_sq)
            excess = float(np.sqrt(max(0.0, float(np.mean(part**2)) - reference)))
            # s.d. of the mean of squares of M noise values is about sqrt(2/M) floor^2.
            allow = float(np.sqrt(k * np.sqrt(2.0 / part.size) * reference))
            if not found or excess - allow > best[0] - best[1]:
                best, found = (excess, allow), True
        metrics["ringing_rms"], allowance["ringing_rms"] = best
    else:
        metrics["ringing_rms"] = None

    # Beat shape in the removed component and overall shape change.
    xc, yc = x_t - x_t.mean(), y_t - y_t.mean()
    rc = r_mean - r_mean.mean()
    denom = float(np.dot(xc, yc))
    if denom > 0:
        metrics["removed_beat_fraction"] = float(np.dot(rc, yc)) / denom
        allowance["removed_beat_fraction"] = k * float(np.sqrt(np.sum(var_mean * yc * yc))) / denom
    else:
        metrics["removed_beat_fraction"] = None
    # Overall shape change on templates smoothed by 20 ms (zeros at 50, 100,
    # 150 Hz), so that a mains residue with few degrees of freedom does not
    # pass for a shape change.
    smooth20 = int(round(0.02 * fs))
    xs = moving_average(x_t, smooth20)
    xs -= xs.mean()
    removed_s = smooth_rows_same(removed, smooth20)
    rs = removed_s.mean(axis=0)
    rs -= rs.mean()
    var_s = removed_s.var(axis=0, ddof=1) / n_beats if n_beats > 1 else np.zeros_like(rs)
    energy_x = float(np.dot(xs, xs))
    if energy_x > 0:
        excess = float(np.dot(rs, rs)) - float(np.sum(var_s))
        metrics["beat_shape_change_percent"] = 100.0 * np.sqrt(max(0.0, excess) / energy_x)
        # Spread of the excess energy: the noise-only term plus the cross
        # term between the systematic change and the noise.
        spread = np.sqrt(2.0 * np.sum(var_s**2) + 4.0 * max(0.0, float(np.sum(rs * rs * var_s))))
        allowance["beat_shape_change_energy"] = k * float(spread) / energy_x
    else:
        metrics["beat_shape_change_percent"] = None

    metrics["r_amplitude"] = amp_x
    metrics["template_noise"] = noise_level
    return TemplateMeasures(
        original=x_t,
        cleaned=shown_cleaned,
        removed=r_t,
        time_s=windows.time_s,
        fiducials=fid,
        r_amplitude=amp_x,
        template_noise=noise_level,
        metrics=metrics,
        allowance=allowance,
    )
