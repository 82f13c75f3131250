"""Cleaning runs of a record: ``records/RECORD/runs/run-NNN/``.

A run folder holds ``run.json`` (origin, time, settings digest, flags
summary and the SHA-256 of every other file in the folder), the settings
(``settings.yaml``, tracevet runs only), the cleaned recording
(``cleaned.npz``, or ``cleaned.EXT`` byte for byte for a record cleaned
elsewhere) and the assessment (``assessment.json``, ``beats.npz``). Runs
are built under ``.work/`` and renamed into place whole; they are never
changed afterwards (files are made read-only) and a new run never replaces
an old one.

Origins: ``tracevet`` (cleaned by tracevet's engine, settings recorded) and
``external`` (added with ``tracevet add --pair``: cleaned by another
pipeline, so there are no tracevet settings; ``settings`` and
``settings_digest`` are null and ``run.json`` says so in ``note``).
"""

from __future__ import annotations

import errno
import json
import os
import socket
from dataclasses import dataclass, field
from pathlib import Path

import yaml

from tracevet import __version__
from tracevet.errors import InputError
from tracevet.recording import Recording, read_recording
from tracevet.recording.atomic import fsync_dir
from tracevet.recording.numpy_format import write_npz
from tracevet.workqueue.checksums import sha256_file
from tracevet.workqueue.ids import check_record_id, is_run_id, run_id_for, run_number
from tracevet.workqueue.layout import RUN_META, RUN_SETTINGS, QueuePaths
from tracevet.workqueue.log import jsonable
from tracevet.workqueue.records import READ_ONLY, copy_verified, read_metadata, write_durable
from tracevet.workqueue.settings import utc_now_text

# libyaml's safe loader when available (same safety, about ten times faster)
SAFE_LOADER = getattr(yaml, "CSafeLoader", yaml.SafeLoader)
EXTERNAL_NOTE = "cleaned outside tracevet (added as a pair): no tracevet settings apply to this run"


@dataclass(frozen=True)
class RunInfo:
    """What the queue knows about one run, without reading its data files.

    Attributes
    ----------
    run_id : str
        ``run-001``, ``run-002``...
    created : str
        UTC time the run was made.
    origin : str
        ``tracevet`` or ``external``.
    settings : dict or None
        Full cleaning settings (None for external runs).
    settings_digest : str or None
        SHA-256 digest of the settings, as ``CleaningSettings.digest()`` gives it.
    worst_severity : str or None
        ``fail``, ``warn`` or None when nothing was flagged.
    n_flags : int
    flags : list of dict
        Every flag (id, severity, message, value, limit, source, channel).
    cleaned_file : str
        File name of the cleaned data inside the run folder.
    files : dict
        SHA-256 of every data file of the run, by file name.
    made_by : str or None
        Reviewer who asked for the run (app re-runs), if any.
    suggestion : dict or None
        For a run made with suggested settings (``tracevet clean --suggest``, the
        review app): ``candidate_set_digest``, ``candidates_evaluated``,
        ``searched_on``, ``noise_removed_db``, ``reason``. None otherwise.
    mains_detection : dict or None
        With ``mains: auto`` requested: what the detector found (``frequency_hz``,
        ``strength_dB``, ``amplitude_rms``, ``margin_db``...) and ``applied``
        (``50``, ``60`` or ``off``, as in ``settings``). None otherwise.
    """

    run_id: str
    created: str
    origin: str
    settings: dict | None
    settings_digest: str | None
    worst_severity: str | None
    n_flags: int
    flags: list = field(default_factory=list)
    cleaned_file: str = "cleaned.npz"
    files: dict = field(default_factory=dict)
    made_by: str | None = None
    suggestion: dict | None = None
    mains_detection: dict | None = None

    @property
    def cleaned_sha256(self) -> str | None:
        """SHA-256 of the cleaned data file, as recorded when the run was made."""
        return self.files.get(self.cleaned_file)


def flag_dicts(assessment) -> list[dict]:
    """The flags of an assessment as plain dicts."""
    keys = ("id", "severity", "message", "value", "limit", "source", "channel")
    return [jsonable({k: getattr(flag, k, None) for k in keys}) for flag in getattr(assessment, "flags", [])]


def worst_of(flags: list[dict]) -> str | None:
    """``fail`` if any flag fails, else ``warn`` if any warns, else None."""
    severities = {f.get("severity") for f in flags}
    return "fail" if "fail" in severities else "warn" if "warn" in severities else None


def build_run(
    folder: Path,
    record_id: str,
    cleaned: Recording | None,
    assessment,
    settings=None,
    cleaned_source: Path | None = None,
    made_by: str | None = None,
    report=None,
    extra: dict | None = None,
) -> dict:
    """Write a run's files into the empty ``folder``; return its run.json contents (without the id).

    Give ``settings`` (a ``CleaningSettings``) and ``cleaned`` for a tracevet
    run, or ``cleaned_source`` (a file cleaned elsewhere, copied byte for
    byte) for an external one. ``report`` (a ``tracevet.cleaning.resolve.CleaningReport``)
    adds what ``mains: auto`` found; ``settings`` must then be ``report.settings`` (applied).
    ``extra`` adds keys to run.json (a batch's token, the worker that cleaned it, its software
    versions); it never replaces the keys written here.
    """
    folder.mkdir(parents=True, exist_ok=True)
    if cleaned_source is not None:
        source_name = cleaned_source.name
        cleaned_name = f"cleaned{cleaned_source.suffix.lower()}"
        copy_verified(cleaned_source, folder / cleaned_name)
        origin, digest = "external", None
    else:
        if cleaned is None or settings is None:
            raise ValueError("a tracevet run needs both the cleaned recording and its settings")
        done = cleaned
        cleaned_name = "cleaned.npz"
        write_durable(folder / cleaned_name, lambda handle: write_npz(done, handle))
        origin = "tracevet"
        digest = settings.digest()
        text = (
            "# cleaning settings of this run (usable as a profile: tracevet denoise --profile)\n" + settings.to_yaml()
        )
        write_durable(folder / RUN_SETTINGS, text.encode("utf-8"))
    assessment.save(folder)
    flags = flag_dicts(assessment)
    files = {}
    for path in sorted(folder.iterdir()):
        if path.is_file() and path.name != RUN_META:
            files[path.name] = sha256_file(path)
            os.chmod(path, READ_ONLY)
    meta = {
        "run": None,
        "record": record_id,
        "created": utc_now_text(),
        "origin": origin,
        "settings_digest": digest,
        "cleaned": cleaned_name,
        "worst_severity": worst_of(flags),
        "n_flags": len(flags),
        "flags": flags,
        "files": files,
        "made_by": made_by,
        "host": socket.gethostname(),
        "tracevet_version": __version__,
    }
    if report is not None and getattr(report, "mains", None) is not None:
        meta["mains_detection"] = jsonable(dict(report.mains.to_dict(), applied=report.settings.mains))
    for key, value in (extra or {}).items():
        meta.setdefault(key, jsonable(value))
    if origin == "external":
        meta["note"] = EXTERNAL_NOTE
        meta["cleaned_source_name"] = source_name
    return meta


def write_run_meta(folder: Path, meta: dict) -> None:
    """Write ``run.json`` into a staged run folder (read-only, fsynced; replaces an earlier one)."""
    target = folder / RUN_META
    if target.exists():
        os.chmod(target, 0o600)
        target.unlink()
    write_durable(target, (json.dumps(meta, indent=2) + "\n").encode("ascii"), mode=READ_ONLY)


def list_runs(paths: QueuePaths, record_id: str) -> list[str]:
    """Run ids of a record, oldest first."""
    try:
        names = os.listdir(paths.runs_dir(record_id))
    except FileNotFoundError:
        return []
    return sorted((n for n in names if is_run_id(n)), key=run_number)


def commit_run(paths: QueuePaths, record_id: str, staged: Path, meta: dict) -> str:
    """Give a staged run the next free id and rename it into the record; return the id.

    Renaming a folder onto an existing non-empty one fails, so two
    processes adding runs at once each get their own number.
    """
    runs_dir = paths.runs_dir(record_id)
    runs_dir.mkdir(exist_ok=True)
    existing = list_runs(paths, record_id)
    number = run_number(existing[-1]) + 1 if existing else 1
    while True:
        run_id = run_id_for(number)
        meta["run"] = run_id
        write_run_meta(staged, meta)
        target = runs_dir / run_id
        if not target.exists():
            try:
                os.rename(staged, target)
                fsync_dir(runs_dir)
                return run_id
            except OSError as exc:
                if exc.errno not in (errno.EEXIST, errno.ENOTEMPTY):
                    raise
        number += 1


def run_with_token(paths: QueuePaths, record_id: str, token: str) -> str | None:
    """The run of a record made under batch token ``token``, if one was stored (newest runs first)."""
    for run_id in reversed(list_runs(paths, record_id)):
        try:
            meta = json.loads((paths.run_dir(record_id, run_id) / RUN_META).read_text(encoding="utf-8"))
        except (OSError, ValueError):
            continue
        if isinstance(meta, dict) and meta.get("batch") == token:
            return run_id
    return None


def read_run_meta(paths: QueuePaths, record_id: str, run_id: str) -> dict:
    """``run.json`` of a run; InputError if the run does not exist or is damaged."""
    check_record_id(record_id)
    if not is_run_id(run_id):
        raise InputError("run", f"{str(run_id)[:40]!r} is not a run id (like run-001)")
    missing = InputError(f"{record_id}/{run_id}", "no such run (see 'tracevet status')")
    return read_metadata(paths, paths.run_dir(record_id, run_id) / RUN_META, "run", missing)


def read_run_settings(paths: QueuePaths, record_id: str, run_id: str) -> dict | None:
    """The settings of a tracevet run as a dict (None for an external run)."""
    path = paths.run_dir(record_id, run_id) / RUN_SETTINGS
    try:
        data = yaml.load(path.read_text(encoding="utf-8"), Loader=SAFE_LOADER)  # noqa: S506 - a safe loader
    except FileNotFoundError:
        return None
    except (OSError, yaml.YAMLError) as exc:
        raise InputError(paths.relative(path), f"damaged run settings ({str(exc)[:80]})") from None
    return data if isinstance(data, dict) else None


def run_info(paths: QueuePaths, record_id: str, run_id: str, with_settings: bool = True) -> RunInfo:
    """A :class:`RunInfo` from ``run.json`` (and ``settings.yaml``)."""
    meta = read_run_meta(paths, record_id, run_id)
    return info_from_meta(meta, read_run_settings(paths, record_id, run_id) if with_settings else None, run_id)


def info_from_meta(meta: dict, settings: dict | None, run_id: str) -> RunInfo:
    """A :class:`RunInfo` from the contents of ``run.json``."""
    stored_flags = meta.get("flags")
    flags = stored_flags if isinstance(stored_flags, list) else []
    return RunInfo(
        run_id=run_id,
        created=str(meta.get("created", "")),
        origin=str(meta.get("origin", "")),
        settings=settings,
        settings_digest=meta.get("settings_digest"),
        worst_severity=meta.get("worst_severity"),
        n_flags=int(meta.get("n_flags") or 0),
        flags=flags,
        cleaned_file=str(meta.get("cleaned", "cleaned.npz")),
        files=dict(meta.get("files") or {}),
        made_by=meta.get("made_by"),
        suggestion=meta.get("suggested") if isinstance(meta.get("suggested"), dict) else None,
        mains_detection=meta.get("mains_detection") if isinstance(meta.get("mains_detection"), dict) else None,
    )


def cleaned_path(paths: QueuePaths, record_id: str, info: RunInfo) -> Path:
    """Path of a run's cleaned data file."""
    name = info.cleaned_file
    if not name.startswith("cleaned.") or "/" in name or "\\" in name:
        raise InputError(f"{record_id}/{info.run_id}", "damaged run metadata (bad cleaned file name)")
    return paths.run_dir(record_id, info.run_id) / name


def load_cleaned(paths: QueuePaths, record_id: str, info: RunInfo, record_meta: dict) -> Recording:
    """Read a run's cleaned recording (with the record's metadata for raw formats)."""
    path = cleaned_path(paths, record_id, info)
    fs = record_meta.get("fs") if path.suffix == ".npy" else None
    return read_recording(path, fs=fs, kind=record_meta.get("kind"), units=record_meta.get("units"))


def load_assessment(paths: QueuePaths, record_id: str, run_id: str):
    """The saved assessment of a run (``tracevet.assessment.Assessment``)."""
    from tracevet.assessment.result import JSON_NAME, Assessment

    folder = paths.run_dir(record_id, run_id)
    if not (folder / JSON_NAME).exists():
        raise InputError(f"{record_id}/{run_id}", "run has no assessment")
    return Assessment.load(folder)
