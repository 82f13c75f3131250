"""Queue folder, record ids and adding records, including hostile input."""

from __future__ import annotations

import os
import stat

import pytest
from queue_helpers import write_small_recording

from tracevet.errors import InputError
from tracevet.workqueue import Queue
from tracevet.workqueue.checksums import sha256_file
from tracevet.workqueue.ids import check_record_id, make_record_id


def _tree(folder):
    return sorted(str(p.relative_to(folder)) for p in folder.rglob("*"))


def test_record_ids_are_safe_folder_names_whatever_the_file_name():
    assert make_record_id("../../etc/passwd") == "passwd"
    assert make_record_id("/abs/path/dive 12.csv") == "dive-12"
    assert make_record_id("C:\\data\\Dive.csv") == "Dive"
    assert make_record_id("a\x1b[31mred\x07.csv") == "a-31mred"
    assert make_record_id("Müller‮txt.csv") == "Muller-txt"
    assert make_record_id("...") == "record"
    assert make_record_id("con.csv") == "record-con"
    long_id = make_record_id("x" * 300 + ".csv")
    assert len(long_id) == 64
    for name in ("../a", "/etc/passwd", "a/b", "", ".hidden", "x" * 65, "a\nb", "con"):
        with pytest.raises(InputError):
            check_record_id(name)


def test_duplicate_names_get_unique_ids_regardless_of_case():
    taken = {"dive"}
    second = make_record_id("dive.csv", taken)
    taken.add(second)
    third = make_record_id("DIVE.csv", taken)
    assert (second, third) == ("dive-2", "DIVE-3")
    assert make_record_id("y" * 300, {"y" * 64}) == "y" * 62 + "-2"


def test_init_makes_a_queue_that_open_recognises(tmp_path):
    queue = Queue.init(tmp_path / "q")
    assert (tmp_path / "q" / "queue.yaml").is_file()
    again = Queue.open(tmp_path / "q")
    assert again.settings.queue_id == queue.settings.queue_id
    assert again.settings.claim_idle_minutes == 30
    assert again.records() == []


def test_init_accepts_the_repository_queue_folder_but_refuses_other_content(tmp_path):
    folder = tmp_path / "queue"
    folder.mkdir()
    (folder / ".gitkeep").write_text("")
    (folder / "README.md").write_text("the default queue\n")
    Queue.init(folder)
    with pytest.raises(InputError, match="already a tracevet queue"):
        Queue.init(folder)
    other = tmp_path / "other"
    other.mkdir()
    (other / "notes.txt").write_text("mine")
    with pytest.raises(InputError, match="not empty"):
        Queue.init(other)
    assert _tree(other) == ["notes.txt"]


def test_a_folder_that_is_not_a_queue_is_refused_clearly(tmp_path):
    with pytest.raises(InputError, match="not a tracevet queue"):
        Queue.open(tmp_path)
    with pytest.raises(InputError, match="no such queue folder"):
        Queue.open(tmp_path / "missing")
    (tmp_path / "file").write_text("x")
    with pytest.raises(InputError, match="is a file"):
        Queue.open(tmp_path / "file")


def test_unsafe_yaml_in_the_queue_settings_is_refused_without_running_it(tmp_path):
    queue = Queue.init(tmp_path / "q")
    marker = tmp_path / "ran"
    queue.paths.settings.write_text(
        f"tracevet_queue: 1\nqueue_id: x\nflag_limits: !!python/object/apply:os.system ['touch {marker}']\n"
    )
    with pytest.raises(InputError) as info:
        Queue.open(queue.root)
    assert "queue.yaml" in str(info.value) and "\n" not in info.value.one_line()
    assert not marker.exists()
    queue.paths.settings.write_text("tracevet_queue: 1\nqueue_id: x\nsurprise: 1\n")
    with pytest.raises(InputError, match="unknown setting"):
        Queue.open(queue.root)
    queue.paths.settings.write_text("just text\n")
    with pytest.raises(InputError, match="not a tracevet queue settings file"):
        Queue.open(queue.root)


def test_added_originals_are_kept_byte_for_byte_read_only_with_their_checksum(tmp_path):
    queue = Queue.init(tmp_path / "q")
    source = write_small_recording(tmp_path / "dive.npz")
    [record_id] = queue.add_files([source], added_by="mira")
    meta = queue.record_meta(record_id)
    kept = queue.root / "records" / record_id / meta["original"]
    assert kept.read_bytes() == source.read_bytes()
    assert meta["original_sha256"] == sha256_file(source)
    assert stat.S_IMODE(kept.stat().st_mode) == 0o444
    assert queue.records()[0].state == "to-clean"
    entry = queue.log_entries(record_id)[0]
    assert entry.event == "add" and entry.get("original_sha256") == meta["original_sha256"]
    original = queue.load_original(record_id)
    assert original.n_samples == 500 and original.kind == "ecg"


def test_hostile_file_names_stay_inside_the_queue_and_are_stored_as_given(tmp_path):
    queue = Queue.init(tmp_path / "q")
    inbox = tmp_path / "inbox"
    (inbox / "sub").mkdir(parents=True)
    names = ["a\x1b[31mred.npz", "x" * 200 + ".npz", "dive.npz", "DIVE.npz"]
    paths = [write_small_recording(inbox / n, seed=k) for k, n in enumerate(names)]
    paths.append(write_small_recording(inbox / "sub" / "dive.npz", seed=9))
    sneaky = str(inbox / "sub" / ".." / "sub" / "dive.npz")
    outside_before = [p for p in _tree(tmp_path) if not p.startswith("q")]
    ids = queue.add_files(paths, added_by="mira")
    with pytest.raises(InputError, match="already in the queue"):
        queue.add_files([sneaky], added_by="mira")
    assert [p for p in _tree(tmp_path) if not p.startswith("q")] == outside_before
    assert ids[0] == "a-31mred" and len(ids[1]) == 64 and ids[2:] == ["dive", "DIVE-2", "dive-3"]
    assert sorted(os.listdir(queue.root / "records")) == sorted(ids)
    assert queue.record(ids[0]).source_name == "a\x1b[31mred.npz"
    assert os.listdir(queue.root / ".work") == []


def test_a_bad_file_in_a_batch_adds_nothing(tmp_path):
    queue = Queue.init(tmp_path / "q")
    good = write_small_recording(tmp_path / "good.npz")
    bad = tmp_path / "bad.csv"
    bad.write_text("a,b\n1,oops\n")
    with pytest.raises(InputError, match="bad.csv"):
        queue.add_files([good, bad], added_by="mira")
    assert queue.records() == [] and queue.log_entries() == []
    assert os.listdir(queue.root / ".work") == [] and os.listdir(queue.root / "records") == []


def test_metadata_the_file_lacks_comes_from_options_or_the_queue_defaults(tmp_path):
    import numpy as np

    queue = Queue.init(tmp_path / "q")
    raw = tmp_path / "bench.npy"
    np.save(raw, np.zeros((1000, 2), dtype=np.float32))
    with pytest.raises(InputError, match="--fs"):
        queue.add_files([raw], added_by="mira")
    [record_id] = queue.add_files([raw], fs=500.0, kind="mcg", units="pT", added_by="mira")
    item = queue.record(record_id)
    assert (item.fs, item.kind, item.units, item.n_channels) == (500.0, "mcg", "pT", 2)
    assert queue.load_original(record_id).fs == 500.0
    csv = tmp_path / "plain.csv"
    csv.write_text("time,lead\n" + "".join(f"{i / 100},{i % 7}\n" for i in range(200)))
    [csv_id] = queue.add_files([csv], added_by="mira")
    assert (queue.record(csv_id).kind, queue.record(csv_id).units) == ("ecg", "mV")
