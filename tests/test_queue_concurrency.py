"""Several processes recording decisions on one queue at once (issue: Reliability, concurrency)."""

from __future__ import annotations

import multiprocessing
import random

from queue_helpers import queue_with_runs

from tracevet.workqueue import ClaimedByOther, Queue

WORKERS = 4
DECISIONS_EACH = 250


def _worker(root: str, reviewer: str, record_ids: list[str], seed: int, results) -> None:
    queue = Queue.open(root)
    rng = random.Random(seed)
    made = refused = 0
    intervals = []
    while made < DECISIONS_EACH:
        record_id = rng.choice(record_ids)
        try:
            claim = queue.claim(record_id, reviewer)
        except ClaimedByOther:
            # deciding without the claim must be refused while another reviewer holds it
            try:
                queue.decide(record_id, "rerun", "tried without a claim", reviewer, override=True)
            except ClaimedByOther:
                refused += 1
                continue
            made += 1
            continue
        # colleagues deciding over each other on purpose: the chain must hold through overrides
        decision = rng.choice(["accept", "reject", "rerun"])
        entry = queue.decide(record_id, decision, f"note {made}", reviewer, override=True)
        intervals.append((record_id, claim.since, entry.time))
        made += 1
    results.put((reviewer, made, refused, intervals))


def test_four_processes_record_a_thousand_decisions_with_an_intact_chain(tmp_path):
    queue, ids = queue_with_runs(tmp_path, n_records=16)
    context = multiprocessing.get_context("fork")
    results = context.Queue()
    processes = [
        context.Process(target=_worker, args=(str(queue.root), f"reviewer-{k}", ids, k, results))
        for k in range(WORKERS)
    ]
    for process in processes:
        process.start()
    reports = [results.get(timeout=120) for _ in processes]
    for process in processes:
        process.join(timeout=60)
        assert process.exitcode == 0

    decisions = [e for e in queue.log_entries() if e.event == "decision"]
    assert len(decisions) == WORKERS * DECISIONS_EACH
    assert sorted(e.seq for e in queue.log_entries()) == list(range(1, len(queue.log_entries()) + 1))
    assert queue.verify() == []

    # No decision falls inside another reviewer's claim on the same record.
    claims = [
        (record, since, until, reviewer) for reviewer, _, _, intervals in reports for record, since, until in intervals
    ]
    for entry in decisions:
        for record, since, until, holder in claims:
            if record == entry.record and holder != entry.reviewer:
                assert not (since < entry.time < until), (entry.line, entry.record, entry.reviewer, holder)
    # a decision made while holding a claim names that claim, and only one's own
    for entry in decisions:
        claim = entry.get("claim")
        assert claim is None or claim["reviewer"] == entry.reviewer
