"""Beat-by-beat and stretch-by-stretch assessment: damage confined to part of a record, and where it is.

The templates of :mod:`tracevet.assessment.shape_measures` speak for the
median beat; damage on a minority of beats leaves them unchanged. Here every
beat of every morphology group is read on its own, in two stages:

1. **Screen** (vectorised over beats, in chunks, no loop per beat): for each
   beat, first-order readings of what the cleaning took from it, all linear
   (or, for energies, products of neighbouring beats) in the removed part
   ``original - cleaned`` of that beat after its own isoelectric level and
   slow baseline are taken out (as for the templates): R amplitude, ST level,
   P and T amplitude, timing shift (projection on the template's slope),
   QRS width change (slope-crossing shift), beat shape in the removed part,
   ringing beside the QRS and overall shape change. A single beat is noisy,
   so every reading is judged through its running median over
   :data:`STRETCH_BEATS` consecutive beats of the same group: a stretch of at
   least :data:`MIN_STRETCH_BEATS` beats beyond a limit moves the median, one
   odd beat never does. Beats whose median passes a screening level (a
   fraction of the warn limit, never below the noise of a median of
   ``STRETCH_BEATS`` beats) form candidate stretches.
2. **Confirm**: each candidate stretch gets the template measures and flag
   rules of the whole record (:func:`~tracevet.assessment.shape_measures.measure_templates`,
   :func:`~tracevet.assessment.flags.evaluate`) on its own beats, so a
   stretch is flagged by the same rules and limits as a record, with a noise
   allowance that is never smaller than the one the whole group's
   beat-to-beat spread gives for that many beats.

Besides shapes, the level of every beat is compared between original and
cleaned (:func:`baseline_excursions`): a cleaning must not move beats away
from their level (a level shift, a start-up swoop of a high-pass filter),
and long pauses in the beat sequence are reported as not measurable.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from numpy.lib.stride_tricks import sliding_window_view

from tracevet.assessment.beats import (
    MAD_TO_SD,
    MEDIAN_SE_FACTOR,
    BeatWindows,
    cut_windows,
    windows_at,
)
from tracevet.assessment.fiducials import SLOPE_SMOOTH_S, at_limit, moving_average, qrs_bounds, slope_of
from tracevet.assessment.flags import Flag, evaluate, judge
from tracevet.assessment.limits import Limits
from tracevet.assessment.removed_part import detrended
from tracevet.assessment.rules import RULE, RULES, TEMPLATE_FLAG_IDS
from tracevet.assessment.shape_measures import TemplateMeasures, measure_templates, noise_k

# Beats in the running median that judges a stretch; a stretch needs more than
# half of them, MIN_STRETCH_BEATS consecutive beats, to move it.
STRETCH_BEATS = 5
MIN_STRETCH_BEATS = (STRETCH_BEATS + 1) // 2
# Screening level: this fraction of the warn limit (the confirmation decides).
SCREEN_FRACTION = 0.6
# Standard errors of a running median the screen must exceed (common practice).
SCREEN_K = 4.0
# Beats per vectorised chunk (bounds memory on 24-hour records).
CHUNK_BEATS = 2048
# Most candidate stretches confirmed with templates per group (the worst first),
# and most beats behind a stretch's templates (spread evenly).
MAX_CONFIRMED = 20
STRETCH_TEMPLATE_BEATS = 200
# A pause in the beat sequence longer than max(GAP_MIN_S, GAP_RR x median RR)
# is not measurable (common practice: a pause of 3 s is a clinical alarm).
GAP_MIN_S = 3.0
GAP_RR = 3.0
# Standard errors a single beat's level must exceed at an end (first or last
# beat of the record or of a gap), where it is judged alone.
END_K = 5.0
# Column of each template flag (the ones a stretch can confirm) in the screen's witnesses.
_FLAG_COLUMN = {flag_id: j for j, flag_id in enumerate(TEMPLATE_FLAG_IDS)}


def running_median(values: np.ndarray, k: int = STRETCH_BEATS) -> np.ndarray:
    """Centred running median over ``k`` values; at the ends the first or last whole window.

    Vectorised with a strided view (common practice). Fewer than ``k``
    values give their overall median everywhere.
    """
    values = np.asarray(values, dtype=np.float64)
    n = values.size
    if n == 0:
        return values
    if n < k:
        return np.full(n, np.median(values))
    medians = np.median(sliding_window_view(values, k), axis=1)
    index = np.clip(np.arange(n) - k // 2, 0, n - k)
    return medians[index]


def robust_sigma(values: np.ndarray) -> float:
    """Beat-to-beat noise of a per-beat reading: 1.4826 MAD of first differences / sqrt 2.

    Differences of neighbours are blind to slow changes and to long damaged
    stretches, so the noise is not inflated by the damage it must judge
    (robust noise estimate, common practice).
    """
    values = np.asarray(values, dtype=np.float64)
    if values.size < 3:
        return 0.0
    d = np.diff(values)
    return float(MAD_TO_SD * np.median(np.abs(d - np.median(d))) / np.sqrt(2.0))


def median_se(sigma: float, n: int) -> float:
    """Standard error of a median of ``n`` values of s.d. ``sigma``: sqrt(pi/2) sigma / sqrt(n) (common practice)."""
    return MEDIAN_SE_FACTOR * sigma / np.sqrt(max(n, 1))


def runs_of(mask: np.ndarray, min_len: int = 1) -> list[tuple[int, int]]:
    """``[start, stop)`` index runs of True in ``mask`` at least ``min_len`` long (vectorised)."""
    mask = np.asarray(mask, dtype=bool)
    if not mask.any():
        return []
    edges = np.diff(np.concatenate([[0], mask.astype(np.int8), [0]]))
    starts, stops = np.flatnonzero(edges == 1), np.flatnonzero(edges == -1)
    keep = stops - starts >= min_len
    return list(zip(starts[keep].tolist(), stops[keep].tolist()))


def anchor_basis(m: int, iso: slice, fs: float) -> tuple[int, np.ndarray | None]:
    """Anchor length and the Lagrange basis (3 x m) of the parabola through a beat's three quiet anchors.

    The same anchors as :func:`~tracevet.assessment.removed_part.remove_slow_trend`:
    the first 30 ms, the isoelectric window and the last 30 ms of the window.
    ``None`` when the anchors do not follow each other.
    """
    edge = max(1, int(round(0.03 * fs)))
    t = np.arange(m, dtype=np.float64)
    knots = np.array([(edge - 1) / 2.0, (iso.start + iso.stop - 1) / 2.0, m - 1 - (edge - 1) / 2.0])
    if not (knots[0] < knots[1] < knots[2]):
        return edge, None
    basis = np.empty((3, m))
    for i in range(3):
        others = [knots[j] for j in range(3) if j != i]
        basis[i] = (t - others[0]) * (t - others[1]) / ((knots[i] - others[0]) * (knots[i] - others[1]))
    return edge, basis


@dataclass
class Geometry:
    """Where the screen reads each beat: points found on a group's original template.

    Every linear reading is one column of ``weights`` (m x J): the reading of
    a beat is ``r @ weights[:, j]`` with ``r`` the beat's removed part after
    its parabola through the three anchors is taken out; as the parabola is
    linear in the anchors, ``r @ w = d @ w - anchors(d) @ (basis @ w)`` with
    ``d`` the raw removed part, one matrix product for all readings.
    """

    pre: int
    post: int
    fs: float
    iso: slice
    edge: int
    basis: np.ndarray
    names: list
    weights: np.ndarray
    widths: int  # the last ``widths`` columns are the QRS width change at each slope threshold
    block: int
    basis_blocks: np.ndarray
    shape_energy: float
    flanks: list
    amplitude: float


def _box(m: int, centre: int, half: int) -> np.ndarray:
    w = np.zeros(m)
    lo, hi = max(0, centre - half), min(m, centre + half + 1)
    w[lo:hi] = 1.0 / (hi - lo)
    return w


def geometry(tm: TemplateMeasures, windows: BeatWindows) -> Geometry | None:
    """Reading points of the screen from a group's template measures; ``None`` without an R amplitude."""
    fs, fid, x_t = windows.fs, tm.fiducials, tm.original
    m = x_t.size
    edge, basis = anchor_basis(m, fid.iso, fs)
    if not tm.r_amplitude > 0 or basis is None:
        return None
    amp = float(tm.r_amplitude)
    iso_x = float(np.mean(x_t[fid.iso]))
    dev = x_t - iso_x
    sm = moving_average(dev, int(round(0.04 * fs)))
    names, columns = [], []

    def add(name, w):
        names.append(name)
        columns.append(w)

    r_w = np.zeros(m)
    r_w[fid.r] = fid.polarity / amp
    add("r", r_w)
    st_w = np.zeros(m)
    st_w[fid.st] = -1.0 / (fid.st.stop - fid.st.start)
    add("st", st_w)
    half_wave = max(1, int(round(0.04 * fs)) // 2)
    for name, index in (("p", fid.p), ("t", fid.t)):
        if index is not None and tm.metrics.get(f"{name}_amplitude_ratio") is not None:
            polarity = 1.0 if sm[index] >= 0 else -1.0
            add(name, polarity * _box(m, int(index), half_wave) / abs(float(sm[index])))
    # Timing: least-squares lag of the removed part on the template's slope over
    # the QRS +-20 ms (y(t) = x(t - lag) gives removed = lag x'(t), first order).
    lo = max(0, int(np.floor(fid.onset)) - int(round(0.02 * fs)))
    hi = min(m, int(np.ceil(fid.offset)) + int(round(0.02 * fs)) + 1)
    g = np.zeros(m)
    g[lo:hi] = np.gradient(x_t)[lo:hi]
    gg = float(g @ g)
    if gg > 0:
        add("timing", 1000.0 / fs * g / gg)
    centred = x_t - x_t.mean()
    denom = float(centred @ centred)
    if denom > 0:
        add("removed", centred / denom)
    # QRS width: first-order shift of each slope-threshold crossing (4-8 % of
    # the steepest slope, as the template measure reads them): at a crossing p
    # with |slope| rising at rate c_p, the cleaned crossing moves by
    # (sign_p s_r(p) - f sign_S s_r(S)) / c_p, s_r the removed part's slope.
    signed = slope_of(x_t, fs)
    slope = np.abs(signed)
    reach = max(1, int(round(0.025 * fs)))
    steep = max(0, fid.r - reach) + int(np.argmax(slope[max(0, fid.r - reach) : fid.r + reach + 1]))
    before = max(1, int(round(min(0.10, 0.20 * windows.rr_s) * fs)))
    after = max(1, int(round(min(0.12, 0.22 * windows.rr_s) * fs)))
    curvature = np.gradient(slope)
    half = int(round(SLOPE_SMOOTH_S * fs)) // 2

    def slope_w(col):
        return (_box(m, min(m - 1, col + 1), half) - _box(m, max(0, col - 1), half)) / 2.0

    widths = 0
    for fraction in (0.04, 0.05, 0.06, 0.07, 0.08):
        on, off = qrs_bounds(slope, fid.r, fraction * float(slope[steep]), before, after, fs)
        if at_limit(on, off, fid.r, before, after, m):
            continue
        i_on, i_off = int(round(on)), int(round(off))
        c_on, c_off = float(curvature[i_on]), float(curvature[i_off])
        if c_on <= 0 or c_off >= 0:
            continue
        at_steep = fraction * np.sign(signed[steep]) * slope_w(steep)
        w = (np.sign(signed[i_off]) * slope_w(i_off) - at_steep) / c_off
        w -= (np.sign(signed[i_on]) * slope_w(i_on) - at_steep) / c_on
        add(f"width{widths}", 1000.0 / fs * w)
        widths += 1
    gap = max(1, int(round(0.01 * fs)))
    left_len, right_len = max(3, int(round(0.06 * fs))), max(3, int(round(0.08 * fs)))
    flanks = []
    left_hi = int(np.floor(fid.onset)) - gap
    if left_hi - left_len >= 0:
        flanks.append(slice(left_hi - left_len, left_hi))
    right_lo = int(np.ceil(fid.offset)) + gap
    if right_lo + right_len <= m:
        flanks.append(slice(right_lo, right_lo + right_len))
    # Shape energy on 10 ms block means (about the 20 ms moving average of the template measure).
    block = max(1, int(round(0.01 * fs)))
    xs = _block_means(x_t[None, :], block)[0]
    xs = xs - xs.mean()
    return Geometry(windows.pre, windows.post, fs, fid.iso, edge, basis, names, np.stack(columns, axis=1), widths,
                    block, _block_means(basis, block), float(xs @ xs) * block, flanks, amp)


def _block_means(rows: np.ndarray, block: int) -> np.ndarray:
    """Means of consecutive blocks of ``block`` samples along each row (the tail shorter than a block dropped)."""
    m = (rows.shape[1] // block) * block
    return rows[:, :m].reshape(rows.shape[0], -1, block).mean(axis=2)


# Screen readings: name -> (flag id, kind), from the flag table's ``screen`` column. Kinds: "fraction", "ms",
# "amp" (record units), "energy-amp" and "energy-shape" (products of neighbouring beats).
SCREEN = {name: (rule.id, kind) for rule in RULES for name, kind in rule.screen}


def _chunk_readings(d: np.ndarray, geo: Geometry, previous: dict | None) -> tuple[dict, dict]:
    """Screen readings of one chunk of beats (rows of the removed part); ``previous`` carries the beat before."""
    m = d.shape[1]
    anchors = np.stack([d[:, : geo.edge].mean(axis=1), d[:, geo.iso].mean(axis=1), d[:, m - geo.edge :].mean(axis=1)],
                       axis=1)
    dt = d.dtype
    linear = (d @ geo.weights.astype(dt) - anchors @ (geo.basis @ geo.weights).astype(dt)).astype(np.float64)
    out: dict = {}
    plain = len(geo.names) - geo.widths
    for j, name in enumerate(geo.names[:plain]):
        out[name] = linear[:, j]
    if geo.widths:
        out["width"] = np.median(linear[:, plain:], axis=1)
    # Energies from products of neighbouring beats: the noise of two beats is
    # independent, so <a_i, a_(i-1)> estimates the beat-locked energy alone.
    blocks = (_block_means(d, geo.block) - anchors @ geo.basis_blocks.astype(dt)).astype(np.float64)
    blocks -= blocks.mean(axis=1, keepdims=True)
    parts = {"shape": blocks}
    for j, flank in enumerate(geo.flanks[:2]):
        parts[f"ring{j}"] = detrended((d[:, flank] - anchors @ geo.basis[:, flank].astype(dt)).astype(np.float64))
    carry = {}
    for name, rows in parts.items():
        before = previous[name] if previous is not None else rows[:1]
        shifted = np.concatenate([before, rows[:-1]], axis=0)
        product = np.einsum("ij,ij->i", rows, shifted)
        out[name] = product / rows.shape[1] if name.startswith("ring") else product * geo.block / geo.shape_energy
        carry[name] = rows[-1:]
    return out, carry


def screen_readings(original: np.ndarray, cleaned: np.ndarray, centres: np.ndarray, geo: Geometry) -> dict:
    """Screen readings of every beat at ``centres`` (whole windows only), chunk by chunk."""
    readings: dict[str, list] = {}
    carry = None
    for start in range(0, centres.size, CHUNK_BEATS):
        part = centres[start : start + CHUNK_BEATS]
        # In the traces' own precision (float32 halves the memory traffic of a long record).
        d = cut_windows(original, part, geo.pre, geo.post) - cut_windows(cleaned, part, geo.pre, geo.post)
        if d.dtype != np.float32:
            d = d.astype(np.float64, copy=False)
        out, carry = _chunk_readings(d, geo, carry)
        for name, values in out.items():
            readings.setdefault(name, []).append(values)
    return {name: np.concatenate(parts) for name, parts in readings.items()}


def _nominal_warn(flag_id: str, limits: Limits, amplitude: float) -> float | None:
    """Warn limit of ``flag_id`` in the screen reading's unit (record units for amplitudes)."""
    spec = limits.spec(flag_id)
    if not spec.enabled:
        return None
    if spec.amplitude:
        warn, fail = limits.amplitude_limits(flag_id, amplitude)
        return warn if warn is not None else fail
    return spec.warn if spec.warn is not None else spec.fail


def screen(readings: dict, geo: Geometry, limits: Limits) -> tuple[np.ndarray, np.ndarray, dict, np.ndarray]:
    """Judge the running medians; return (candidate mask, score, noise per reading, witnesses).

    ``score`` is the largest ratio, over readings, of a beat's running median
    to its screening level (candidates have score > 1); ``noise`` holds the
    beat-to-beat s.d. of each reading (for the confirmation's allowance);
    ``witnesses`` (beats x flags of :data:`TEMPLATE_FLAG_IDS`) which flag's
    reading passed its screening level at each beat.
    """
    n = next(iter(readings.values())).size if readings else 0
    score = np.zeros(n)
    witnessed = np.zeros((n, len(TEMPLATE_FLAG_IDS)), dtype=bool)
    noise: dict = {}
    shape_warn = limits.spec("beat-shape-change").warn
    for name, values in readings.items():
        flag_id, kind = SCREEN[name]
        sigma = robust_sigma(values)
        noise[name] = sigma
        if kind == "energy-shape":
            warn = None if shape_warn is None or not limits.spec(flag_id).enabled else (shape_warn / 100.0) ** 2
        elif kind == "energy-amp":
            amp_warn = _nominal_warn(flag_id, limits, geo.amplitude)
            warn = None if amp_warn is None else amp_warn**2
        else:
            warn = _nominal_warn(flag_id, limits, geo.amplitude)
        if warn is None:
            continue
        level = max(SCREEN_FRACTION * warn if not kind.startswith("energy") else SCREEN_FRACTION**2 * warn,
                    SCREEN_K * median_se(sigma, STRETCH_BEATS))
        if not level > 0:
            continue
        med = running_median(values)
        ratio = (med if kind.startswith("energy") else np.abs(med)) / level
        np.maximum(score, ratio, out=score)
        witnessed[:, _FLAG_COLUMN[flag_id]] |= ratio > 1.0
    return score > 1.0, score, noise, witnessed


# Confirmation allowance from the group's beat-to-beat noise: metric -> screen
# reading of the same measure (the linear readings; energies are handled apart).
_NOISE_TO_METRIC = {
    rule.metric: name for rule in RULES for name, kind in rule.screen if not kind.startswith("energy")
}


@dataclass
class StretchFlag:
    """One flag raised on one confirmed stretch."""

    flag: Flag
    start_s: float
    end_s: float
    beats: int


@dataclass
class GroupResult:
    """Screen and confirmation of one morphology group."""

    measured: int = 0
    stretches: list = field(default_factory=list)  # StretchFlag
    worst_metrics: dict = field(default_factory=dict)


def assess_group(
    original: np.ndarray,
    cleaned: np.ndarray,
    centres: np.ndarray,
    windows: BeatWindows,
    tm: TemplateMeasures,
    limits: Limits,
    channel: str,
) -> GroupResult:
    """Screen every beat of one group and confirm the candidate stretches with template measures.

    Parameters
    ----------
    original, cleaned : numpy.ndarray
        The traces.
    centres : numpy.ndarray
        Beat centres of the group in time order (detected peak plus the
        group's alignment offset).
    windows, tm : BeatWindows, TemplateMeasures
        The group's template windows and measures (reading points).
    limits : Limits
        Limits in force.
    channel : str
        Channel name for messages.
    """
    result = GroupResult()
    geo = geometry(tm, windows)
    n_samples = original.size
    centres = centres[(centres >= windows.pre) & (centres < n_samples - windows.post)]
    if geo is None or centres.size < STRETCH_BEATS:
        return result
    result.measured = int(centres.size)
    readings = screen_readings(original, cleaned, centres, geo)
    mask, score, noise, witnessed = screen(readings, geo, limits)
    runs = runs_of(mask, MIN_STRETCH_BEATS)
    if not runs:
        return result
    # The worst candidates first, when there are more than can be confirmed.
    runs.sort(key=lambda run: -float(np.max(score[run[0] : run[1]])))
    fs = windows.fs
    for start, stop in sorted(runs[:MAX_CONFIRMED]):
        beats = centres[start:stop]
        stretch = windows_at(original, cleaned, beats, windows, most_beats=STRETCH_TEMPLATE_BEATS)
        if stretch is None:
            continue
        measures = measure_templates(stretch)
        n = stretch.n_used
        allowance = dict(measures.allowance)
        k = noise_k(n)
        for metric, name in _NOISE_TO_METRIC.items():
            if name in noise:
                allowance[metric] = max(allowance.get(metric, 0.0), k * median_se(noise[name], n))
        # Energies: the spread of the neighbour products of the screen, for n beats.
        ring = max((noise[name] for name in ("ring0", "ring1") if name in noise), default=0.0)
        allowance["ringing_rms"] = max(allowance.get("ringing_rms", 0.0), float(np.sqrt(k * median_se(ring, n))))
        if "shape" in noise:
            allowance["beat_shape_change_energy"] = max(
                allowance.get("beat_shape_change_energy", 0.0), k * median_se(noise["shape"], n)
            )
        metrics = dict(measures.metrics)
        # Two witnesses: the stretch's templates cross the limit, and the
        # screen reading of the same measure passed its screening level there.
        seen = np.asarray(witnessed[start:stop].any(axis=0))
        flags = [f for f in evaluate(channel, metrics, allowance, limits)
                 if f.id in TEMPLATE_FLAG_IDS and seen[_FLAG_COLUMN[f.id]]]
        start_s = max(0.0, (beats[0] - windows.pre) / fs)
        end_s = min(n_samples / fs, (beats[-1] + windows.post) / fs)
        for flag in flags:
            result.stretches.append(StretchFlag(flag, start_s, end_s, int(stop - start)))
        if flags:
            for rule in (RULE["r-peak-change"], RULE["st-level-change"]):
                value = metrics.get(rule.metric)
                if value is None or rule.measure is None:
                    continue
                old = result.worst_metrics.get(rule.metric)
                if old is None or rule.measure(value) > rule.measure(old):
                    result.worst_metrics[rule.metric] = value
    return result


# --------------------------------------------------------------------------- levels and gaps


def gaps(peaks: np.ndarray, fs: float, n_samples: int, pre: int, post: int) -> list[tuple[float, float]]:
    """Stretches (s) without measurable beats: pauses longer than max(3 s, 3 median RR), also at the ends."""
    if peaks.size < 2:
        return [(0.0, n_samples / fs)]
    rr = float(np.median(np.diff(peaks)))
    longest = max(GAP_MIN_S * fs, GAP_RR * rr)
    bounds = np.concatenate([[-pre - 1], peaks, [n_samples + post]])
    d = np.diff(bounds)
    out = []
    for i in np.flatnonzero(d > longest).tolist():
        a = max(0, int(bounds[i]) + post)
        b = min(n_samples, int(bounds[i + 1]) - pre)
        if b > a:
            out.append((a / fs, b / fs))
    return out


def anchor_levels(signal: np.ndarray, centres: np.ndarray, pre: int, post: int, iso: slice, edge: int) -> np.ndarray:
    """Level of each beat: the median of its three quiet anchors (first 30 ms, PQ junction, last 30 ms).

    The anchors are those of the slow-trend removal (T-P segment before P,
    isoelectric window, T-P segment after T), read on ``signal`` in the beat
    window [c - pre, c + post], indices clipped to the trace; the median of
    three keeps one anchor that falls on a wave from moving the level
    (knot-based baseline, common practice). Chunked over beats.
    """
    m = pre + post + 1
    cols = np.concatenate([np.arange(edge), np.arange(iso.start, iso.stop), np.arange(m - edge, m)]) - pre
    sizes = (edge, iso.stop - iso.start, edge)
    out = np.empty(centres.size)
    last = signal.size - 1
    for start in range(0, centres.size, CHUNK_BEATS):
        part = centres[start : start + CHUNK_BEATS]
        values = signal[np.clip(part[:, None] + cols[None, :], 0, last)].astype(np.float64)
        a, b = sizes[0], sizes[0] + sizes[1]
        means = np.stack([values[:, :a].mean(axis=1), values[:, a:b].mean(axis=1), values[:, b:].mean(axis=1)], axis=1)
        out[start : start + part.size] = np.median(means, axis=1)
    return out


@dataclass
class Excursions:
    """Beat levels moved by the cleaning: per-beat excess, affected stretches."""

    value: float | None
    spans: list
    affected: int
    measured: int
    allowance: float


def baseline_excursions(
    original: np.ndarray,
    cleaned: np.ndarray,
    centres: np.ndarray,
    labels: np.ndarray,
    fs: float,
    pre: int,
    post: int,
    iso: slice,
    to_limit_unit: float,
    warn: float | None,
) -> Excursions:
    """How far the cleaning moved beats from their level beyond where the original had them.

    For every beat, its level (:func:`anchor_levels`) in the original
    (``Lx``) and in the cleaned trace (``Ly``); the excursion is the part of
    the removed level ``Lx - Ly`` that no slow version of the original's own
    level explains (:func:`unexplained_level`): near zero for a cleaning that
    keeps, partly removes or flattens the original's baseline wander,
    positive for a level shift or the start-up swoop of a high-pass filter. Interior
    beats are judged through the running median over :data:`STRETCH_BEATS`
    beats; the first and last beat of the record and of each stretch between
    pauses are judged alone (an excursion added at an end decays within a few
    beats), with :data:`END_K` standard errors of a single beat's level. The
    trace before the first and after the last whole beat window is left to
    the edge check (:func:`~tracevet.assessment.signal_checks.edge_deviation`).

    Parameters
    ----------
    to_limit_unit : float
        Factor from record units to the limit's unit (mV per unit, or 1/R).
    warn : float or None
        The lowest limit in force, in the limit's unit (stretches beyond it,
        after the noise allowance, are returned).
    """
    n = original.size
    edge = max(1, int(round(0.03 * fs)))
    whole = (centres >= pre) & (centres < n - post)  # beats with their whole window (anchors) in the trace
    if np.count_nonzero(whole) < 2 or warn is None:
        return Excursions(None, [], 0, 0, 0.0)
    cut = cut_end_beats(original, cleaned, centres, labels, whole, pre, post, iso, edge)
    centres, labels = centres[whole], labels[whole]
    lx = anchor_levels(original, centres, pre, post, iso, edge)
    ly = anchor_levels(cleaned, centres, pre, post, iso, edge)
    times = centres / fs
    group = np.where(labels == 1, 1.0, 0.0)
    removed = lx - ly
    widths = tuple(max(1, int(round(w * fs))) for w in LEVEL_SCALES_S)
    slow = trace_means(original, np.round(times * fs).astype(np.int64), widths)
    excess = np.minimum(unexplained_level(lx, removed, slow, group), off_cleaned_level(ly, group)) * to_limit_unit
    n_beats = centres.size
    sigma = robust_sigma(excess[:n_beats])
    # Beyond what the interior shows: the residual's own robust spread over
    # the record (LEVEL_K robust s.d.) also bounds the allowance.
    spread = LEVEL_K * MAD_TO_SD * float(np.median(excess[:n_beats]))
    allow_stretch = max(noise_k(STRETCH_BEATS) * median_se(sigma, STRETCH_BEATS), spread)
    allow_end = max(END_K * sigma, spread)
    judged = running_median(excess[:n_beats])
    beyond = judged > max(warn, allow_stretch)
    values = [float(np.max(judged))]
    # Ends: the first and last beat of the record and of every stretch between pauses.
    rr = float(np.median(np.diff(centres))) if n_beats > 1 else n
    pause = np.flatnonzero(np.diff(centres) > max(GAP_MIN_S * fs, GAP_RR * rr))
    end_beats = np.unique(np.concatenate([[0, n_beats - 1], pause, pause + 1]))
    end_hit = excess[end_beats] > max(warn, allow_end)
    beyond[end_beats[end_hit]] = True
    values.append(float(np.max(excess[end_beats])))
    flagged_centres = [int(c) for c in centres[beyond]]
    for c, value in cut:
        value *= to_limit_unit
        values.append(value)
        if value > max(warn, allow_end):
            flagged_centres.append(c)
    spans = [((c - pre) / fs, (c + post) / fs) for c in sorted(flagged_centres)]
    spans = [(max(0.0, a), min(n / fs, b)) for a, b in spans]
    affected = len(flagged_centres)
    return Excursions(max(values), spans, affected, int(n_beats + len(cut)), max(allow_stretch, 0.0))


# Whole beats of the dominant group next to a beat cut by an end that give its reference levels.
CUT_NEIGHBOURS = 4
# Whole beats, beyond the neighbours, read the same way as a cut beat: the cut beat must exceed
# the largest of their readings (what the record's own wander does to this reading).
CUT_REFERENCE_BEATS = 12


def cut_end_beats(
    original: np.ndarray,
    cleaned: np.ndarray,
    centres: np.ndarray,
    labels: np.ndarray,
    whole: np.ndarray,
    pre: int,
    post: int,
    iso: slice,
    edge: int,
) -> list[tuple[int, float]]:
    """Excursions at the beats cut by the start or end of the trace: ``[(centre, excess), ...]`` (record units).

    The last beat before an end sits where an excursion added at that end is
    largest, but its window is cut: it is read on the two anchors inside the
    trace (PQ junction and first 30 ms before an end; PQ junction and last
    30 ms after a start), and so are its :data:`CUT_NEIGHBOURS` nearest whole
    beats of the dominant group, so that a wave under one anchor biases all
    alike. With ``dr`` the change of the removed level (original minus
    cleaned) from the neighbours' median to the cut beat and ``do`` that of
    the original's level, a cleaning that removes none, part or all of the
    original's change leaves ``dr`` between 0 and ``do``; the distance of
    ``dr`` from that interval, less the largest such distance of up to
    :data:`CUT_REFERENCE_BEATS` whole beats farther in (each read the same way
    against its own inward neighbours: what the record's own wander does to
    this reading), is the excess. Beats whose PQ anchor is outside the trace
    are not read.
    """
    out: list[tuple[int, float]] = []
    m = pre + post + 1
    spans = {"first": (0, edge), "iso": (iso.start, iso.stop), "last": (m - edge, m)}
    inside = np.flatnonzero(whole)
    if inside.size < 2:
        return out
    for index, anchors, side in ((inside[0] - 1, ("iso", "last"), 1), (inside[-1] + 1, ("first", "iso"), -1)):
        if index < 0 or index >= centres.size:
            continue
        c = int(centres[index])
        if any(c - pre + spans[a][0] < 0 or c - pre + spans[a][1] > original.size for a in anchors):
            continue
        pool = inside if side == 1 else inside[::-1]
        pool = pool[labels[pool] == 0] if np.any(labels[pool] == 0) else pool
        pool = centres[pool[: 2 * CUT_NEIGHBOURS + CUT_REFERENCE_BEATS]].astype(np.int64)
        if pool.size < CUT_NEIGHBOURS + 1:
            continue
        at = np.concatenate([[c], pool]) - pre
        reads = [spans[a] for a in anchors]
        lx, ly = _anchors_mean(original, at, reads), _anchors_mean(cleaned, at, reads)
        # Position 0 is the cut beat; the reference beats start CUT_NEIGHBOURS whole beats inward,
        # out of reach of an excursion that decays within a few beats.
        targets = np.concatenate([[0], np.arange(CUT_NEIGHBOURS + 1, lx.size - CUT_NEIGHBOURS)])
        excess = _outside_change(lx, ly, targets)
        reference = float(np.max(excess[1:])) if excess.size > 1 else 0.0
        out.append((c, max(0.0, float(excess[0]) - reference)))
    return out


def _anchors_mean(signal: np.ndarray, starts: np.ndarray, reads: list) -> np.ndarray:
    """Mean over ``reads`` (``(first, stop)`` offsets) of each anchor's mean, for windows starting at ``starts``."""
    parts = [signal[starts[:, None] + np.arange(a, b)[None, :]].astype(np.float64).mean(axis=1) for a, b in reads]
    return np.mean(parts, axis=0)


def _outside_change(lx: np.ndarray, ly: np.ndarray, targets: np.ndarray) -> np.ndarray:
    """For each target position, the distance of its removed-level change from [0, original change].

    Changes are taken from the median of the next :data:`CUT_NEIGHBOURS`
    positions (the beats inward of the target); see :func:`cut_end_beats`.
    """
    nb = targets[:, None] + np.arange(1, CUT_NEIGHBOURS + 1)[None, :]
    removed = lx - ly
    dr = removed[targets] - np.median(removed[nb], axis=1)
    do = lx[targets] - np.median(lx[nb], axis=1)
    low, high = np.minimum(0.0, do), np.maximum(0.0, do)
    return np.maximum(np.maximum(low - dr, dr - high), 0.0)


# Robust s.d. of the unexplained level over the record an excursion must exceed (common practice).
LEVEL_K = 4.0
# Share of the removed level by which a cleaning's baseline estimate may differ
# from a linear smoothing of the original (a running median under ectopic
# beats, a filter's side lobes); our choice, tuned on tests/fidelity_cases.py.
FIT_TOLERANCE = 0.25
# Time scales (s) of the slow content of the original a cleaning may remove.
LEVEL_SCALES_S = (1.0, 2.0, 4.0, 8.0, 16.0, 32.0)


def trace_means(signal: np.ndarray, at: np.ndarray, widths: tuple, chunk: int = 1 << 20) -> np.ndarray:
    """Mean of ``signal`` over [i - w/2, i + w/2) (clipped to the trace) at every sample ``at``, for each width w.

    From a cumulative sum accumulated chunk by chunk, read only where it is
    needed, so a 24-hour trace needs no full-length copy. Returns an array
    ``(at.size, len(widths))``.
    """
    n = signal.size
    at = np.asarray(at, dtype=np.int64)
    lo = np.clip(at[:, None] - np.asarray(widths)[None, :] // 2, 0, n)
    hi = np.clip(lo + np.asarray(widths)[None, :], 0, n)
    points = np.concatenate([lo.ravel(), hi.ravel()])
    order = np.argsort(points, kind="stable")
    sorted_points = points[order]
    values = np.empty(points.size)
    total = 0.0
    first = 0
    for start in range(0, n, chunk):
        part = np.cumsum(signal[start : start + chunk], dtype=np.float64)
        last = int(np.searchsorted(sorted_points, start + part.size, side="left"))
        idx = sorted_points[first:last] - start  # csum[i] = sum of signal[:i]
        values[order[first:last]] = total + np.where(idx > 0, part[np.maximum(idx - 1, 0)], 0.0)
        total += float(part[-1])
        first = last
    values[order[first:]] = total
    sums = values[points.size // 2 :].reshape(hi.shape) - values[: points.size // 2].reshape(lo.shape)
    return sums / np.maximum(hi - lo, 1)


def off_cleaned_level(ly: np.ndarray, group: np.ndarray) -> np.ndarray:
    """How far each beat's cleaned level lies from the usual level of its group in the cleaned trace (record units).

    ``|Ly - median(Ly of the group)|``. An excursion is only one where the
    cleaned beats sit off the cleaned record's own level: where the cleaned
    trace is level, nothing was moved, whatever the fit of the removed part
    (:func:`unexplained_level`) makes of the original's wander near an end.
    """
    out = np.empty(ly.size, dtype=np.float64)
    for value in np.unique(group):
        members = group == value
        out[members] = np.abs(ly[members] - np.median(ly[members]))
    return out


def _first_inliers(lx: np.ndarray, target: np.ndarray, group: np.ndarray) -> np.ndarray:
    """Beats whose removed level a straight line in the original's level explains (trimmed least squares).

    The start of :func:`unexplained_level`'s robust fit. Few parameters
    (slope, constant, second-group constant): an added level shift or swoop
    cannot be fitted away and stays out, while beats on the original's own
    wander, however large or fast, stay in. (Trimming on the removed level
    itself dropped exactly the beats where a faithful cleaning removed the
    most wander, and the fit, held to the range of the beats kept, could then
    never explain them: fast swings of record 208 were flagged.)
    """
    columns = [np.ones_like(lx), lx - np.median(lx)]
    if np.any(group > 0):
        columns.append(group)
    design = np.stack(columns, axis=1)
    keep = np.ones(target.size, dtype=bool)
    for _ in range(4):
        if keep.sum() <= 8:
            return np.ones(target.size, dtype=bool)
        coef, *_ = np.linalg.lstsq(design[keep], target[keep], rcond=None)
        residual = target - design @ coef
        centre = float(np.median(residual[keep]))
        spread = MAD_TO_SD * float(np.median(np.abs(residual[keep] - centre)))
        new_keep = np.abs(residual - centre) <= 2.5 * spread if spread > 0 else keep
        if np.array_equal(new_keep, keep):
            break
        keep = new_keep
    return keep if keep.sum() > 8 else np.ones(target.size, dtype=bool)


def unexplained_level(lx: np.ndarray, removed: np.ndarray, slow: np.ndarray, group: np.ndarray) -> np.ndarray:
    """The part of the removed level (original minus cleaned) that no slow version of the original explains.

    A cleaning that removes baseline wander takes out a slow (low-passed)
    version of the original, whatever its cutoff: nothing, part or all of
    it. The removed level is fitted by least squares on the original's level
    itself and the moving means of the original trace (``slow``, one column
    per time scale, beats included: a high-pass also takes out the beats'
    own mean) plus a constant and a constant for the second morphology group,
    weights >= 0 (non-negative least squares), first on the beats a straight
    line in the original's level explains (:func:`_first_inliers`), then
    refitted without the beats whose residual is beyond 2.5 robust s.d.
    until the set settles (robust regression by trimming, common practice). A level shift or a
    start-up swoop the cleaning added is not in the original and stays in
    the residual. Returned: the residual's size less :data:`FIT_TOLERANCE`
    times the removed level's own size (record units, >= 0).
    """
    from scipy.optimize import nnls

    # Each slow version enters with a weight >= 0 (a cleaning removes a
    # fraction of the original's slow content, never its opposite): the
    # weights stay bounded although the columns are nearly collinear
    # (non-negative least squares, Lawson & Hanson 1974). The constants
    # (overall and second group) take either sign.
    ones = np.ones_like(lx)
    columns = [ones, -ones, lx - np.median(lx)] + [slow[:, j] - np.median(slow[:, j]) for j in range(slow.shape[1])]
    if np.any(group > 0):
        columns += [group, -group]
    design = np.stack(columns, axis=1)
    target = removed
    scale = np.maximum(np.abs(design).max(axis=0), 1e-300)
    design = design / scale
    keep = _first_inliers(lx, target, group)
    residual = target - np.median(target)
    for _ in range(6):
        if keep.sum() <= 8:
            break
        coef, _ = nnls(design[keep], target[keep])
        # No extrapolation: each column held to the range of the beats fitted.
        held = np.clip(design, design[keep].min(axis=0), design[keep].max(axis=0))
        residual = target - held @ coef
        spread = MAD_TO_SD * float(np.median(np.abs(residual[keep])))
        new_keep = np.abs(residual) <= 2.5 * spread if spread > 0 else keep
        if np.array_equal(new_keep, keep) or new_keep.sum() <= 8:
            break
        keep = new_keep
    # A cleaning's own baseline estimate (a running median, a filter with
    # side lobes) differs from any such smoothing by part of what it removes.
    size = np.abs(target - np.median(target))
    return np.maximum(0.0, np.abs(residual) - FIT_TOLERANCE * size)


def excursion_flag(channel: str, exc: Excursions, limits: Limits) -> Flag | None:
    """The ``baseline-excursion`` flag from :func:`baseline_excursions` (``None`` below the limits)."""
    if exc.value is None or not exc.spans:
        return None
    return judge(RULE["baseline-excursion"], channel, exc.value, limits)
