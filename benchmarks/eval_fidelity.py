"""Detection and false-flag rates of the fidelity assessment on the labelled set.

Run: PYTHONPATH=src:tests python benchmarks/eval_fidelity.py [--quick] [--verbose]
     [--random N --seed S]

Prints, per category, how many pairs were flagged (any flag, and at least
one fail flag), the overall detection rate on distorted pairs and the
false-flag rate on faithful pairs. ``--random N`` replaces the grid by N
random sources (rate 125-2000 Hz, 45-150 bpm, 10-30 s, noise type and level
up to three times the grid's strongest, one in five an MCG), each giving two
faithful pairs and one pair with a random distortion.
"""

from __future__ import annotations

import argparse
import sys
import time
from collections import defaultdict
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path[:0] = [str(ROOT / "src"), str(ROOT / "tests")]

import numpy as np  # noqa: E402

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
                sources.append(
                    fc.synthetic_source(
                        fs, noise, seed=int(fs) * 10 + seed, heart_rate=hr, ectopic_every=ect, scale=scale
                    )
                )
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


def random_cases(count: int, seed: int):
    """Yield (source, cleaning, distortion) for ``count`` random sources."""
    rng = np.random.default_rng(seed)
    for _ in range(count):
        fs = float(rng.choice([125, 200, 250, 360, 500, 1000, 2000]))
        hr = float(rng.uniform(45, 150))
        duration = float(rng.uniform(10, 30))
        noise = str(rng.choice(["white", "muscle", "wander", "mains", "motion"]))
        scale = float(rng.choice([0.5, 1, 2, 3]))
        ectopic = int(rng.choice([0, 0, 4, 7])) or None
        source_seed = int(rng.integers(1_000_000))
        if rng.random() < 0.2:
            src = fc.mcg_source(fs, seed=source_seed, noise_pt=float(rng.choice([0.3, 1, 3])), duration_s=duration)
        else:
            src = fc.synthetic_source(fs, noise, seed=source_seed, duration_s=duration, heart_rate=hr,
                                      ectopic_every=ectopic, scale=scale)
        yield src, "default", None
        yield src, "ideal", None
        yield src, "ideal", str(rng.choice(list(fc.DISTORTIONS)))


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__)
    parser.add_argument("--quick", action="store_true")
    parser.add_argument("--verbose", action="store_true")
    parser.add_argument("--random", type=int, default=0, metavar="N", help="N random sources instead of the grid")
    parser.add_argument("--seed", type=int, default=1)
    args = parser.parse_args()
    counts = defaultdict(lambda: [0, 0, 0])  # total, any flag, fail flag
    crashes = 0
    misses = []
    t0 = time.perf_counter()
    cases = random_cases(args.random, args.seed) if args.random else grid(args.quick)
    for src, cleaning, distortion in cases:
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
                          f"shape={m['beat_shape_change_percent']} shift={m['r_timing_shift_ms']} "
                          f"edge={m['edge_deviation']}")
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
    print(
        f"distorted pairs: {dist[0]}, flagged {100 * dist[1] / max(dist[0], 1):.1f}% (fail "
        f"{100 * dist[2] / max(dist[0], 1):.1f}%)"
    )
    print(
        f"faithful pairs: {faith[0]}, flagged {100 * faith[1] / max(faith[0], 1):.1f}% (fail "
        f"{100 * faith[2] / max(faith[0], 1):.1f}%)"
    )
    print(f"crashes: {crashes}; {elapsed:.1f} s")
    for line in misses:
        print(line)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
