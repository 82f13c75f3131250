"""Detection and false-flag rates of the fidelity assessment on the labelled set.

Run: PYTHONPATH=src:tests python benchmarks/eval_fidelity.py [--quick] [--verbose]

Prints, per category, how many pairs were flagged (any flag, and at least
one fail flag), the overall detection rate on distorted pairs and the
false-flag rate on faithful pairs.
"""

from __future__ import annotations

import argparse
import sys
import time
from collections import defaultdict
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path[:0] = [str(ROOT / "src"), str(ROOT / "tests")]

import fidelity_cases as fc  # noqa: E402
from tracevet.assessment import assess  # noqa: E402


def grid(quick: bool):
    """Yield labelled cases over rates, noise types, MCG and the real excerpt."""
    rates = (125.0, 250.0, 360.0, 500.0, 1000.0, 2000.0)
    noises = ("white", "muscle", "wander", "mains", "motion")
    seeds = (1,) if quick else (1, 2)
    sources = []
    for fs in rates:
        for noise in noises:
            for seed in seeds:
                hr = (55.0, 70.0, 95.0)[(seed + int(fs)) % 3]
                ect = 6 if (seed + int(fs) // 125) % 3 == 0 else None
                scale = (0.5, 1.0, 2.0)[(seed + len(noise)) % 3]
                sources.append(fc.synthetic_source(fs, noise, seed=int(fs) * 10 + seed, heart_rate=hr, ectopic_every=ect, scale=scale))
    for fs in (250.0, 1000.0):
        for seed in seeds:
            sources.append(fc.mcg_source(fs, seed=seed, noise_pt=(0.5, 2.0)[seed % 2]))
    starts = (0.0, 120.0) if quick else (0.0, 60.0, 120.0, 240.0)
    for start in starts:
        sources.append(fc.mitdb_source(start))
    for src in sources:
        real = src.clean is None
        cleanings = ("default",) if real else ("default", "ideal")
        for cleaning in cleanings:
            yield src, cleaning, None
        for distortion in fc.DISTORTIONS:
            yield src, ("default" if real else "ideal"), distortion
        if not quick and not real:
            for name in fc.AGGRESSIVE:
                yield src, name, None


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__)
    parser.add_argument("--quick", action="store_true")
    parser.add_argument("--verbose", action="store_true")
    args = parser.parse_args()
    counts = defaultdict(lambda: [0, 0, 0])  # total, any flag, fail flag
    crashes = 0
    misses = []
    t0 = time.perf_counter()
    for src, cleaning, distortion in grid(args.quick):
        case = fc.make_case(src, cleaning, distortion)
        try:
            result = assess(case.original, case.cleaned)
        except Exception as exc:  # counted, never hidden
            crashes += 1
            print(f"CRASH {case.name}: {type(exc).__name__}: {exc}")
            continue
        if case.category.startswith("borderline"):
            counts[case.category][0] += 1
            counts[case.category][1] += bool(result.flags)
            counts[case.category][2] += result.worst_severity == "fail"
            continue
        row = counts[case.category]
        row[0] += 1
        row[1] += bool(result.flags)
        row[2] += result.worst_severity == "fail"
        wrong = bool(result.flags) != case.distorted
        if wrong or args.verbose:
            ids = ",".join(f"{f.severity[0]}:{f.id}" for f in result.flags)
            m = result.metrics
            misses.append(f"{'WRONG ' if wrong else ''}{case.name}: [{ids}] r={m['r_amplitude_ratio']} "
                          f"qrs={m['qrs_width_change_ms']} st={m['st_change']} p={m['p_amplitude_ratio']} "
                          f"t={m['t_amplitude_ratio']} ring={m['ringing_rms']} frac={m['removed_beat_fraction']} "
                          f"shape={m['beat_shape_change_percent']} shift={m['r_timing_shift_ms']} edge={m['edge_deviation']}")
    elapsed = time.perf_counter() - t0
    print(f"{'category':24s} {'pairs':>5s} {'any flag':>9s} {'fail':>6s}")
    dist = [0, 0, 0]
    faith = [0, 0, 0]
    for cat in sorted(counts):
        total, anyf, fail = counts[cat]
        print(f"{cat:24s} {total:5d} {100 * anyf / total:8.1f}% {100 * fail / total:5.1f}%")
        if cat.startswith("borderline"):
            continue
        target = faith if cat.startswith("faithful") else dist
        for i in range(3):
            target[i] += counts[cat][i]
    print(f"distorted pairs: {dist[0]}, flagged {100 * dist[1] / max(dist[0], 1):.1f}% (fail {100 * dist[2] / max(dist[0], 1):.1f}%)")
    print(f"faithful pairs: {faith[0]}, flagged {100 * faith[1] / max(faith[0], 1):.1f}% (fail {100 * faith[2] / max(faith[0], 1):.1f}%)")
    print(f"crashes: {crashes}; {elapsed:.1f} s")
    for line in misses:
        print(line)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
