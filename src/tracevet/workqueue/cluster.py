"""Running a batch on a Dask distributed cluster (``tracevet clean --cluster ADDRESS``).

Only this module imports Dask, and only when a cluster is asked for; the rest
of tracevet runs without it (``pip install 'tracevet[cluster]'`` adds it).

The address comes from ``--cluster``, else ``$TRACEVET_CLUSTER``, else the
queue's ``cluster:`` setting (a string, or a mapping with ``address`` and the
optional keys of :class:`ClusterSettings`). :class:`DaskBackend` submits each
record's task with ``Client.submit`` (``retries`` for exceptions raised in the
task; a task whose worker dies is moved to another worker by the scheduler, up
to its ``distributed.scheduler.allowed-failures``) and collects results with
``as_completed``; :func:`tracevet.workqueue.backend.run_tasks` drives it like
the local pool. Workers need the same tracevet and dependency versions as the
client; results from any other are refused.

Security: whoever can reach the scheduler can run code on every worker, and
the scheduler runs what the client sends. Use ``tls://`` addresses with
certificates (``tls_ca_file``, ``tls_client_cert``, ``tls_client_key``, or
Dask's own ``distributed.comm.tls`` configuration), or an SSH tunnel, and never
expose a scheduler port beyond the lab network (docs/cluster.md).
"""

from __future__ import annotations

import logging
import os
import pickle
import re
import time
import uuid
import warnings
from dataclasses import dataclass
from typing import Any, Callable

from tracevet.errors import InputError
from tracevet.text import inert
from tracevet.workqueue.backend import BackendLost

ENV_VAR = "TRACEVET_CLUSTER"
SCHEMES = ("tcp", "tls")
DEFAULT_RETRIES = 2
_HOST = re.compile(r"^(?:[A-Za-z0-9](?:[A-Za-z0-9.-]{0,251}[A-Za-z0-9])?|\[[0-9A-Fa-f:.]{2,45}\])$")
_KEYS = (
    "address",
    "shared_filesystem",
    "retries",
    "tls_ca_file",
    "tls_client_cert",
    "tls_client_key",
    "connect_timeout",
)


@dataclass(frozen=True)
class ClusterSettings:
    """Where and how to run a batch on a Dask cluster.

    Attributes
    ----------
    address : str
        ``tcp://HOST:PORT`` or ``tls://HOST:PORT`` of the scheduler (``HOST:PORT`` means tcp).
    shared_filesystem : bool
        The queue folder is at the same path on every worker: workers read
        the originals there (each checked against its SHA-256) instead of
        receiving their bytes.
    retries : int
        Extra attempts for a task that raised (an I/O error, say); a task
        whose worker died is moved by the scheduler itself.
    tls_ca_file, tls_client_cert, tls_client_key : str or None
        Certificates for a ``tls://`` scheduler (else Dask's own TLS configuration).
    connect_timeout : float or None
        Seconds to wait for the scheduler and a first worker (default: Dask's
        ``distributed.comm.timeouts.connect``).
    source : str
        Where the settings came from, for messages.
    """

    address: str
    shared_filesystem: bool = False
    retries: int = DEFAULT_RETRIES
    tls_ca_file: str | None = None
    tls_client_cert: str | None = None
    tls_client_key: str | None = None
    connect_timeout: float | None = None
    source: str = "--cluster"


def parse_address(text: object, source: str = "--cluster") -> str:
    """Check a scheduler address and return it with its scheme (``tcp://`` when none is given).

    Accepts ``tcp://HOST:PORT``, ``tls://HOST:PORT`` and ``HOST:PORT``
    (HOST a name, an IPv4 address or a bracketed IPv6 address; PORT
    1-65535). Anything else is an InputError, before Dask is imported.
    """
    if not isinstance(text, str) or not text.strip():
        raise InputError(source, "no scheduler address given (like tcp://HOST:8786)")
    address = text.strip()
    if len(address) > 300 or any(ord(c) < 33 or ord(c) == 127 for c in address):
        raise InputError(source, f"malformed scheduler address {inert(address, 60)!r}")
    scheme, sep, rest = address.partition("://")
    if not sep:
        scheme, rest = "tcp", address
    if scheme not in SCHEMES:
        raise InputError(source, f"scheduler address must start with tcp:// or tls://, got {inert(address, 60)!r}")
    host, colon, port = rest.rpartition(":")
    if not colon or not port.isdigit() or not 0 < int(port) < 65536 or not _HOST.match(host):
        raise InputError(source, f"malformed scheduler address {inert(address, 60)!r} (expected {scheme}://HOST:PORT)")
    return f"{scheme}://{host}:{int(port)}"


def _bool(value: object, source: str) -> bool:
    if not isinstance(value, bool):
        raise InputError(source, "must be true or false")
    return value


def cluster_settings(value: object, source: str) -> ClusterSettings:
    """ClusterSettings from a string (the address) or a mapping (``address`` and options)."""
    if isinstance(value, str):
        return ClusterSettings(parse_address(value, source), source=source)
    if not isinstance(value, dict):
        raise InputError(source, "must be a scheduler address or a mapping with 'address'")
    unknown = sorted(str(k) for k in value if k not in _KEYS)
    if unknown:
        raise InputError(source, f"unknown key(s): {', '.join(unknown)[:100]}")
    retries = value.get("retries", DEFAULT_RETRIES)
    if isinstance(retries, bool) or not isinstance(retries, int) or not 0 <= retries <= 20:
        raise InputError(f"{source}.retries", "must be a whole number from 0 to 20")
    timeout = value.get("connect_timeout")
    if timeout is not None and (
        isinstance(timeout, bool) or not isinstance(timeout, (int, float)) or not 0 < timeout <= 3600
    ):
        raise InputError(f"{source}.connect_timeout", "must be a number of seconds (0 to 3600)")
    files = {}
    for key in ("tls_ca_file", "tls_client_cert", "tls_client_key"):
        path = value.get(key)
        if path is not None and (not isinstance(path, str) or not os.path.isfile(path)):
            raise InputError(f"{source}.{key}", f"no such file: {inert(path, 80)}")
        files[key] = path
    return ClusterSettings(
        address=parse_address(value.get("address"), f"{source}.address"),
        shared_filesystem=_bool(value.get("shared_filesystem", False), f"{source}.shared_filesystem"),
        retries=retries,
        connect_timeout=None if timeout is None else float(timeout),
        source=source,
        **files,
    )


def choose_cluster(option: str | None, queue_setting: object, queue_source: str = "queue.yaml", local: bool = False):
    """The cluster a batch runs on, or None for the local pool.

    ``--cluster`` first, then ``$TRACEVET_CLUSTER``, then the queue's
    ``cluster:`` setting; ``local`` (``--local``) ignores the last two. A
    mapping in the queue's settings also gives the options of an address
    named on the command line or in the environment.
    """
    if local:
        return None
    from_queue = (
        None if queue_setting in (None, "", {}) else cluster_settings(queue_setting, f"{queue_source}: cluster")
    )
    for text, source in ((option, "--cluster"), (os.environ.get(ENV_VAR), f"${ENV_VAR}")):
        if text is not None and (text.strip() or source == "--cluster"):
            address = parse_address(text, source)
            if from_queue is not None:
                return ClusterSettings(**{**from_queue.__dict__, "address": address, "source": source})
            return ClusterSettings(address, source=source)
    return from_queue


def run_out_of_band(function: Callable, task: Any) -> tuple:
    """On a worker: ``function(task)``, pickled with its large buffers apart, as ``(payload, [uint8 arrays])``.

    Dask sends a top-level tuple element by element and NumPy arrays as
    their own frames, received without a copy; a result object pickled as a
    whole would have its large buffers merged, i.e. copied, on arrival. So
    the cleaned samples of a day-long record cost the client their size
    once, not twice. The client rebuilds the result with
    ``pickle.loads(payload, buffers=buffers)`` (pickle protocol 5, PEP 574).
    """
    import numpy as np

    buffers: list = []
    payload = pickle.dumps(function(task), protocol=5, buffer_callback=buffers.append)
    return payload, [np.frombuffer(buffer.raw(), dtype=np.uint8) for buffer in buffers]


class DaskBackend:
    """Runs tasks on a Dask distributed scheduler through a ``distributed.Client``.

    Raises InputError (one line, nothing written) when Dask is missing, the
    scheduler cannot be reached, no worker joins within the connect timeout,
    or every worker runs other software versions than this client.
    """

    remote = True

    def __init__(self, settings: ClusterSettings):
        self.settings = settings
        self.address = settings.address
        self.shared_filesystem = settings.shared_filesystem
        try:
            import distributed
        except ImportError:
            raise InputError(
                settings.source, "running on a cluster needs Dask: pip install 'tracevet[cluster]'"
            ) from None
        self._distributed = distributed
        # Dask's own log lines (reconnect attempts, closed comms) would break the one-line rule on
        # stderr: the batch reports what matters itself. Restored when the backend closes.
        self._log_levels = _quiet_loggers()
        security = None
        if settings.tls_ca_file or settings.tls_client_cert:
            security = distributed.Security(
                tls_ca_file=settings.tls_ca_file,
                tls_client_cert=settings.tls_client_cert,
                tls_client_key=settings.tls_client_key,
                require_encryption=True,
            )
        timeout = settings.connect_timeout
        if timeout is None:
            import dask

            from dask.utils import parse_timedelta

            timeout = parse_timedelta(dask.config.get("distributed.comm.timeouts.connect"), "s")
        where = inert(settings.address, 80)
        try:
            kwargs: dict[str, Any] = {"timeout": timeout, "set_as_default": False}
            if security is not None:
                kwargs["security"] = security
            self.client = distributed.Client(settings.address, **kwargs)
        except Exception as exc:  # OSError, TimeoutError, TLS errors: all one line
            _restore_loggers(self._log_levels)
            raise InputError(
                settings.source, f"cannot reach the Dask scheduler at {where} ({_first_line(exc)})"
            ) from None
        try:
            self.client.wait_for_workers(1, timeout=timeout)
            self.slots = max(1, sum(self.client.nthreads().values()))
            self._check_workers()
        except InputError:
            self.close()
            raise
        except Exception as exc:
            self.close()
            raise InputError(settings.source, f"no usable worker at {where} ({_first_line(exc)})") from None
        self._completed = distributed.as_completed(loop=self.client.loop)

    def _check_workers(self) -> None:
        """Refuse a cluster on which no worker runs this client's software versions."""
        from tracevet.workqueue.tasks import software_versions, version_difference

        mine = software_versions()
        try:
            theirs = self.client.run(software_versions)
        except Exception as exc:
            raise InputError(self.settings.source, f"the workers cannot run tracevet ({_first_line(exc)})") from None
        differences = [version_difference(mine, v) for v in theirs.values()]
        if differences and all(differences):
            raise InputError(self.settings.source, f"refused: every worker runs other software ({differences[0]})")

    @property
    def name(self) -> str:
        """Shown in messages."""
        return f"Dask scheduler {self.address}"

    def submit(self, function: Callable, task: Any):
        """Submit ``function(task)`` with the configured retries; return its future."""
        self.check()
        key = f"tracevet-{function.__name__}-{uuid.uuid4().hex}"
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # the original's bytes travel inside the task, on purpose
            future = self.client.submit(
                run_out_of_band, function, task, key=key, pure=False, retries=self.settings.retries
            )
        self._completed.add(future)
        return future

    def check(self) -> None:
        """BackendLost when the client has lost its scheduler for good."""
        if self.client.status in ("closing", "closed", "failed"):
            raise BackendLost(f"lost the Dask scheduler at {inert(self.address, 80)}")

    def wait(self, handles: set, timeout: float) -> set:
        """Futures among ``handles`` finished within ``timeout`` seconds (via ``as_completed``)."""
        deadline = time.monotonic() + timeout
        done: set = set()
        while True:
            done.update(self._completed.next_batch(block=False))
            if done or time.monotonic() >= deadline:
                break
            self.check()
            time.sleep(0.01)
        return done & handles

    def result(self, handle) -> Any:
        """The task's result; a plain exception for a failed task, BackendLost for a lost scheduler."""
        if handle.status == "cancelled":
            self.check()
            if self.client.status != "running":
                raise BackendLost(f"lost the Dask scheduler at {inert(self.address, 80)}")
        try:
            payload, buffers = handle.result()
            return pickle.loads(payload, buffers=buffers)
        except self._distributed.KilledWorker:
            raise RuntimeError(
                "every worker that cleaned it died (the scheduler's allowed-failures was reached); it stays waiting"
            ) from None

    def retries(self, handles) -> dict:
        """Extra attempts per future (worker deaths and retries), asked of the scheduler."""

        def counts_on_scheduler(dask_scheduler=None, keys=(), retries=0):
            # defined here so that it travels by value: the scheduler need not have tracevet installed
            counts = {}
            for key in keys:
                state = dask_scheduler.tasks.get(key)
                if state is not None:
                    used = max(0, retries - int(getattr(state, "retries", retries)))
                    counts[key] = int(getattr(state, "suspicious", 0)) + used
            return counts

        keys = {h.key: h for h in handles}
        try:
            counts = self.client.run_on_scheduler(counts_on_scheduler, keys=list(keys), retries=self.settings.retries)
        except Exception:  # counting is a nicety; a scheduler that cannot say counts none
            return {}
        return {keys[k]: n for k, n in counts.items() if k in keys}

    def close(self) -> None:
        """Release every future (the scheduler drops their tasks) and disconnect."""
        try:
            self.client.close(timeout=10)
        except Exception:
            pass
        finally:
            _restore_loggers(self._log_levels)


def _quiet_loggers() -> dict:
    """Silence Dask's, Tornado's and asyncio's loggers below CRITICAL; return their levels to restore."""
    names = ["distributed", "tornado", "asyncio"]
    names += [n for n in list(logging.Logger.manager.loggerDict) if n.split(".")[0] in ("distributed", "tornado")]
    levels = {}
    for name in dict.fromkeys(names):
        logger = logging.getLogger(name)
        levels[name] = logger.level
        logger.setLevel(logging.CRITICAL)
    return levels


def _restore_loggers(levels: dict) -> None:
    for name, level in levels.items():
        logging.getLogger(name).setLevel(level)


def _first_line(exc: BaseException) -> str:
    text = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
    return inert(text, 160)
