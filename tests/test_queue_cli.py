"""Command-line contract of the queue commands: exit codes, one-line errors, inert text."""

from __future__ import annotations

import json

from queue_helpers import queue_with_runs, write_small_recording


def _one_line_error(err: str) -> bool:
    return err.count("\n") == 1 and err.startswith("tracevet") and "Traceback" not in err


def test_init_add_status(run_cli, tmp_path, monkeypatch):
    monkeypatch.setenv("TRACEVET_REVIEWER", "mira")
    folder = tmp_path / "q"
    assert run_cli("init", folder)[0] == 0
    code, out, err = run_cli("init", folder)
    assert code == 2 and _one_line_error(err) and "already" in err
    files = [write_small_recording(tmp_path / f"dive{i}.npz", seed=i) for i in range(2)]
    code, out, err = run_cli("add", folder, *files)
    assert code == 0 and "added dive0" in out and "added dive1" in out
    code, out, _ = run_cli("status", folder)
    assert code == 0 and "to-clean" in out and "2  waiting to be cleaned" in out
    code, out, _ = run_cli("status", folder, "--json")
    document = json.loads(out)
    assert document["total"] == 2 and document["states"]["to-clean"] == 2
    assert [r["id"] for r in document["records"]] == ["dive0", "dive1"]


def test_errors_are_one_line_with_exit_code_2(run_cli, tmp_path):
    queue, ids = queue_with_runs(tmp_path)
    cases = [
        ("status", tmp_path / "nowhere"),
        ("status", tmp_path),  # not a queue
        ("add", queue.root, tmp_path / "missing.csv"),
        ("add", queue.root),
        ("decide", queue.root, "../../etc/passwd", "accept"),
        ("decide", queue.root, ids[0], "reject"),
        ("decide", queue.root, ids[0], "accept", "--set", "level=3"),
        ("decide", queue.root, "nosuch", "accept"),
        ("decide", queue.root, ids[0], "approve"),
        ("log", queue.root, "--record", "../x"),
        ("export", queue.root, tmp_path / "no" / "such" / "dest"),
        ("init", tmp_path / "no" / "parent" / "q"),
    ]
    for args in cases:
        code, out, err = run_cli(*args, "--reviewer", "mira") if args[0] in ("decide",) else run_cli(*args)
        assert code == 2, (args, code, err)
        assert _one_line_error(err), (args, err)


def test_decide_log_and_verify(run_cli, tmp_path):
    queue, ids = queue_with_runs(tmp_path)
    code, out, err = run_cli("decide", queue.root, ids[0], "accept", "--note", "fine", "--reviewer", "mira")
    assert code == 0 and "accepted by mira" in out
    code, out, err = run_cli(
        "decide", queue.root, ids[1], "rerun", "--note", "R peaks low", "--reviewer", "mira", "--set", "transform=dwt"
    )
    assert code == 0 and "sent back" in out
    entry = queue.log_entries(ids[1])[-1]
    assert entry.get("requested_settings")["transform"] == "dwt"
    code, out, _ = run_cli("log", queue.root)
    assert code == 0 and "accept" in out and "rerun" in out and ids[0] in out
    code, out, _ = run_cli("log", queue.root, "--record", ids[0], "--json")
    entries = json.loads(out)
    assert [e["event"] for e in entries] == ["add", "decision"] and entries[1]["note"] == "fine"
    code, out, _ = run_cli("log", queue.root, "--verify")
    assert code == 0 and "log verified" in out
    lines = queue.paths.log.read_bytes().split(b"\n")
    lines[3] = lines[3].replace(b"fine", b"FINE")
    queue.paths.log.write_bytes(b"\n".join(lines))
    code, out, err = run_cli("log", queue.root, "--verify")
    assert code == 1 and "decisions.jsonl line 4" in out and ids[0] in out and "problem" in err
    code, out, _ = run_cli("log", queue.root, "--verify", "--json")
    assert code == 1 and json.loads(out)["ok"] is False


def test_claims_from_the_command_line(run_cli, tmp_path):
    queue, ids = queue_with_runs(tmp_path)
    assert run_cli("claim", queue.root, ids[0], "--reviewer", "mira")[0] == 0
    code, out, err = run_cli("decide", queue.root, ids[0], "accept", "--note", "x", "--reviewer", "jonas")
    assert code == 2 and _one_line_error(err) and "being reviewed by mira" in err
    code, out, _ = run_cli("status", queue.root)
    assert "held:" in out and "mira" in out and "command line" in out
    code, out, err = run_cli("release", queue.root, ids[0], "--reviewer", "jonas")
    assert code == 2 and _one_line_error(err)
    assert run_cli("release", queue.root, ids[0], "--reviewer", "mira")[0] == 0
    assert run_cli("decide", queue.root, ids[0], "accept", "--reviewer", "jonas")[0] == 0


def test_hostile_notes_and_names_are_displayed_inert(run_cli, tmp_path):
    queue, ids = queue_with_runs(tmp_path)
    note = "\x1b[2J\x1b]0;pwned\x07[red]x[/red] \x9b31m \u202eevil"
    code, out, err = run_cli("decide", queue.root, ids[0], "reject", "--note", note, "--reviewer", "eve\x1b[5m")
    assert code == 0 and "\x1b" not in out + err
    for args in (
        ("log", queue.root),
        ("log", queue.root, "--record", ids[0]),
        ("log", queue.root, "--json"),
        ("status", queue.root, "--list"),
        ("status", queue.root, "--json"),
    ):
        code, out, err = run_cli(*args)
        assert code == 0
        for raw in ("\x1b", "\x07", "\x9b", "\u202e"):
            assert raw not in out + err, (args, raw)
    assert queue.paths.log.read_bytes().isascii()  # safe to cat
    code, out, _ = run_cli("log", queue.root)
    assert "\\x1b[2J" in out and "[red]x[/red]" in out
    assert queue.log_entries(ids[0])[-1].note == note


def test_torn_log_is_reported_by_log_and_repaired(run_cli, tmp_path):
    queue, ids = queue_with_runs(tmp_path)
    with open(queue.paths.log, "ab") as handle:
        handle.write(b'{"half')
    code, out, err = run_cli("log", queue.root)
    assert code == 0 and "torn" in err
    code, out, err = run_cli("log", queue.root, "--verify")
    assert code == 1 and "torn" in out
    code, out, err = run_cli("log", queue.root, "--repair", "--reviewer", "mira")
    assert code == 0 and "removed a torn last line" in out
    assert run_cli("log", queue.root, "--verify")[0] == 0


def test_export_writes_data_manifests_and_report(run_cli, tmp_path):
    import csv

    from tracevet.workqueue.checksums import sha256_file

    queue, ids = queue_with_runs(tmp_path)
    run_cli("decide", queue.root, ids[0], "accept", "--note", "=HYPERLINK(\"x\")", "--reviewer", "mira")
    run_cli("decide", queue.root, ids[1], "reject", "--note", "bad", "--reviewer", "mira")
    dest = tmp_path / "out"
    code, out, err = run_cli("export", queue.root, dest, "--reviewer", "mira")
    assert code == 0 and "exported 1" in out
    assert sorted(p.name for p in dest.iterdir()) == sorted(
        [f"{ids[0]}.npz", "manifest.csv", "manifest.json", "sign-off.txt"]
    )
    manifest = json.loads((dest / "manifest.json").read_text())
    [row] = manifest["records"]
    assert row["sha256"] == sha256_file(dest / f"{ids[0]}.npz") and row["reviewer"] == "mira"
    assert row["note"] == "=HYPERLINK(\"x\")" and row["settings_digest"] == queue.runs(ids[0])[0].settings_digest
    assert manifest["log_head"]["hash"] == queue.log_entries()[-1].hash
    with open(dest / "manifest.csv", newline="") as handle:
        [csv_row] = list(csv.DictReader(handle))
    assert csv_row["note"].startswith("'=")  # no formula runs in a spreadsheet
    report = (dest / "sign-off.txt").read_text()
    assert ids[0] in report and "mira" in report and row["sha256"] in report
    code, out, err = run_cli("export", queue.root, dest)
    assert code == 2 and _one_line_error(err) and "already exists" in err
