"""Recordings: the in-memory model and readers/writers for CSV, NPY, NPZ and EDF."""

from tracevet.recording.model import KINDS, Recording, normalise_units
from tracevet.recording.io import read_recording, write_recording, SUPPORTED_READ, SUPPORTED_WRITE

__all__ = [
    "KINDS",
    "Recording",
    "normalise_units",
    "read_recording",
    "write_recording",
    "SUPPORTED_READ",
    "SUPPORTED_WRITE",
]
