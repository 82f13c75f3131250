"""Where everything lives inside a queue folder.

A queue is an ordinary folder that a person can read with ``ls`` and a text
editor::

    QUEUE/
      queue.yaml              queue settings; its first key marks the folder as a queue
      decisions.jsonl         the append-only decision log (one JSON entry per line)
      decisions.head          count and hash of the newest entry (detects a cut-off log)
      index.json              small index of every record (rebuilt by `tracevet log --verify`)
      index.journal           per-record index updates since index.json was written
      claims/RECORD.json      who is reviewing RECORD right now
      records/RECORD/
        record.json           where the record came from, its metadata and checksum
        original.EXT          the original file, byte for byte, read-only
        runs/run-001/
          run.json            origin, created, settings digest, flags summary, checksums
          settings.yaml       the cleaning settings of this run (absent for external runs)
          cleaned.npz         the cleaned recording (cleaned.EXT for external runs)
          assessment.json     the fidelity assessment
          beats.npz           beat data behind the assessment
      .work/                  runs and records being written (renamed into place when whole)
      .lock                   lock file for every change

Every path handed out here is built from a validated record id
(:func:`tracevet.workqueue.ids.check_record_id`), so nothing can point outside
the queue.
"""

from __future__ import annotations

import os
from dataclasses import dataclass
from pathlib import Path

from tracevet.errors import InputError

SETTINGS_NAME = "queue.yaml"
MARKER_KEY = "tracevet_queue"
FORMAT_VERSION = 1
LOG_NAME = "decisions.jsonl"
HEAD_NAME = "decisions.head"
INDEX_NAME = "index.json"
JOURNAL_NAME = "index.journal"
CLAIMS_DIR = "claims"
RECORDS_DIR = "records"
WORK_DIR = ".work"
LOCK_NAME = ".lock"
CLEAN_LOCK_NAME = ".clean.lock"
RUNS_DIR = "runs"
RECORD_META = "record.json"
RUN_META = "run.json"
RUN_SETTINGS = "settings.yaml"
# A run's assessment files are named by tracevet.assessment.result (JSON_NAME, BEATS_NAME).

# Files that may sit in a folder before `init` turns it into a queue (the
# repository's own queue/ folder carries these).
INIT_TOLERATED = {".gitkeep", "README.md", ".gitignore"}


@dataclass(frozen=True)
class QueuePaths:
    """Paths of one queue folder (no file is touched by building them)."""

    root: Path

    @property
    def settings(self) -> Path:
        """The queue settings file (``queue.yaml``)."""
        return self.root / SETTINGS_NAME

    @property
    def log(self) -> Path:
        """The decision log (``decisions.jsonl``)."""
        return self.root / LOG_NAME

    @property
    def head(self) -> Path:
        """The log head anchor (``decisions.head``)."""
        return self.root / HEAD_NAME

    @property
    def index(self) -> Path:
        """The index snapshot (``index.json``)."""
        return self.root / INDEX_NAME

    @property
    def journal(self) -> Path:
        """The index journal (``index.journal``)."""
        return self.root / JOURNAL_NAME

    @property
    def claims(self) -> Path:
        """The folder of claim files."""
        return self.root / CLAIMS_DIR

    @property
    def records(self) -> Path:
        """The folder holding one folder per record."""
        return self.root / RECORDS_DIR

    @property
    def work(self) -> Path:
        """Scratch folder for runs and records being written."""
        return self.root / WORK_DIR

    @property
    def lock(self) -> Path:
        """The lock file serialising every change to the queue."""
        return self.root / LOCK_NAME

    @property
    def clean_lock(self) -> Path:
        """The lock file held by a running ``tracevet clean``."""
        return self.root / CLEAN_LOCK_NAME

    def record_dir(self, record_id: str) -> Path:
        """Folder of one record (``record_id`` must already be validated)."""
        return self.records / record_id

    def record_meta(self, record_id: str) -> Path:
        """``record.json`` of one record."""
        return self.record_dir(record_id) / RECORD_META

    def runs_dir(self, record_id: str) -> Path:
        """Folder of the runs of one record."""
        return self.record_dir(record_id) / RUNS_DIR

    def run_dir(self, record_id: str, run_id: str) -> Path:
        """Folder of one run."""
        return self.runs_dir(record_id) / run_id

    def claim_file(self, record_id: str) -> Path:
        """Claim file of one record."""
        return self.claims / f"{record_id}.json"

    def relative(self, path: Path) -> str:
        """``path`` relative to the queue root, for messages."""
        try:
            return str(Path(path).relative_to(self.root))
        except ValueError:
            return str(path)


def _umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask


# Files are created with mode 0666 minus the umask, as ordinary files are, so
# that a team sharing a queue through a group (umask 002) can all write to it.
FILE_MODE = 0o666 & ~_umask()


def find_queue(path: str | os.PathLike) -> QueuePaths:
    """Return the paths of the queue at ``path`` or raise a one-line error.

    A folder is a queue when it holds ``queue.yaml``; the settings are
    checked separately when the queue is opened.
    """
    root = Path(path)
    if not root.exists():
        raise InputError(str(path), "no such queue folder (create one with 'tracevet init')")
    if not root.is_dir():
        raise InputError(str(path), "is a file, not a queue folder")
    paths = QueuePaths(root.resolve())
    if not paths.settings.is_file():
        raise InputError(str(path), f"not a tracevet queue (no {SETTINGS_NAME}; create one with 'tracevet init')")
    return paths
