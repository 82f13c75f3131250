"""SHA-256 checksums of files and canonical JSON (FIPS PUB 180-4).

Canonical JSON here means: keys sorted, no insignificant white space,
pure ASCII with every other character as a ``\\u`` escape of four hex digits
(``json.dumps(..., sort_keys=True, separators=(",", ":"))``), so the same
content always gives the same bytes and the same hash, and a log file shown
with ``cat`` can never carry a terminal escape sequence.
"""

from __future__ import annotations

import hashlib
import json
import os

_CHUNK = 1 << 20


def sha256_file(path: str | os.PathLike) -> str:
    """Hex SHA-256 of a file's bytes, read in 1 MiB chunks."""
    digest = hashlib.sha256()
    with open(path, "rb") as handle:
        while True:
            chunk = handle.read(_CHUNK)
            if not chunk:
                break
            digest.update(chunk)
    return digest.hexdigest()


def sha256_bytes(data: bytes) -> str:
    """Hex SHA-256 of ``data``."""
    return hashlib.sha256(data).hexdigest()


def canonical_json(value: object) -> bytes:
    """``value`` as canonical JSON bytes (sorted keys, compact, ASCII)."""
    return json.dumps(value, sort_keys=True, separators=(",", ":"), allow_nan=False).encode("ascii")


def sha256_json(value: object) -> str:
    """Hex SHA-256 of the canonical JSON of ``value``."""
    return sha256_bytes(canonical_json(value))
