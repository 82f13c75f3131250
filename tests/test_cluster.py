"""``tracevet clean`` on a Dask cluster: a LocalCluster of two worker processes started here.

The cluster tests share one LocalCluster (ephemeral ports, no dashboard).
The checks without Dask (address parsing, bad input, the batch token, the
core not importing Dask) run whether or not the extra is installed.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys

import numpy as np
import pytest
from queue_helpers import write_noisy_ecg

from tracevet.cli.main import main
from tracevet.cleaning import DEFAULT_SETTINGS
from tracevet.errors import InputError
from tracevet.workqueue import Queue
from tracevet.workqueue.batch import clean_waiting
from tracevet.workqueue.cluster import ClusterSettings, choose_cluster, parse_address


def _queue(tmp_path, name, count=4):
    queue = Queue.init(tmp_path / name)
    files = [write_noisy_ecg(tmp_path / f"{name}-in" / f"dive{i}.npz", i) for i in range(count)] if count else []
    ids = queue.add_files(files, added_by="mira") if files else []
    return queue, ids


@pytest.fixture(autouse=True)
def _inbox_folders(tmp_path):
    for name in ("q", "local", "remote", "a", "b"):
        (tmp_path / f"{name}-in").mkdir()


def _runs_per_record(queue, ids):
    return {record_id: [r.run_id for r in queue.runs(record_id)] for record_id in ids}


# ----------------------------------------------------------------- no Dask needed
@pytest.mark.parametrize(
    "text, expected",
    [
        ("tcp://10.0.0.5:8786", "tcp://10.0.0.5:8786"),
        ("tls://sched.lab.example:8786", "tls://sched.lab.example:8786"),
        ("sched:8786", "tcp://sched:8786"),
        ("tcp://[::1]:8786", "tcp://[::1]:8786"),
    ],
)
def test_scheduler_addresses_are_accepted_with_their_scheme(text, expected):
    assert parse_address(text) == expected


@pytest.mark.parametrize(
    "text", ["", "sched", "http://sched:8786", "tcp://sched:0", "tcp://sched:99999", "tcp://a b:1", "tcp://x:1\x1b[2J"]
)
def test_malformed_scheduler_addresses_are_refused(text):
    with pytest.raises(InputError):
        parse_address(text)


def test_cluster_comes_from_the_option_then_the_environment_then_the_queue(monkeypatch):
    monkeypatch.delenv("TRACEVET_CLUSTER", raising=False)
    assert choose_cluster(None, None) is None
    assert choose_cluster(None, "q-sched:1").address == "tcp://q-sched:1"
    monkeypatch.setenv("TRACEVET_CLUSTER", "env-sched:2")
    setting = {"address": "q-sched:1", "shared_filesystem": True, "retries": 5}
    chosen = choose_cluster(None, setting)
    assert (chosen.address, chosen.shared_filesystem, chosen.retries) == ("tcp://env-sched:2", True, 5)
    assert choose_cluster("tls://opt:3", setting).address == "tls://opt:3"
    assert choose_cluster(None, setting, local=True) is None
    with pytest.raises(InputError):
        choose_cluster(None, {"address": "q:1", "retries": "many"})


def _state_of(queue_dir):
    """Every file of a queue with its bytes (to show that nothing was written)."""
    return {p: p.read_bytes() for p in sorted(queue_dir.rglob("*")) if p.is_file() and ".lock" not in p.name}


@pytest.mark.parametrize("address", ["tcp://sched", "ftp://sched:21"])
def test_clean_with_a_malformed_address_says_so_in_one_line_and_writes_nothing(tmp_path, capsys, address):
    queue, _ = _queue(tmp_path, "q", count=1)
    before = _state_of(queue.root)
    assert main(["clean", str(queue.root), "--cluster", address, "--quiet"]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "scheduler address" in err
    assert _state_of(queue.root) == before


def test_clean_without_dask_installed_says_how_to_get_it(tmp_path, capsys, monkeypatch):
    queue, _ = _queue(tmp_path, "q", count=1)
    before = _state_of(queue.root)
    monkeypatch.setitem(sys.modules, "distributed", None)  # import distributed -> ImportError
    assert main(["clean", str(queue.root), "--cluster", "tcp://127.0.0.1:8786", "--quiet"]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "tracevet[cluster]" in err
    assert _state_of(queue.root) == before


def test_an_unreachable_scheduler_named_in_the_queue_settings_is_one_line_and_nothing_written(tmp_path, capsys):
    pytest.importorskip("distributed")
    import socket
    from dataclasses import replace

    from tracevet.workqueue import new_settings

    with socket.socket() as probe:  # a port nothing listens on
        probe.bind(("127.0.0.1", 0))
        port = probe.getsockname()[1]
    settings = replace(new_settings(), cluster={"address": f"tcp://127.0.0.1:{port}", "connect_timeout": 1})
    queue = Queue.init(tmp_path / "q", settings)
    assert Queue.open(queue.root).settings.cluster["connect_timeout"] == 1  # the setting survives queue.yaml
    queue.add_files([write_noisy_ecg(tmp_path / "q-in" / "dive.npz", 0)], added_by="mira")
    before = _state_of(queue.root)
    assert main(["clean", str(queue.root), "--quiet"]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "cannot reach the Dask scheduler" in err
    assert _state_of(queue.root) == before


def test_the_core_never_imports_dask():
    code = (
        "import sys; from tracevet.cli.main import build_parser; build_parser(); "
        "import tracevet.workqueue.batch, tracevet.workqueue.cluster, tracevet.app; "
        "print(sorted(m for m in sys.modules if m.split('.')[0] in ('dask', 'distributed')))"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True).stdout
    assert out.strip() == "[]"


def test_a_run_is_stored_once_per_batch_token(tmp_path):
    from tracevet.assessment import assess
    from tracevet.cleaning import clean

    queue, [record_id] = _queue(tmp_path, "q", count=1)
    original = queue.load_original(record_id)
    cleaned = clean(original, DEFAULT_SETTINGS)
    assessment = assess(original, cleaned)
    first = queue.store_run(record_id, cleaned, assessment, DEFAULT_SETTINGS, batch_token="b1/x")
    again = queue.store_run(record_id, cleaned, assessment, DEFAULT_SETTINGS, batch_token="b1/x")
    other = queue.store_run(record_id, cleaned, assessment, DEFAULT_SETTINGS, batch_token="b2/x")
    assert (first, again, other) == ("run-001", "run-001", "run-002")
    assert queue.verify() == []


# ------------------------------------------------------------- with a LocalCluster
@pytest.fixture(scope="module")
def cluster():
    distributed = pytest.importorskip("distributed")
    local = distributed.LocalCluster(
        n_workers=2,
        threads_per_worker=1,
        processes=True,
        host="127.0.0.1",
        scheduler_port=0,
        dashboard_address=None,
    )
    client = distributed.Client(local, set_as_default=False)
    try:
        yield local, client
    finally:
        client.close()
        local.close()


def _two_workers(client):
    client.wait_for_workers(2, timeout=60)


def _load(queue, record_id):
    cleaned, assessment = queue.load_run(record_id)
    folder = queue.paths.run_dir(record_id, queue.runs(record_id)[-1].run_id)
    with np.load(folder / "beats.npz") as beats:
        arrays = {k: beats[k] for k in beats.files}
    return cleaned.samples, json.loads((folder / "assessment.json").read_text()), arrays


def test_the_cluster_makes_the_same_runs_as_the_local_pool(cluster, tmp_path):
    local, client = cluster
    _two_workers(client)
    here, ids = _queue(tmp_path, "local")
    there, ids_there = _queue(tmp_path, "remote")
    assert ids == ids_there
    clean_waiting(here, workers=2)
    assert main(["clean", str(there.root), "--cluster", local.scheduler_address, "--quiet"]) == 0
    for record_id in ids:
        samples_here, json_here, beats_here = _load(here, record_id)
        samples_there, json_there, beats_there = _load(there, record_id)
        assert samples_here.dtype == samples_there.dtype and np.array_equal(samples_here, samples_there)  # bit for bit
        assert json_here == json_there
        assert beats_here.keys() == beats_there.keys()
        assert all(np.array_equal(beats_here[k], beats_there[k]) for k in beats_here)
        run = json.loads((there.paths.run_dir(record_id, "run-001") / "run.json").read_text())
        assert run["worker"]["address"] in client.scheduler_info()["workers"] or run["worker"]["address"].startswith("tcp://")
        assert run["software"]["tracevet"] and run["batch"].endswith("/" + record_id)
        # Both ran the same settings: runs record the settings applied (mains 'auto' resolved, for example),
        # so the cluster run's digest is compared with the local pool's, not with the defaults as written.
        run_here = json.loads((here.paths.run_dir(record_id, "run-001") / "run.json").read_text())
        assert run["settings_digest"] == run_here["settings_digest"] is not None
    assert there.verify() == []


def test_the_shared_filesystem_mode_reads_the_originals_in_place(cluster, tmp_path):
    local, client = cluster
    queue, ids = _queue(tmp_path, "q", count=2)
    outcomes = clean_waiting(queue, cluster=ClusterSettings(local.scheduler_address, shared_filesystem=True))
    assert sorted(o.record_id for o in outcomes if o.run_id) == ids


def test_results_from_workers_with_another_tracevet_version_are_refused(cluster, tmp_path):
    from tracevet.workqueue.cluster import DaskBackend

    local, client = cluster
    _two_workers(client)
    queue, ids = _queue(tmp_path, "q", count=3)
    log_before = queue.paths.log.read_bytes()

    def set_version(value):
        import tracevet

        tracevet.__version__ = value

    import tracevet

    mine = tracevet.__version__
    backend = DaskBackend(ClusterSettings(local.scheduler_address))
    try:
        client.run(set_version, "0.0.0-other")  # the workers change after the batch connected
        outcomes = clean_waiting(queue, backend=backend)
    finally:
        backend.close()
    try:
        assert len(outcomes) == 3 and all(o.run_id is None and "refused" in o.error for o in outcomes)
        assert "tracevet 0.0.0-other on the worker" in outcomes[0].error
        assert _runs_per_record(queue, ids) == {r: [] for r in ids}
        assert {r.state for r in queue.records()} == {"to-clean"}
        assert queue.paths.log.read_bytes() == log_before
        # a cluster where every worker runs other software is refused before anything is sent
        with pytest.raises(InputError, match="every worker runs other software"):
            clean_waiting(queue, cluster=ClusterSettings(local.scheduler_address))
    finally:
        client.run(set_version, mine)


def test_an_interrupted_client_leaves_a_queue_that_clean_resumes(cluster, tmp_path):
    local, client = cluster
    queue, ids = _queue(tmp_path, "q", count=5)
    log_before = queue.paths.log.read_bytes()
    settings = ClusterSettings(local.scheduler_address)

    def interrupt(done, total, outcome):
        if outcome is not None:
            raise KeyboardInterrupt

    with pytest.raises(KeyboardInterrupt):
        clean_waiting(queue, cluster=settings, progress=interrupt)
    runs = _runs_per_record(queue, ids)
    assert sum(len(r) for r in runs.values()) == 1  # the one stored before the interruption, whole
    assert queue.verify() == [] and queue.paths.log.read_bytes() == log_before
    assert list((queue.root / ".work").iterdir()) == []
    outcomes = clean_waiting(queue, cluster=settings)
    assert len(outcomes) == 4 and all(o.run_id == "run-001" for o in outcomes)
    assert _runs_per_record(queue, ids) == {r: ["run-001"] for r in ids}
    assert queue.verify() == [] and queue.paths.log.read_bytes() == log_before


def test_a_worker_killed_during_a_task_costs_a_retry_and_no_record(cluster, tmp_path):
    local, client = cluster
    _two_workers(client)
    queue, ids = _queue(tmp_path, "q", count=2)
    marker = tmp_path / "killed-once"

    def arm(marker_path):
        # On each worker: the first task to start (on either worker) ends its own worker process.
        import signal

        from tracevet.workqueue import tasks

        real = tasks.clean_record

        def dying(task):
            try:
                fd = os.open(marker_path, os.O_CREAT | os.O_EXCL | os.O_WRONLY)
            except FileExistsError:
                return real(task)
            os.close(fd)
            os.kill(os.getpid(), signal.SIGKILL)

        dying.__name__ = dying.__qualname__ = "clean_record"
        tasks.real_clean_record = real
        tasks.clean_record = dying

    def disarm():
        from tracevet.workqueue import tasks

        tasks.clean_record = getattr(tasks, "real_clean_record", tasks.clean_record)

    client.run(arm, str(marker))
    try:
        outcomes = clean_waiting(queue, cluster=ClusterSettings(local.scheduler_address))
    finally:
        client.run(disarm)  # the restarted worker starts unarmed
    assert marker.exists()
    assert sorted(o.record_id for o in outcomes if o.run_id) == ids
    assert sum(o.retries for o in outcomes) == 1
    assert _runs_per_record(queue, ids) == {r: ["run-001"] for r in ids}
    assert queue.verify() == []
