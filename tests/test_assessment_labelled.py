"""Detection rate and false-flag rate on a small labelled set of faithful and distorted pairs.

Pairs from tests/fidelity_cases.py: synthetic ECG (McSharry et al. 2003) at
125-2000 Hz with white, muscle, baseline-wander, mains and electrode-motion
noise, synthetic MCG in pT, and the real MIT-BIH record 208 excerpt; each
distortion has a known size beyond its clinical tolerance. The quality target
of the product: at least 97 % of distorted pairs flagged, at most 5 % of
faithful pairs flagged, no crash. benchmarks/eval_fidelity.py runs the larger grid.
"""

from __future__ import annotations

import pytest

import fidelity_cases as fc
from tracevet.assessment import assess

SOURCES = [
    lambda: fc.synthetic_source(125.0, "muscle", seed=11, heart_rate=70.0),
    lambda: fc.synthetic_source(250.0, "wander", seed=12, heart_rate=95.0, ectopic_every=6),
    lambda: fc.synthetic_source(360.0, "mains", seed=13, heart_rate=55.0),
    lambda: fc.synthetic_source(500.0, "white", seed=14, heart_rate=70.0, scale=2.0),
    lambda: fc.synthetic_source(1000.0, "motion", seed=15, heart_rate=80.0),
    lambda: fc.synthetic_source(2000.0, "white", seed=16, heart_rate=65.0, duration_s=12.0),
    lambda: fc.mcg_source(500.0, seed=17, noise_pt=1.0),
    lambda: fc.mitdb_source(30.0, duration_s=25.0),
]


def _cases():
    for make in SOURCES:
        src = make()
        real = src.clean is None
        yield fc.make_case(src, "default", None)
        if not real:
            yield fc.make_case(src, "ideal", None)
        for distortion in fc.DISTORTIONS:
            yield fc.make_case(src, "default" if real else "ideal", distortion)


@pytest.fixture(scope="module")
def outcomes():
    rows = []
    for case in _cases():
        result = assess(case.original, case.cleaned)  # beats from detect_qrs, as in use
        rows.append((case, result))
    return rows


def test_distorted_pairs_are_flagged(outcomes):
    distorted = [(c, r) for c, r in outcomes if c.distorted]
    missed = [c.name for c, r in distorted if not r.flags]
    rate = 1.0 - len(missed) / len(distorted)
    assert len(distorted) >= 60
    assert rate >= 0.97, f"detection {100 * rate:.1f} %, missed: {missed}"


def test_faithful_pairs_are_not_flagged(outcomes):
    faithful = [(c, r) for c, r in outcomes if not c.distorted]
    wrong = [(c.name, [f.id for f in r.flags]) for c, r in faithful if r.flags]
    assert len(faithful) >= 14
    assert len(wrong) / len(faithful) <= 0.05, f"false flags: {wrong}"


def test_every_distortion_kind_is_caught_somewhere(outcomes):
    caught = {c.category for c, r in outcomes if c.distorted and r.worst_severity == "fail"}
    assert caught == set(fc.DISTORTIONS)
