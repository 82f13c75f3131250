"""Quality and cost of ``tracevet suggest`` (the suggestion engine).

Run: ``PYTHONPATH=src:tests python benchmarks/bench_suggest.py [--quick] [--skip-day] [--skip-demo]
[--set fidelity|noisy|both] [--count N]``

1. **Demo queue** (``tracevet.demo``): each scenario record's intended cleaning (the
   demo's settings, or the boat pipeline for the pair) against the suggestion.
   Targets: no fail flag on the intended-bad records; same or better flags on
   the intended-good ones.
2. **Labelled noisy sets** (truth known): synthetic ECG (McSharry et al. 2003
   model, ``tests/fidelity_cases.py`` sources) at 250, 360 and 500 Hz with
   white, muscle, baseline-wander, mains and electrode-motion noise, and MCG
   with sensor noise; and the first ``--count`` records of issue 10's noisy
   set (``benchmarks/eval_noisy_set.py``, report split: windows of the real
   MIT-BIH 208 excerpt, McSharry ECG and MCG, 250-1000 Hz, 10-60 s, noise
   mixtures at 0-15 dB input SNR). SNR gain against the noise-free signal (both traces
   referred to their mean): ``10 log10(|x - s|^2 / |y - s|^2)``. Targets: the
   suggestion's median gain at least the default run's; no record worse than
   its input; never more flags than the default run.
3. **Noise-removed estimate against the truth**: for every record, every
   evaluated candidate's estimate against its truth-based SNR gain (the
   candidate cleaned on the whole record with ``tracevet.cleaning.clean``):
   the share of candidate pairs (within a record, tied in neither) ordered
   alike (a plain pair count), and the median Kendall tau-b per record.
   Target: at least 80 % of pairs.
4. **Time** (``suggest()`` only, the record in memory): a 1-minute record at
   360 and 500 Hz (target 3 s), a 24-hour record at 250 Hz (target 60 s).
"""

from __future__ import annotations

import argparse
import statistics
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path[:0] = [str(ROOT / "src"), str(ROOT / "tests"), str(ROOT / "benchmarks")]

import numpy as np  # noqa: E402

import fidelity_cases as fc  # noqa: E402
from tracevet import synthetic as syn  # noqa: E402
from tracevet.assessment import assess  # noqa: E402
from tracevet.cleaning import DEFAULT_SETTINGS, apply_overrides, clean  # noqa: E402
from tracevet.recording import Recording  # noqa: E402
from tracevet.suggestion import suggest  # noqa: E402
from tracevet.suggestion.noise import kendall_tau, pair_agreement  # noqa: E402


def flags_text(flags) -> str:
    """``fail:a,b warn:c`` or ``none``."""
    fails = sorted({f.id for f in flags if f.severity == "fail"})
    warns = sorted({f.id for f in flags if f.severity == "warn"})
    parts = ([f"fail:{','.join(fails)}"] if fails else []) + ([f"warn:{','.join(warns)}"] if warns else [])
    return " ".join(parts) or "none"


def severity_rank(flags) -> tuple[int, int]:
    """(fail count, warn count)."""
    return sum(f.severity == "fail" for f in flags), sum(f.severity == "warn" for f in flags)


def demo_part() -> bool:
    """Demo scenario: intended cleaning against the suggestion."""
    from tracevet import demo

    print("## Demo queue records (intended cleaning -> suggestion)\n")
    print("| record | intended bad | intended cleaning flags | suggestion | suggestion flags | s |")
    print("|---|---|---|---|---|---:|")
    ok = True
    for spec in demo.SCENARIO:
        rec = demo.make_recording(spec)
        if spec.external:
            current, cleaned = None, demo.boat_pipeline_clean(rec)
        else:
            current = apply_overrides(DEFAULT_SETTINGS, list(spec.overrides))
            cleaned = clean(rec, current)
        before = assess(rec, cleaned).flags
        t0 = time.perf_counter()
        s = suggest(rec, current=current)
        dt = time.perf_counter() - t0
        after = s.best.flags
        if spec.intended_flagged:
            good = s.best.n_fail == 0
        else:
            good = severity_rank(after) <= severity_rank(before)
        ok &= good
        print(f"| {spec.name} | {'yes' if spec.intended_flagged else 'no'} | {flags_text(before)} | "
              f"{s.best.change} | {flags_text(after)}{'' if good else ' **MISS**'} | {dt:.1f} |")
    print()
    return ok


def truth_gain(noisy: np.ndarray, cleaned: np.ndarray, truth: np.ndarray) -> float:
    """SNR gain in dB against the truth, every trace referred to its mean."""
    s = truth - truth.mean()
    x = noisy - noisy.mean()
    y = cleaned - cleaned.mean()
    return 10 * np.log10(np.sum((x - s) ** 2) / np.sum((y - s) ** 2))


class _Source:
    """A labelled record: truth, noisy version, rate, kind and units."""

    def __init__(self, name, clean, noisy, fs, kind, units):
        self.name, self.clean, self.noisy, self.fs, self.kind, self.units = name, clean, noisy, fs, kind, units


def noisy_set_sources(count: int):
    """The labelled noisy set of issue 10 (benchmarks/eval_noisy_set.py, ``report`` split)."""
    import eval_noisy_set as ens

    for index in range(count):
        x, y, fs, kind, units, _peaks, desc = ens.make_record(index, "report")
        yield _Source(f"{index:02d} {desc}", np.asarray(x, float), np.asarray(y, float), fs, kind, units)


def labelled_sources(quick: bool):
    """Sources with known truth (tests/fidelity_cases.py)."""
    rates = (250.0, 500.0) if quick else (250.0, 360.0, 500.0)
    seeds = (1,) if quick else (1, 2)
    for fs in rates:
        for noise in ("white", "muscle", "wander", "mains", "motion"):
            for seed in seeds:
                scale = (1.0, 2.0)[seed % 2]
                hr = (60.0, 75.0, 95.0)[(seed + int(fs)) % 3]
                yield fc.synthetic_source(fs, noise, seed, duration_s=30.0, heart_rate=hr, scale=scale)
    for seed in seeds:
        yield fc.synthetic_source(360.0, "muscle", seed + 10, duration_s=30.0, heart_rate=80.0, ectopic_every=6)
        yield fc.mcg_source(500.0, seed, noise_pt=2.0, duration_s=30.0)


def labelled_part(quick: bool, which: str = "fidelity", count: int = 30) -> bool:
    """SNR gains, flags against the default, and estimate-vs-truth ordering."""
    title = "issue-10 noisy set, report split" if which == "noisy" else "fidelity-case sources"
    print(f"## Labelled noisy set (truth known; {title})\n")
    print("| source | default gain dB | suggestion gain dB | default flags | suggestion flags | suggestion "
          "| pairs agree | tau |")
    print("|---|---:|---:|---|---|---|---:|---:|")
    d_gains, s_gains, worse, more_flags, agree, compared, taus = [], [], 0, 0, 0, 0, []
    n = 0
    sources = noisy_set_sources(count) if which == "noisy" else labelled_sources(quick)
    for src in sources:
        rec = Recording(src.noisy.reshape(-1, 1), src.fs, ("c",), units=src.units, kind=src.kind, source=src.name)
        default_clean = clean(rec, DEFAULT_SETTINGS)
        default_flags = assess(rec, default_clean).flags
        d_gain = truth_gain(src.noisy, default_clean.samples[:, 0], src.clean)
        s = suggest(rec)
        s_gain = truth_gain(src.noisy, s.cleaned.samples[:, 0], src.clean)
        est, tru = [], []
        for c in s.ranked:
            if c.error is None and c.noise_removed_db is not None:
                est.append(c.noise_removed_db)
                tru.append(truth_gain(src.noisy, clean(rec, c.settings).samples[:, 0], src.clean))
        a, m = pair_agreement(est, tru)
        tau = kendall_tau(est, tru)
        agree, compared = agree + a, compared + m
        taus.append(tau)
        d_gains.append(d_gain)
        s_gains.append(s_gain)
        worse += s_gain < 0
        more = len(s.best.flags) > len(default_flags)
        more_flags += more
        n += 1
        worse_mark = " **WORSE**" if s_gain < 0 else ""
        print(f"| {src.name} | {d_gain:.2f} | {s_gain:.2f}{worse_mark} | {flags_text(default_flags)} | "
              f"{flags_text(s.best.flags)}{' **MORE**' if more else ''} | {s.best.change} | {a}/{m} | {tau:.2f} |")
    print()
    share = agree / compared if compared else float("nan")
    print(f"- records: {n}; median SNR gain: default {statistics.median(d_gains):.2f} dB, "
          f"suggestion {statistics.median(s_gains):.2f} dB")
    print(f"- suggestion worse than its input: {worse}; more flags than the default run: {more_flags}")
    print(f"- estimate vs truth: {agree}/{compared} candidate pairs ordered alike "
          f"({100 * share:.1f} %, plain pair count); "
          f"median Kendall tau-b per record {statistics.median(taus):.2f}")
    print()
    return statistics.median(s_gains) >= statistics.median(d_gains) and worse == 0 and more_flags == 0 and share >= 0.8


def timing_part(skip_day: bool) -> bool:
    """Time for a 1-minute and a 24-hour record."""
    print("## Time (suggest() on a record in memory; 2 threads)\n")
    ok = True
    for fs in (360.0, 500.0):
        ecg = syn.synthetic_ecg(60.0, fs, heart_rate_bpm=72, seed=3).signal
        x = ecg + syn.muscle_noise(ecg.size, fs, 0.05, seed=4) + syn.baseline_wander(ecg.size, fs, 0.2, seed=5)
        rec = Recording(x.astype(np.float32).reshape(-1, 1), fs, ("II",), units="mV", kind="ecg")
        times = []
        for _ in range(3):
            t0 = time.perf_counter()
            s = suggest(rec)
            times.append(time.perf_counter() - t0)
        best = min(times)
        ok &= best <= 3.0
        print(f"- 1 minute at {fs:g} Hz: best of 3 {best:.2f} s (runs {', '.join(f'{t:.2f}' for t in times)}), "
              f"{len(s.ranked)} candidates")
    if not skip_day:
        fs = 250.0
        piece = syn.synthetic_ecg(600.0, fs, heart_rate_bpm=68, seed=7).signal.astype(np.float32)
        reps = int(np.ceil(24 * 3600 * fs / piece.size))
        x = np.tile(piece, reps)[: int(24 * 3600 * fs)]
        del piece
        x += syn.muscle_noise(x.size, fs, 0.04, seed=11).astype(np.float32)
        x += syn.baseline_wander(x.size, fs, 0.2, seed=21).astype(np.float32)
        rec = Recording(x.reshape(-1, 1), fs, ("II",), units="mV", kind="ecg")
        t0 = time.perf_counter()
        s = suggest(rec)
        dt = time.perf_counter() - t0
        ok &= dt <= 60.0
        print(f"- 24 hours at 250 Hz (21.6 M samples): {dt:.1f} s, {len(s.ranked)} candidates on {s.searched_on}, "
              f"result {s.best.change}: {s.best.flags_text()}")
    print()
    return ok


def main() -> int:
    """Run the parts asked for; exit 1 when a target is missed."""
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="fewer labelled records")
    parser.add_argument("--skip-day", action="store_true", help="no 24-hour timing")
    parser.add_argument("--skip-demo", action="store_true")
    parser.add_argument("--only-time", action="store_true")
    parser.add_argument("--skip-time", action="store_true")
    parser.add_argument("--set", dest="which", choices=("fidelity", "noisy", "both"), default="both",
                        help="labelled set: tests/fidelity_cases.py sources, issue 10's noisy set, or both")
    parser.add_argument("--count", type=int, default=30, help="records of the noisy set (default 30)")
    args = parser.parse_args()
    results = {}
    if not args.only_time:
        if not args.skip_demo:
            results["demo"] = demo_part()
        if args.which in ("fidelity", "both"):
            results["labelled (fidelity sources)"] = labelled_part(args.quick, "fidelity")
        if args.which in ("noisy", "both"):
            results["labelled (noisy set)"] = labelled_part(args.quick, "noisy", args.count)
    if not args.skip_time:
        results["time"] = timing_part(args.skip_day)
    print("targets:", ", ".join(f"{k} {'met' if v else 'MISSED'}" for k, v in results.items()))
    return 0 if all(results.values()) else 1


if __name__ == "__main__":
    sys.exit(main())
