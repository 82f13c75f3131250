"""A writer killed at random moments: nothing reported as saved is lost (Reliability, crash)."""

from __future__ import annotations

import os
import random
import signal
import subprocess
import sys
import time
from pathlib import Path

from queue_helpers import StandInAssessment, queue_with_runs

from tracevet.workqueue import Queue

SRC = Path(__file__).resolve().parents[1] / "src"

WRITER = """
import sys
from tracevet.workqueue import Queue
queue = Queue.open(sys.argv[1])
ids = sys.argv[2].split(",")
i = 0
while True:
    record_id = ids[i % len(ids)]
    queue.claim(record_id, "mira")
    entry = queue.decide(record_id, ("accept", "reject", "rerun")[i % 3], f"note {i}", "mira")
    print(entry.seq, entry.hash, flush=True)
    i += 1
"""


def test_every_decision_reported_saved_survives_a_kill(tmp_path):
    queue, ids = queue_with_runs(tmp_path, n_records=4)
    rng = random.Random(20261202)
    reported: dict[int, str] = {}
    for _round in range(4):
        process = subprocess.Popen(
            [sys.executable, "-c", WRITER, str(queue.root), ",".join(ids)],
            stdout=subprocess.PIPE,
            text=True,
            env={"PYTHONPATH": str(SRC)},
        )
        first = process.stdout.readline()  # the writer is deciding now
        assert first, "the writer did not start"
        time.sleep(rng.uniform(0.0, 0.25))
        os.kill(process.pid, signal.SIGKILL)
        rest = process.stdout.read()
        process.wait()
        for line in [first, *rest.splitlines()]:
            if line.strip():
                seq, digest = line.split()
                reported[int(seq)] = digest
        problems = queue.verify()
        torn = [p for p in problems if "torn" in p.message]
        if torn:
            queue.repair_log("mira")
            problems = queue.verify()
        assert [p for p in problems if not p.repaired] == []
        logged = {e.seq: e.hash for e in queue.log_entries()}
        for seq, digest in reported.items():
            assert logged.get(seq) == digest, f"decision {seq} was reported saved but is not in the log"
    assert len(reported) > 4


def test_a_run_that_fails_while_being_written_leaves_nothing_behind(tmp_path):
    from tracevet.cleaning import DEFAULT_SETTINGS

    queue, ids = queue_with_runs(tmp_path, n_records=1)

    class Breaks(StandInAssessment):
        def save(self, folder):
            super().save(folder)
            raise OSError("disk full")

    before = sorted(p.name for p in (queue.root / "records" / ids[0] / "runs").iterdir())
    try:
        queue.store_run(ids[0], queue.load_original(ids[0]), Breaks(), DEFAULT_SETTINGS)
    except OSError:
        pass
    else:
        raise AssertionError("the failure was swallowed")
    assert sorted(p.name for p in (queue.root / "records" / ids[0] / "runs").iterdir()) == before
    assert os.listdir(queue.root / ".work") == []
    assert Queue.open(queue.root).verify() == []
