"""The quick start, as a new user follows it: build the demo queue, check its flags, sign off one record."""

from __future__ import annotations

import json

import pytest

from tracevet import demo
from tracevet.workqueue import Queue


@pytest.fixture(scope="module")
def demo_queue(tmp_path_factory):
    """The demo queue, generated, cleaned and assessed once for this module."""
    path = tmp_path_factory.mktemp("quick") / "queue"
    fractions = []
    ids = demo.build_demo_queue(path, fractions.append)
    assert fractions[-1] == pytest.approx(1.0) and fractions == sorted(fractions)
    return path, ids


def test_demo_cli_builds_a_queue_ready_for_review(tmp_path, run_cli):
    code, out, err = run_cli("demo", tmp_path / "q")
    assert code == 0, err
    assert "demo queue ready" in out
    assert "100%" in err  # the progress bar reached the end
    queue = Queue.open(tmp_path / "q")
    assert len(queue.records()) == len(demo.SCENARIO)


def test_demo_refuses_a_queue_that_holds_records(demo_queue, run_cli):
    path, _ = demo_queue
    code, _, err = run_cli("demo", path)
    assert code == 2 and "already" in err and err.count("\n") == 1


def test_demo_scenario_spans_what_the_tour_needs():
    rates = {spec.fs for spec in demo.SCENARIO}
    assert len(rates) >= 2
    assert any(spec.channels > 1 for spec in demo.SCENARIO)
    assert any(spec.external for spec in demo.SCENARIO)
    assert any(spec.kind == "mcg" and spec.units == "pT" for spec in demo.SCENARIO)
    assert sum(1 for spec in demo.SCENARIO if spec.overrides and spec.intended_flagged) >= 3
    assert all(30 <= spec.duration_s <= 300 for spec in demo.SCENARIO)


def test_intended_bad_records_are_flagged_and_good_ones_are_not(demo_queue):
    # The flags come from the assessment of each run, never from the scenario table.
    path, ids = demo_queue
    queue = Queue.open(path)
    by_id = {r.id: r for r in queue.records()}
    for spec, record_id in zip(demo.SCENARIO, ids):
        summary = by_id[record_id]
        assert summary.state == "to-review"
        if spec.intended_flagged:
            assert summary.worst_severity == "fail", (record_id, summary.worst_severity)
        else:
            assert summary.worst_severity is None, (
                record_id,
                [f["id"] for r in queue.runs(record_id) for f in r.flags],
            )


def test_demo_queue_verifies_and_originals_are_read_only(demo_queue):
    path, ids = demo_queue
    queue = Queue.open(path)
    assert queue.verify() == []
    (external_id,) = [rid for spec, rid in zip(demo.SCENARIO, ids) if spec.external]
    external = queue.runs(external_id)
    assert external[0].origin == "external" and external[0].settings is None
    # The log holds no decisions yet: the demo only adds and cleans.
    decisions = [json.loads(line) for line in (path / "decisions.jsonl").read_text().splitlines()]
    assert not any(entry.get("decision") in {"accept", "reject"} for entry in decisions)


def test_review_without_a_queue_argument_fills_the_empty_default_queue(tmp_path, run_cli, monkeypatch):
    # First run: the default queue (here redirected with $TRACEVET_QUEUE) holds only its README,
    # so 'tracevet review' builds the demo into it before opening the app. Without a terminal the
    # app itself refuses to start, with one line, after the queue has been filled.
    default = tmp_path / "queue"
    default.mkdir()
    (default / "README.md").write_text("embedded default queue\n")
    monkeypatch.setenv("TRACEVET_QUEUE", str(default))
    code, _, err = run_cli("review", "--reviewer", "mira")
    assert code == 2 and "interactive terminal" in err
    assert len(Queue.open(default).records()) == len(demo.SCENARIO)
    assert (default / "README.md").read_text() == "embedded default queue\n"


async def test_first_review_decision_through_the_app(demo_queue, tmp_path):
    import shutil

    from tracevet.app.app import ReviewApp
    from tracevet.app.record_screen import RecordScreen
    from tracevet.app.worklist_screen import WorklistScreen

    path = tmp_path / "queue"
    shutil.copytree(demo_queue[0], path)
    queue = Queue.open(path)
    app = ReviewApp(queue, "mira", colour=False)

    async def until(condition, timeout=20.0):
        waited = 0.0
        while not condition():
            assert waited < timeout, "the app did not get there in time"
            await pilot.pause(0.05)
            waited += 0.05

    async with app.run_test(size=(100, 30)) as pilot:
        await until(lambda: isinstance(app.screen, WorklistScreen))
        await pilot.press("n")  # the next record that needs review
        await until(lambda: isinstance(app.screen, RecordScreen) and app.screen.shown_run is not None)
        record_id, run_id = app.screen.record_id, app.screen.shown_run_id
        await pilot.press("a")
        await until(lambda: type(app.screen).__name__ == "NoteScreen")
        for key in ("s", "e", "e", "n", "space", "o", "k"):
            await pilot.press(key)
        await pilot.press("enter")
        await until(lambda: any(e.event == "decision" for e in Queue.open(path).log_entries()))
    (entry,) = [e for e in Queue.open(path).log_entries() if e.event == "decision"]
    assert (entry.record, entry.run, entry.decision, entry.note, entry.reviewer) == (
        record_id, run_id, "accept", "seen ok", "mira",
    )
    assert Queue.open(path).record(record_id).state == "accepted"
    # The entry carries the checksums of the exact bytes signed off.
    assert entry.get("original_sha256") == Queue.open(path).record_meta(record_id)["original_sha256"]
    assert len(entry.get("cleaned_sha256", "")) == 64
    assert Queue.open(path).verify() == []
