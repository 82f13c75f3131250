"""Record and run identifiers that are safe as folder names.

A record id is derived from the file name it came from: accents are
folded to ASCII, anything other than letters, digits, ``.``, ``_`` and
``-`` becomes ``-``, it starts with a letter or digit and is at most
:data:`MAX_ID_LENGTH` characters long. Ids are unique without regard to
case (``A`` and ``a`` would collide on some file systems), so a second
``dive.csv`` becomes ``dive-2``. The name as given is kept separately in
the record's metadata and is only ever displayed inert.

Run ids are ``run-001``, ``run-002``... in the order the runs were made.
"""

from __future__ import annotations

import re
import unicodedata
from pathlib import PurePath

from tracevet.errors import InputError

MAX_ID_LENGTH = 64
_ID_PATTERN = re.compile(r"[A-Za-z0-9][A-Za-z0-9._-]{0,63}")
_UNSAFE = re.compile(r"[^A-Za-z0-9._-]+")
_RUN_PATTERN = re.compile(r"run-(\d{3,9})")
_RESERVED = {"con", "prn", "aux", "nul"}  # refused by some file systems as names


def base_name(source: str) -> str:
    """The last component of a path-like name, without its extension.

    Both ``/`` and ``\\`` separate components, so ``../../etc/passwd`` and
    ``C:\\data\\dive.csv`` give ``passwd`` and ``dive``.
    """
    text = str(source).replace("\\", "/").rstrip("/")
    name = text.rsplit("/", 1)[-1]
    stem = PurePath(name).stem if "." in name.strip(".") else name
    return stem


def make_record_id(source: str, taken: set[str] | frozenset[str] = frozenset()) -> str:
    """Make a safe record id from ``source`` (a file name), unique among ``taken``.

    Parameters
    ----------
    source : str
        A file name or path, as given; anything it holds is allowed.
    taken : set of str
        Ids already in use, compared case-insensitively (pass them casefolded
        or not; both work).

    Examples
    --------
    >>> make_record_id("../../Dive 12 (Müller).csv")
    'Dive-12-Muller'
    >>> make_record_id("dive.csv", {"dive"})
    'dive-2'
    """
    decomposed = unicodedata.normalize("NFKD", base_name(source))
    folded = "".join(c for c in decomposed if not unicodedata.combining(c))  # ü -> u; other non-ASCII -> '-'
    safe = _UNSAFE.sub("-", folded)
    safe = re.sub(r"-{2,}", "-", safe).strip("-._")
    if not safe or safe.lower() in _RESERVED:
        safe = f"record-{safe}" if safe else "record"
    safe = safe[:MAX_ID_LENGTH].rstrip("-._")
    lowered = taken if isinstance(taken, CaseFoldedIds) else {t.casefold() for t in taken}
    if safe.casefold() not in lowered:
        return safe
    number = 2
    while True:
        suffix = f"-{number}"
        candidate = safe[: MAX_ID_LENGTH - len(suffix)].rstrip("-._") + suffix
        if candidate.casefold() not in lowered:
            return candidate
        number += 1


class CaseFoldedIds(set):
    """A set of ids kept casefolded, for allocating many ids in a row.

    :func:`make_record_id` uses it as is instead of casefolding every id on
    every call; add new ids with :meth:`add_id`.
    """

    def __init__(self, ids=()):
        super().__init__(i.casefold() for i in ids)

    def add_id(self, record_id: str) -> None:
        """Mark ``record_id`` as taken."""
        self.add(record_id.casefold())


def is_record_id(text: object) -> bool:
    """True when ``text`` has the form of a record id (safe as a folder name)."""
    return isinstance(text, str) and bool(_ID_PATTERN.fullmatch(text)) and text.lower() not in _RESERVED


def check_record_id(text: object, source: str = "record") -> str:
    """Return ``text`` if it is a well-formed record id, else raise InputError.

    This is the gate every record id from outside (command line, app) passes
    before it is used to build a path.
    """
    if not is_record_id(text):
        raise InputError(
            source, f"{str(text)[:80]!r} is not a record id (letters, digits, '.', '_', '-'; see 'tracevet status')"
        )
    return str(text)


def run_id_for(number: int) -> str:
    """The id of the ``number``-th run of a record (1-based): ``run-001``."""
    if number < 1:
        raise ValueError("run numbers start at 1")
    return f"run-{number:03d}"


def run_number(run_id: str) -> int:
    """The number of a run id (``run-007`` -> 7); raises InputError if malformed."""
    match = _RUN_PATTERN.fullmatch(str(run_id))
    if not match:
        raise InputError("run", f"{str(run_id)[:40]!r} is not a run id (like run-001)")
    return int(match.group(1))


def is_run_id(text: object) -> bool:
    """True when ``text`` has the form of a run id."""
    return isinstance(text, str) and bool(_RUN_PATTERN.fullmatch(text))
