"""Labelled noisy set: does the default cleaning remove noise and add none? (issue 10)

Run: ``PYTHONPATH=src nice -n 10 python benchmarks/eval_noisy_set.py [--split report|tune] [--quick]
[--candidates NAME ...] [--verbose]``

The set (truth known) is built here, from seeds that depend on ``--split``: ``tune`` (seeds 1000+)
is what the defaults were chosen on, ``report`` (seeds 5000+, other windows of the real record) is
what the figures in docs/cleaning.md come from. Every record is

* a truth: a window of the real MIT-BIH record 208 excerpt (tests/data, mV = (adu - 1024) / 200,
  360 Hz native or resampled to 250/500/1000 Hz with ``scipy.signal.resample_poly``; its median
  removed), or McSharry-model ECG (mV) or MCG (pT) from :mod:`tracevet.synthetic` at 250-1000 Hz,
  10-60 s, 50-120 bpm, some with ectopic beats;
* plus noise of one kind, scaled to an input SNR of 0, 5, 10 or 15 dB: ``muscle`` (band-limited
  EMG, sometimes bursty), ``mains`` (50 or 60 Hz with two harmonics, plus 2 % white noise),
  ``wander`` (0.1-0.4 Hz respiration-like drift and slow electrode drift, plus 2 % white noise),
  ``mix`` (muscle + mains + wander) and ``mix+motion`` (the mixture with electrode-motion artefacts).

Measures (truth ``x``, noisy ``y``, cleaned ``x^``):

* SNR_in = 10 log10(sum x^2 / sum (y - x)^2), SNR_out = 10 log10(sum x^2 / sum (x^ - x)^2), gain =
  SNR_out - SNR_in (common practice for denoising evaluations);
* PRD = 100 sqrt(sum (x - x^)^2 / sum x^2) % (Zigel, Cohen & Katz 2000, IEEE TBME 47(11):1424-1430,
  on zero-baseline data as here);
* per beat, at the truth's R peaks: R amplitude = extreme within 25 ms minus the PR level (median of
  R-110..R-60 ms); ST level = mean of R+90..R+110 ms (R+70..R+90 ms when RR < 0.6 s) minus the PR
  level; timing = position of the extreme within 25 ms. Per record: median over beats of the R
  amplitude error (%), |ST change| (mV; % of R for MCG) and |timing shift| (samples);
* ``tracevet.assessment.assess(truth, cleaned)``: does any flag have severity ``fail``?

Methods: ``bare`` (PyWavelets only: db4, 8 levels or the most ``pywt.dwt_max_level`` allows,
universal threshold from the finest level's MAD, soft, ``wavedec``/``waverec``), the built-in
profiles, and the candidates named on the command line. The last lines print the targets of
issue 10 with PASS/FAIL.
"""

from __future__ import annotations

import argparse
import math
import sys
import time
from pathlib import Path

import numpy as np
import pywt
from scipy import signal as sps

from tracevet import synthetic as syn
from tracevet.cleaning import PROFILES, apply_overrides, clean
from tracevet.recording import Recording

DATA = Path(__file__).resolve().parents[1] / "tests" / "data" / "mitdb-208-excerpt.npz"
SNRS = (0.0, 5.0, 10.0, 15.0)
NOISES = ("muscle", "mains", "wander", "mix", "mix+motion")

CANDIDATES: dict[str, tuple[str, ...]] = {
    "default": (),
}


def bare(x: np.ndarray, fs: float) -> np.ndarray:
    """db4, 8 levels (or the most allowed), universal threshold (finest MAD), soft."""
    level = min(8, pywt.dwt_max_level(x.size, pywt.Wavelet("db4").dec_len))
    coeffs = pywt.wavedec(x, "db4", level=level)
    sigma = np.median(np.abs(coeffs[-1])) / 0.6745
    lam = sigma * math.sqrt(2 * math.log(x.size))
    coeffs[1:] = [pywt.threshold(c, lam, mode="soft") for c in coeffs[1:]]
    return pywt.waverec(coeffs, "db4")[: x.size]


def real_truth(rng: np.random.Generator, fs: float, seconds: float, split: str) -> tuple[np.ndarray, np.ndarray | None]:
    """A window of record 208 (tune: first half of the excerpt, report: second half), median removed."""
    adu = np.load(DATA)["ecg"].astype(np.float64)
    mv = (adu - 1024) / 200
    half = mv.size // 2
    part = mv[:half] if split == "tune" else mv[half:]
    n = int(seconds * 360)
    start = int(rng.integers(0, part.size - n))
    x = part[start : start + n]
    if fs != 360.0:
        x = sps.resample_poly(x, int(fs), 360)
    return x - np.median(x), None


def make_record(index: int, split: str):
    """One labelled record: (truth, noisy, fs, kind, units, r_peaks or None, description)."""
    seed = (1000 if split == "tune" else 5000) + index
    rng = np.random.default_rng(seed)
    source = ("real", "ecg", "mcg")[index % 3]
    fs = float(rng.choice([250.0, 360.0, 500.0, 1000.0]) if source != "real" else rng.choice([360.0, 360.0, 250.0, 500.0, 1000.0]))
    seconds = float(rng.choice([10.0, 20.0, 30.0, 60.0]))
    noise_kind = NOISES[(index // 3) % len(NOISES)]
    snr = SNRS[(index // (3 * len(NOISES))) % len(SNRS)]
    hr = float(rng.uniform(50, 120))
    ectopic = int(rng.choice([0, 0, 7]))
    peaks = None
    if source == "real":
        x, _ = real_truth(rng, fs, seconds, split)
        units, kind = "mV", "ecg"
    elif source == "ecg":
        e = syn.synthetic_ecg(seconds, fs, heart_rate_bpm=hr, ectopic_every=ectopic or None, seed=seed)
        x, peaks, units, kind = e.signal, e.r_peaks, "mV", "ecg"
    else:
        e = syn.synthetic_mcg(seconds, fs, heart_rate_bpm=hr, ectopic_every=ectopic or None, seed=seed)
        x, peaks, units, kind = e.signal, e.r_peaks, "pT", "mcg"
    n = x.size
    scale = float(np.percentile(np.abs(x), 99.5))  # noise shapes in signal units
    mains_hz = float(rng.choice([50.0, 60.0]))

    def part(name: str) -> np.ndarray:
        s = int(rng.integers(0, 2**31))
        if name == "muscle":
            return syn.muscle_noise(n, fs, 0.1 * scale, seed=s, bursty=bool(rng.integers(0, 2)))
        if name == "mains":
            return syn.mains_hum(n, fs, mains_hz, 0.1 * scale, harmonics=3)
        if name == "wander":
            return syn.baseline_wander(n, fs, 0.3 * scale, breathing_hz=float(rng.uniform(0.1, 0.4)), seed=s)
        if name == "white":
            return syn.white_noise(n, 0.02 * scale, seed=s)
        if name == "motion":
            return syn.electrode_motion(n, fs, 0.4 * scale, events_per_min=3.0, seed=s)
        raise ValueError(name)

    if noise_kind == "muscle":
        noise = part("muscle")
    elif noise_kind == "mains":
        noise = part("mains") + 0.2 * part("white")
    elif noise_kind == "wander":
        noise = part("wander") + 0.2 * part("white")
    elif noise_kind == "mix":
        noise = part("muscle") + part("mains") + part("wander")
    else:
        noise = part("muscle") + part("mains") + part("wander") + part("motion")
    y = syn.add_noise_at_snr(x, noise, snr)
    desc = f"{source}/{noise_kind}/{snr:g}dB/{fs:g}Hz/{seconds:g}s"
    return x, y, fs, kind, units, peaks, desc


def beat_measures(z: np.ndarray, fs: float, peaks: np.ndarray, rr_s: float):
    """R amplitude, ST level and extreme position per beat (see the module docstring)."""
    w = max(1, int(0.025 * fs))
    pr = (int(0.110 * fs), int(0.060 * fs))
    st = (int(0.070 * fs), int(0.090 * fs)) if rr_s < 0.6 else (int(0.090 * fs), int(0.110 * fs))
    ok = (peaks - pr[0] >= 0) & (peaks + max(w, st[1]) < z.size)
    peaks = peaks[ok]
    idx = peaks[:, None] + np.arange(-w, w + 1)[None, :]
    win = z[idx]
    pr_level = np.median(z[peaks[:, None] + np.arange(-pr[0], -pr[1])[None, :]], axis=1)
    st_level = np.mean(z[peaks[:, None] + np.arange(st[0], st[1])[None, :]], axis=1) - pr_level
    return peaks, win, pr_level, st_level


def score(x, xhat, fs, kind, peaks):
    """Per-record R amplitude error %, |ST change| (mV or % of R), |timing shift| samples."""
    rr = float(np.median(np.diff(peaks)) / fs) if peaks.size > 1 else 1.0
    p, wt, prt, stt = beat_measures(x, fs, peaks, rr)
    _, wo, pro, sto = beat_measures(xhat, fs, peaks, rr)
    pick = np.argmax(np.abs(wt - prt[:, None]), axis=1)  # the truth's extreme (R, or the deepest wave)
    rows = np.arange(p.size)
    amp_t = wt[rows, pick] - prt
    amp_o = wo[rows, pick] - pro
    r_err = np.median(np.abs(amp_o - amp_t) / np.maximum(np.abs(amp_t), 1e-12)) * 100
    st = np.median(np.abs(sto - stt))
    if kind == "mcg":
        st = st / np.median(np.abs(amp_t)) * 100
    sign = np.sign(amp_t)[:, None]
    shift = np.median(np.abs(np.argmax(sign * (wo - pro[:, None]), axis=1) - np.argmax(sign * (wt - prt[:, None]), axis=1)))
    return float(r_err), float(st), float(shift)


def snr_db(x, e):
    return 10 * math.log10(float(np.sum(x * x)) / max(float(np.sum(e * e)), 1e-300))


def truth_peaks(x, fs, peaks):
    if peaks is not None:
        return np.asarray(peaks)
    from tracevet.assessment.qrs import detect_qrs

    return np.asarray(detect_qrs(x, fs))


def run(split: str, count: int, methods: dict, with_assess: bool, verbose: bool):
    from tracevet.assessment import assess

    rows = {m: [] for m in methods}
    rows["bare"] = []
    timing = {m: 0.0 for m in rows}
    for i in range(count):
        x, y, fs, kind, units, peaks, desc = make_record(i, split)
        peaks = truth_peaks(x, fs, peaks)
        snr_in = snr_db(x, y - x)
        truth_rec = Recording(x[:, None], fs, ("I",), units=units, kind=kind)
        noisy_rec = Recording(y[:, None], fs, ("I",), units=units, kind=kind)
        outs = {}
        t0 = time.perf_counter()
        outs["bare"] = bare(y, fs)
        timing["bare"] += time.perf_counter() - t0
        for name, settings in methods.items():
            t0 = time.perf_counter()
            outs[name] = clean(noisy_rec, settings).samples[:, 0]
            timing[name] += time.perf_counter() - t0
        for name, out in outs.items():
            gain = snr_db(x, out - x) - snr_in
            prd = 100 * math.sqrt(float(np.sum((x - out) ** 2)) / float(np.sum(x * x)))
            r_err, st, shift = score(x, out, fs, kind, peaks)
            failed = None
            if with_assess and name != "bare":
                a = assess(truth_rec, Recording(out[:, None], fs, ("I",), units=units, kind=kind))
                failed = [f.id for f in a.flags if f.severity == "fail"]
            rows[name].append(dict(desc=desc, kind=kind, snr_in=snr_in, gain=gain, prd=prd, r=r_err, st=st, shift=shift, failed=failed))
            if verbose:
                print(f"{i:3d} {desc:34s} {name:12s} in {snr_in:5.1f} gain {gain:6.2f} R {r_err:5.1f}% ST {st:.3f} "
                      f"shift {shift:.1f} {'' if not failed else 'FAIL ' + ','.join(failed)}", flush=True)
    return rows, timing


def summary(rows, timing):
    print(f"{'method':14s} {'med gain':>8s} {'min gain':>8s} {'worse':>5s} {'R err%':>6s} {'|ST|mV':>7s} {'ST%R':>6s} "
          f"{'shift':>5s} {'PRD%':>6s} {'fail%':>6s} {'time s':>7s}")
    out = {}
    for name, rs in rows.items():
        gain = np.array([r["gain"] for r in rs])
        ecg = [r["st"] for r in rs if r["kind"] == "ecg"]
        mcg = [r["st"] for r in rs if r["kind"] == "mcg"]
        fails = [bool(r["failed"]) for r in rs if r["failed"] is not None]
        s = dict(
            gain=float(np.median(gain)), min_gain=float(gain.min()), worse=int(np.sum(gain < 0)),
            r=float(np.median([r["r"] for r in rs])), st_mv=float(np.median(ecg)) if ecg else float("nan"),
            st_pct=float(np.median(mcg)) if mcg else float("nan"), shift=float(np.median([r["shift"] for r in rs])),
            prd=float(np.median([r["prd"] for r in rs])), fail=100 * float(np.mean(fails)) if fails else float("nan"),
        )
        out[name] = s
        print(f"{name:14s} {s['gain']:8.2f} {s['min_gain']:8.2f} {s['worse']:5d} {s['r']:6.2f} {s['st_mv']:7.4f} "
              f"{s['st_pct']:6.2f} {s['shift']:5.1f} {s['prd']:6.1f} {s['fail']:6.1f} {timing[name]:7.1f}")
    return out


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--split", choices=("tune", "report"), default="report")
    parser.add_argument("--count", type=int, default=120, help="records (multiples of 60 cover every source/noise/SNR)")
    parser.add_argument("--quick", action="store_true", help="30 records, no assessment")
    parser.add_argument("--no-assess", action="store_true")
    parser.add_argument("--candidate", action="append", default=[], metavar="NAME=K=V,K=V",
                        help="extra settings to compare, over the default: name=level=5,rule=universal")
    parser.add_argument("--verbose", action="store_true")
    args = parser.parse_args(argv)
    methods = {name: settings for name, settings in PROFILES.items()}
    for text in args.candidate:
        name, _, body = text.partition("=")
        methods[name] = apply_overrides(PROFILES["default"], [kv for kv in body.split(",") if kv])
    count = 30 if args.quick else args.count
    rows, timing = run(args.split, count, methods, not (args.quick or args.no_assess), args.verbose)
    print(f"\nsplit {args.split}, {count} records (sources real/ecg/mcg x noises {', '.join(NOISES)} x SNR_in "
          f"{', '.join(f'{s:g}' for s in SNRS)} dB)")
    s = summary(rows, timing)
    d, b = s["default"], s["bare"]
    checks = [
        ("median SNR gain >= bare + 2 dB", d["gain"] >= b["gain"] + 2.0, f"{d['gain']:.2f} vs {b['gain']:.2f}"),
        ("no record worse than its input", d["worse"] == 0, f"{d['worse']} worse, min gain {d['min_gain']:.2f} dB"),
        ("median R amplitude error <= 2 %", d["r"] <= 2.0, f"{d['r']:.2f} %"),
        ("median |ST change| <= 0.02 mV (ECG)", d["st_mv"] <= 0.02, f"{d['st_mv']:.4f} mV"),
        ("median |ST change| <= 1.5 % of R (MCG)", d["st_pct"] <= 1.5, f"{d['st_pct']:.2f} %"),
        ("median timing shift < 1 sample", d["shift"] < 1.0, f"{d['shift']:.1f}"),
    ]
    if not math.isnan(d["fail"]):
        checks.append(("assess: no fail flag on >= 95 %", d["fail"] <= 5.0, f"{100 - d['fail']:.1f} % without"))
    print()
    for label, ok, value in checks:
        print(f"{'PASS' if ok else 'FAIL'}  {label}: {value}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
