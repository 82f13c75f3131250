"""``tracevet log --verify``: check the log, every referenced file and the index.

What is checked, and reported with the log line, record and file concerned:

0. the queue settings (cleaning settings and flag limits usable);
1. the hash chain (:func:`tracevet.workqueue.log.chain_problems`): every
   entry's hash, its link to the entry before, sequence numbers, the head
   anchor, a torn last line; and that every line is exactly as written;
2. every record folder: ``record.json`` readable, the original present and
   matching its SHA-256; every run's ``run.json`` readable and every file it
   lists present and matching, no unlisted files, and (when the cleaning
   engine is available) the settings digest recomputed from ``settings.yaml``;
3. every log entry against the files: the record and run exist, and the
   original and cleaned checksums recorded at decision time match the
   files now; every record folder has an ``add`` entry;
4. the index: rebuilt from the files and the log and compared; if it
   differs it is rewritten (reported as repaired).
"""

from __future__ import annotations

import os
from dataclasses import dataclass
from pathlib import Path

from tracevet.workqueue import log as log_mod
from tracevet.workqueue.checksums import sha256_file
from tracevet.workqueue.index import Index, differences, rebuild
from tracevet.workqueue.layout import LOG_NAME, RUN_META
from tracevet.workqueue.records import list_record_ids, original_path, read_meta
from tracevet.workqueue.runs import list_runs, read_run_meta, read_run_settings


@dataclass(frozen=True)
class Problem:
    """One thing ``verify`` found wrong.

    Attributes
    ----------
    where : str
        ``decisions.jsonl line N``, a file path relative to the queue, or ``index``.
    message : str
        What is wrong.
    record : str or None
        The record concerned, if any.
    line : int or None
        The log line concerned, if any.
    file : str or None
        The file concerned (relative to the queue), if any.
    repaired : bool
        True when verify fixed it (only the index, which is derived data).
    """

    where: str
    message: str
    record: str | None = None
    line: int | None = None
    file: str | None = None
    repaired: bool = False

    def __str__(self) -> str:
        record = f" [record {self.record}]" if self.record else ""
        fixed = " (repaired)" if self.repaired else ""
        return f"{self.where}{record}: {self.message}{fixed}"

    def to_dict(self) -> dict:
        """Plain dict for ``--json`` output."""
        return {k: getattr(self, k) for k in ("where", "message", "record", "line", "file", "repaired")}


class _Sums:
    """SHA-256 of files, each computed once."""

    def __init__(self):
        self.cache: dict[Path, str | None] = {}

    def of(self, path: Path) -> str | None:
        if path not in self.cache:
            try:
                self.cache[path] = sha256_file(path)
            except OSError:
                self.cache[path] = None
        return self.cache[path]


def _line_where(line: int | None) -> str:
    return f"{LOG_NAME} line {line}" if line is not None else LOG_NAME


def _file_problem(paths, path: Path, message: str, record: str | None = None) -> Problem:
    """A problem with one file of the queue: reported where the file is, and naming it."""
    where = paths.relative(path)
    return Problem(where, message, record=record, file=where)


def verify_queue(queue, rebuild_index: bool = True) -> list[Problem]:
    """Check ``queue`` (a :class:`tracevet.workqueue.Queue`); return every problem found."""
    paths = queue.paths
    sums = _Sums()
    with queue._lock(shared=True):
        contents = log_mod.read_log(paths.log)
        head = log_mod.read_head(paths)
        line_faults = log_mod.line_problems(paths.log)
    problems = _log_problems(contents, head, line_faults)
    problems += _settings_problems(queue)
    record_ids = list_record_ids(paths)
    known_records: dict[str, dict] = {}
    for record_id in record_ids:
        problems.extend(_check_record(paths, record_id, sums, known_records))
    added = set()
    for entry in contents.entries:
        if entry.event not in ("add", "decision") or not isinstance(entry.record, str):
            continue
        if entry.event == "add":
            added.add(entry.record)
        problems.extend(_check_entry(paths, entry, known_records.get(entry.record), sums))
    for record_id in record_ids:
        if record_id in known_records and record_id not in added:
            problems.append(
                Problem(
                    paths.relative(paths.record_dir(record_id)),
                    "record folder has no 'add' entry in the log (copied in by hand?)",
                    record=record_id,
                )
            )
    if rebuild_index:
        problems.extend(_check_index(queue))
    return problems


def _log_problems(contents, head, line_faults) -> list[Problem]:
    """The hash chain's problems, then lines not exactly as written (unless their hash already failed)."""
    problems = [
        Problem(_line_where(line), message, record=record, line=line, file=LOG_NAME)
        for line, record, message in log_mod.chain_problems(contents, head)
    ]
    bad_hash_lines = {p.line for p in problems if p.line is not None}
    problems += [
        Problem(_line_where(line), message, line=line, file=LOG_NAME)
        for line, message in line_faults
        if line not in bad_hash_lines
    ]
    return problems


def _settings_problems(queue) -> list[Problem]:
    """Unusable cleaning settings or flag limits in the queue settings (reported, never fatal)."""
    problems = []
    for check in (queue.settings.cleaning_settings, queue.settings.limits):
        try:
            check()
        except Exception as exc:  # reported like every other problem, never fatal
            message = exc.one_line() if hasattr(exc, "one_line") else str(exc)[:160]
            problems.append(_file_problem(queue.paths, queue.paths.settings, f"unusable queue settings: {message}"))
    return problems


def _check_entry(paths, entry, meta: dict | None, sums: _Sums) -> list[Problem]:
    """An ``add`` or ``decision`` entry against the files: its record (``meta``, None when missing) and run
    exist, and the checksums it recorded still match the files."""
    record_id, where = entry.record, _line_where(entry.line)
    if meta is None:
        message = "names a record that is not in the queue (its folder is missing)"
        return [Problem(where, message, record=record_id, line=entry.line)]
    problems = []
    original = original_path(paths, record_id, meta)
    if entry.get("original_sha256") != sums.of(original):
        problems.append(
            Problem(
                where,
                f"original checksum in the entry does not match {paths.relative(original)}",
                record=record_id,
                line=entry.line,
                file=paths.relative(original),
            )
        )
    if entry.event != "decision":
        return problems
    run_id = entry.run
    if not isinstance(run_id, str) or run_id not in list_runs(paths, record_id):
        message = f"signs off run {str(run_id)[:20]!r}, which does not exist"
        return problems + [Problem(where, message, record=record_id, line=entry.line)]
    cleaned = paths.run_dir(record_id, run_id) / str(entry.get("cleaned_file") or "cleaned.npz")
    if entry.get("cleaned_sha256") != sums.of(cleaned):
        problems.append(
            Problem(
                where,
                f"cleaned data signed off here no longer match: {paths.relative(cleaned)} was changed or replaced",
                record=record_id,
                line=entry.line,
                file=paths.relative(cleaned),
            )
        )
    return problems


def _check_record(paths, record_id: str, sums: _Sums, known: dict) -> list[Problem]:
    """A record folder: its metadata, its original and every run (``known`` gets the metadata read)."""
    try:
        meta = read_meta(paths, record_id)
        original = original_path(paths, record_id, meta)
    except Exception as exc:
        message = f"unreadable record metadata ({str(exc)[:80]})"
        return [_file_problem(paths, paths.record_meta(record_id), message, record_id)]
    known[record_id] = meta
    problems = []
    actual = sums.of(original)
    if actual is None:
        problems.append(_file_problem(paths, original, "original file is missing", record_id))
    elif actual != meta.get("original_sha256"):
        problems.append(
            _file_problem(paths, original, "original file does not match its checksum in record.json", record_id)
        )
    for run_id in list_runs(paths, record_id):
        problems.extend(_check_run(paths, record_id, run_id, sums))
    return problems


def _check_run(paths, record_id: str, run_id: str, sums: _Sums) -> list[Problem]:
    """A run folder: ``run.json`` readable, every file it lists present and matching, none unlisted, the digest."""
    folder = paths.run_dir(record_id, run_id)
    try:
        run = read_run_meta(paths, record_id, run_id)
    except Exception as exc:
        return [_file_problem(paths, folder / RUN_META, f"unreadable run metadata ({str(exc)[:80]})", record_id)]
    problems = []
    stored_files = run.get("files")
    files = stored_files if isinstance(stored_files, dict) else {}
    for name, expected in sorted(files.items()):
        target = folder / str(name)
        if "/" in str(name) or "\\" in str(name):
            message = f"lists a file outside the run folder: {str(name)[:60]!r}"
            problems.append(Problem(paths.relative(folder / RUN_META), message, record=record_id))
            continue
        got = sums.of(target)
        if got is None:
            problems.append(_file_problem(paths, target, "file is missing", record_id))
        elif got != expected:
            message = "file does not match its checksum in run.json (changed or replaced)"
            problems.append(_file_problem(paths, target, message, record_id))
    for name in sorted(os.listdir(folder)):
        if name != RUN_META and name not in files:
            message = "file not listed in run.json (added afterwards)"
            problems.append(_file_problem(paths, folder / name, message, record_id))
    problems.extend(_check_digest(paths, record_id, run_id, run))
    return problems


def _check_digest(paths, record_id: str, run_id: str, run: dict) -> list[Problem]:
    if run.get("origin") != "tracevet":
        return []
    try:
        from tracevet.cleaning import CleaningSettings
    except ImportError:
        return []
    where = paths.relative(paths.run_dir(record_id, run_id) / "settings.yaml")
    try:
        settings = read_run_settings(paths, record_id, run_id)
        digest = CleaningSettings.from_dict(settings or {}, source=where).digest()
    except Exception as exc:
        return [Problem(where, f"settings cannot be read back ({str(exc)[:80]})", record=record_id, file=where)]
    if digest != run.get("settings_digest"):
        return [Problem(where, "settings digest in run.json does not match the settings", record=record_id, file=where)]
    return []


def _check_index(queue) -> list[Problem]:
    paths = queue.paths
    with queue._lock():
        stored = Index.load(paths, catch_up=False)
        fresh, unreadable = rebuild(paths)
        changed = differences(stored, fresh)
        damaged = list(stored.damaged)
        if changed or damaged or not paths.index.exists():
            fresh.write_snapshot(paths)
    problems = []
    if damaged:
        problems.append(
            Problem(
                "index", f"damaged ({'; '.join(damaged)[:120]}); rebuilt from the records and the log", repaired=True
            )
        )
    if changed:
        shown = ", ".join(changed[:5]) + (" ..." if len(changed) > 5 else "")
        problems.append(
            Problem(
                "index",
                f"out of date for {len(changed)} record(s) ({shown}); rebuilt from the records and the log",
                repaired=True,
            )
        )
    del unreadable  # unreadable records are reported by the record checks
    return problems


def head_summary(queue) -> dict:
    """Count and hash of the newest log entry (to note down outside the queue)."""
    contents = log_mod.read_log(queue.paths.log)
    if not contents.entries:
        return {"entries": 0, "hash": log_mod.GENESIS}
    last = contents.entries[-1]
    return {"entries": last.seq, "hash": last.hash}


