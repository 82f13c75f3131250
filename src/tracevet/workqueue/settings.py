"""The queue settings file ``queue.yaml``: read, check and write.

Example (as written by ``tracevet init``)::

    tracevet_queue: 1
    queue_id: 0b6c1c0e6a1f4c7e9a4f0f8c2d9e7b31
    created: '2026-12-02T10:50:00Z'
    cleaning: {}            # cleaning settings for `tracevet clean`; {} = tracevet's defaults
    flag_limits: {}         # overrides of the assessment's flag limits
    defaults:
      kind: ecg             # for files that do not say (ecg, mcg, other)
      units: mV
    claim_idle_minutes: 30  # a claim idle this long may be taken over

The file is read with a safe YAML loader only (no tags, no objects).
``cleaning`` holds keys of a cleaning profile (missing keys take
tracevet's defaults) and ``flag_limits`` the queue's own flag limits; both
are checked by their own layers when they are first used.
"""

from __future__ import annotations

import uuid
from dataclasses import dataclass, field
from datetime import datetime, timezone
from pathlib import Path

import yaml

from tracevet.errors import InputError
from tracevet.recording.model import KINDS, normalise_units
from tracevet.safe_yaml import load_yaml
from tracevet.workqueue.layout import FORMAT_VERSION, MARKER_KEY

DEFAULT_IDLE_MINUTES = 30.0
_KNOWN_KEYS = {
    MARKER_KEY,
    "queue_id",
    "created",
    "cleaning",
    "flag_limits",
    "defaults",
    "claim_idle_minutes",
    "cluster",
}


def utc_now_text() -> str:
    """The current UTC time as ISO 8601 with microseconds and a ``Z``."""
    return datetime.now(timezone.utc).strftime("%Y-%m-%dT%H:%M:%S.%fZ")


@dataclass(frozen=True)
class QueueSettings:
    """Parsed ``queue.yaml``.

    Attributes
    ----------
    queue_id : str
        A random id given at ``init``; exports and the log head name it.
    created : str
        UTC time of ``init``.
    cleaning : dict
        Cleaning settings for ``tracevet clean`` (partial; defaults fill the rest).
    flag_limits : dict
        The queue's flag limits (checked by the assessment layer).
    default_kind, default_units : str or None
        Metadata for files that carry none.
    claim_idle_minutes : float
        A claim idle for longer may be taken over.
    cluster : str, dict or None
        Dask scheduler ``tracevet clean`` sends work to (an address, or a
        mapping checked by :func:`tracevet.workqueue.cluster.cluster_settings`);
        None: the local process pool.
    source : str
        The file the settings came from, for messages.
    """

    queue_id: str
    created: str
    cleaning: dict = field(default_factory=dict)
    flag_limits: dict = field(default_factory=dict)
    default_kind: str = "ecg"
    default_units: str | None = "mV"
    claim_idle_minutes: float = DEFAULT_IDLE_MINUTES
    source: str = "queue.yaml"
    cluster: object = None

    def cleaning_settings(self, overrides: list[str] | None = None):
        """The queue's default ``CleaningSettings`` (optionally with ``k=v`` overrides)."""
        from tracevet.cleaning import DEFAULT_SETTINGS, CleaningSettings, apply_overrides

        merged = dict(DEFAULT_SETTINGS.to_dict())
        merged.update(self.cleaning)
        settings = CleaningSettings.from_dict(merged, source=f"{self.source}: cleaning")
        if overrides:
            settings = apply_overrides(settings, list(overrides))
        return settings

    def limits(self):
        """The queue's flag limits as the assessment layer wants them (None when empty)."""
        if not self.flag_limits:
            return None
        from tracevet.assessment import limits_from_mapping

        return limits_from_mapping(self.flag_limits, f"{self.source}: flag_limits")

    def to_text(self) -> str:
        """The settings as commented YAML, as ``init`` writes them."""
        def dump(value) -> str:
            return yaml.safe_dump(value, sort_keys=False, allow_unicode=False, default_flow_style=False).rstrip("\n")

        lines = [
            "# tracevet work queue settings (see README, 'The work queue').",
            f"{MARKER_KEY}: {FORMAT_VERSION}",
            f"queue_id: {self.queue_id}",
            f"created: '{self.created}'",
            "# cleaning settings used by 'tracevet clean' (keys of a cleaning profile; {} = tracevet's defaults)",
            dump({"cleaning": self.cleaning}) if self.cleaning else "cleaning: {}",
            "# the queue's own flag limits (see README, 'Fidelity assessment'; {} = tracevet's defaults)",
            dump({"flag_limits": self.flag_limits}) if self.flag_limits else "flag_limits: {}",
            "# metadata for files that do not carry it",
            dump({"defaults": {"kind": self.default_kind, "units": self.default_units}}),
            "# a claim idle for this many minutes may be taken over by another reviewer",
            f"claim_idle_minutes: {self.claim_idle_minutes:g}",
        ]
        if self.cluster not in (None, "", {}):
            lines += [
                "# Dask scheduler 'tracevet clean' sends work to (docs/cluster.md)",
                dump({"cluster": self.cluster}),
            ]
        return "\n".join(lines) + "\n"


def new_settings(
    cleaning: dict | None = None,
    flag_limits: dict | None = None,
    kind: str = "ecg",
    units: str | None = "mV",
    claim_idle_minutes: float = DEFAULT_IDLE_MINUTES,
) -> QueueSettings:
    """Settings for a new queue (a fresh queue id, created now)."""
    return QueueSettings(
        queue_id=uuid.uuid4().hex,
        created=utc_now_text(),
        cleaning=dict(cleaning or {}),
        flag_limits=dict(flag_limits or {}),
        default_kind=_check_kind(kind, "--kind"),
        default_units=normalise_units(units, "--units"),
        claim_idle_minutes=_check_minutes(claim_idle_minutes, "--claim-idle-minutes"),
    )


def _check_kind(kind: object, source: str) -> str:
    if kind not in KINDS:
        raise InputError(source, f"kind must be one of {', '.join(KINDS)}, got {str(kind)[:20]!r}")
    return str(kind)


def _check_minutes(value: object, source: str) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not (0 < float(value) < 1e7):
        raise InputError(source, f"claim idle time must be a positive number of minutes, got {str(value)[:20]!r}")
    return float(value)


def read_settings(path: Path) -> QueueSettings:
    """Read and check ``queue.yaml``; raise InputError naming the problem."""
    source = str(path)
    try:
        text = path.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError(source, f"cannot read queue settings ({type(exc).__name__})") from None
    try:
        data = load_yaml(text)  # safe loading; a key given twice is refused, not silently overridden
    except yaml.YAMLError as exc:
        where = getattr(exc, "problem_mark", None)
        line = f" at line {where.line + 1}" if where is not None else ""
        problem = getattr(exc, "problem", None) or "invalid YAML"
        raise InputError(source, f"not valid queue settings{line}: {str(problem)[:100]}") from None
    if not isinstance(data, dict) or MARKER_KEY not in data:
        raise InputError(source, f"not a tracevet queue settings file (no '{MARKER_KEY}:' key)")
    if data[MARKER_KEY] != FORMAT_VERSION:
        raise InputError(
            source,
            f"queue format {str(data[MARKER_KEY])[:20]!r} is not supported (this tracevet reads {FORMAT_VERSION})",
        )
    unknown = sorted(str(k) for k in data if k not in _KNOWN_KEYS)
    if unknown:
        raise InputError(source, f"unknown setting(s): {', '.join(unknown)[:100]}")
    cleaning = data.get("cleaning") or {}
    limits = data.get("flag_limits") or {}
    defaults = data.get("defaults") or {}
    for key, value in (("cleaning", cleaning), ("flag_limits", limits), ("defaults", defaults)):
        if not isinstance(value, dict):
            raise InputError(source, f"'{key}' must be a mapping")
    queue_id = data.get("queue_id")
    if not isinstance(queue_id, str) or not queue_id:
        raise InputError(source, "'queue_id' is missing")
    extra = sorted(str(k) for k in defaults if k not in {"kind", "units"})
    if extra:
        raise InputError(source, f"unknown key(s) under 'defaults': {', '.join(extra)[:100]}")
    return QueueSettings(
        queue_id=queue_id,
        created=str(data.get("created") or ""),
        cleaning=cleaning,
        flag_limits=limits,
        default_kind=_check_kind(defaults.get("kind", "ecg"), f"{source}: defaults.kind"),
        default_units=normalise_units(defaults.get("units"), f"{source}: defaults.units"),
        claim_idle_minutes=_check_minutes(
            data.get("claim_idle_minutes", DEFAULT_IDLE_MINUTES), f"{source}: claim_idle_minutes"
        ),
        source=source,
        cluster=_check_cluster(data.get("cluster"), f"{source}: cluster"),
    )


def _check_cluster(value: object, source: str):
    """The ``cluster:`` setting as written (None when absent); checked in full by ``tracevet clean``.

    Only its shape is checked here: opening a queue for review must not
    depend on certificate files that only the machine running ``clean`` has.
    """
    if value in (None, "", {}):
        return None
    if not isinstance(value, (str, dict)):
        raise InputError(source, "must be a scheduler address or a mapping with 'address'")
    return value
