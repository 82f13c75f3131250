"""Where a flag applies: the ``where`` stretches, beat counts, JSON and stored form (issue 9 contract)."""

from __future__ import annotations

import json

import numpy as np
import pytest

from tracevet import synthetic as syn
from tracevet.assessment import Assessment, Flag, assess
from tracevet.assessment.flags import WHERE_CAP, merge_stretches
from tracevet.recording import Recording


def test_merge_stretches_sorts_joins_and_caps():
    where, more = merge_stretches([5.0, 1.0, 2.5, 9.0], [6.0, 3.0, 4.0, 9.5])
    assert where == ((1.0, 4.0), (5.0, 6.0), (9.0, 9.5)) and more == 0
    where, more = merge_stretches([5.0, 1.0], [6.0, 4.5], join_s=0.6)
    assert where == ((1.0, 6.0),)
    starts = np.arange(30) * 10.0
    lengths = np.arange(30) * 0.1 + 1.0  # the later stretches are longer
    where, more = merge_stretches(starts, starts + lengths)
    assert len(where) == WHERE_CAP and more == 10
    assert [a for a, _ in where] == sorted(a for a, _ in where)
    assert where[0][0] == 100.0  # the ten shortest were left off
    assert merge_stretches([], []) == ((), 0)


def test_old_constructor_keeps_working_and_defaults():
    flag = Flag("clipping", "fail", "m", 1.0, 0.0, "s", "II")
    assert flag.where == () and flag.where_more == 0 and flag.beats_affected is None
    doc = flag.to_json_dict()
    assert doc["where"] == [] and doc["where_more"] == 0 and doc["beats_measured"] is None


@pytest.fixture(scope="module")
def scaled():
    rec = syn.synthetic_ecg(20.0, 360.0, heart_rate_bpm=70.0, seed=11)
    noisy = rec.signal + syn.white_noise(rec.signal.size, 0.02, seed=12)
    original = Recording(noisy, 360.0, ("II",), units="mV", kind="ecg")
    cleaned = Recording(rec.signal * 0.7, 360.0, ("II",), units="mV", kind="ecg")
    return assess(original, cleaned, detector=lambda s, f: rec.r_peaks)


def test_whole_record_damage_lists_the_whole_record(scaled):
    flag = next(f for f in scaled.flags if f.id == "r-peak-change")
    assert flag.where and flag.where[0][0] <= 1.5 and flag.where[-1][1] >= 18.5
    assert flag.beats_measured and flag.beats_affected >= 0.9 * flag.beats_measured
    doc = scaled.to_json_dict()["flags"][0]
    assert doc["where"] and all(len(pair) == 2 and pair[0] < pair[1] for pair in doc["where"])


def test_stored_assessment_keeps_stretches_and_old_files_load(scaled, tmp_path):
    scaled.save(tmp_path)
    back = Assessment.load(tmp_path)
    rounded = [tuple((round(a, 3), round(b, 3)) for a, b in f.where) for f in scaled.flags]
    assert [f.where for f in back.flags] == rounded
    assert [f.beats_affected for f in back.flags] == [f.beats_affected for f in scaled.flags]
    # An assessment.json written before the stretches existed loads with the defaults.
    path = tmp_path / "assessment.json"
    document = json.loads(path.read_text())
    for item in document["flags"]:
        for key in ("where", "where_more", "beats_affected", "beats_measured"):
            item.pop(key)
    path.write_text(json.dumps(document))
    old = Assessment.load(tmp_path)
    assert all(f.where == () and f.where_more == 0 and f.beats_measured is None for f in old.flags)
    assert old.worst_severity == scaled.worst_severity
