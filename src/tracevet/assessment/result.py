"""The assessment result: metrics, flags, beat templates and flagged regions; save and load.

``assessment.json`` holds the JSON contract (``metrics`` and ``flags``) plus a
``context`` object (beat count, kind, units, limit mode, the channel of each
flag). ``beats.npz`` holds, per channel, the R-peak samples, beat labels,
the templates and the flagged regions. Both are written atomically, the
arrays first, so a folder with ``assessment.json`` is always complete.
"""

from __future__ import annotations

import io
import json
import math
from typing import Any
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from tracevet.assessment.flags import Flag
from tracevet.errors import InputError
from tracevet.recording.atomic import write_bytes_atomic, write_text_atomic

JSON_NAME = "assessment.json"
BEATS_NAME = "beats.npz"


@dataclass(frozen=True)
class ChannelBeats:
    """Per-channel beat data for display.

    Attributes
    ----------
    channel : str
        Channel name.
    r_peaks : numpy.ndarray
        Detected R-peak sample indices (int64), all beats.
    beat_labels : numpy.ndarray
        Per beat: 0 dominant morphology, 1 other morphology, -1 too close to an edge.
    template_time_s : numpy.ndarray
        Template time axis (s) relative to R (empty when no template).
    template_original, template_cleaned, template_removed : numpy.ndarray
        Median beat templates of the dominant morphology.
    regions : tuple
        ``(start_s, end_s, flag_id)`` of every flagged beat or region, sorted.
    """

    channel: str
    r_peaks: np.ndarray
    beat_labels: np.ndarray
    template_time_s: np.ndarray
    template_original: np.ndarray
    template_cleaned: np.ndarray
    template_removed: np.ndarray
    regions: tuple = ()


def _clean_number(value):
    if value is None:
        return None
    if isinstance(value, (bool, np.bool_)):
        return float(value)
    value = float(value)
    return value if math.isfinite(value) else None


def _optional_int(value):
    return None if value is None else int(value)


@dataclass
class Assessment:
    """Result of comparing a cleaned recording with its original.

    Attributes
    ----------
    metrics : dict
        Metric name -> number or ``None``. Single channel: plain names
        (``r_amplitude_ratio``); several channels: ``name@channel``.
    flags : list of Flag
        Distortion flags, fail first.
    beat_count : int
        Beats detected on the original (largest over channels).
    channels : list of ChannelBeats
        Beat data per channel, for display.
    context : dict
        Kind, units, limit mode (``absolute`` or ``relative``).
    """

    metrics: dict
    flags: list
    beat_count: int
    channels: list = field(default_factory=list)
    context: dict = field(default_factory=dict)

    @property
    def worst_severity(self) -> str | None:
        """``fail`` if any flag fails, else ``warn`` if any warns, else ``None``."""
        severities = {flag.severity for flag in self.flags}
        if "fail" in severities:
            return "fail"
        if "warn" in severities:
            return "warn"
        return None

    def to_json_dict(self) -> dict:
        """The stable JSON contract: ``{"metrics": {...}, "flags": [...]}``, no NaN."""
        return {
            "metrics": {str(k): _clean_number(v) for k, v in self.metrics.items()},
            "flags": [flag.to_json_dict() for flag in self.flags],
        }

    def save(self, folder) -> None:
        """Write ``beats.npz`` then ``assessment.json`` atomically into ``folder``."""
        folder = Path(folder)
        if not folder.is_dir():
            raise InputError(str(folder), "assessment folder does not exist")
        arrays: dict[str, Any] = {"channels": np.array([c.channel for c in self.channels], dtype=str)}
        for i, ch in enumerate(self.channels):
            prefix = f"ch{i}_"
            arrays[prefix + "r_peaks"] = np.asarray(ch.r_peaks, dtype=np.int64)
            arrays[prefix + "beat_labels"] = np.asarray(ch.beat_labels, dtype=np.int8)
            arrays[prefix + "template_time_s"] = np.asarray(ch.template_time_s, dtype=np.float64)
            arrays[prefix + "template_original"] = np.asarray(ch.template_original, dtype=np.float64)
            arrays[prefix + "template_cleaned"] = np.asarray(ch.template_cleaned, dtype=np.float64)
            arrays[prefix + "template_removed"] = np.asarray(ch.template_removed, dtype=np.float64)
            arrays[prefix + "region_start_s"] = np.array([r[0] for r in ch.regions], dtype=np.float64)
            arrays[prefix + "region_end_s"] = np.array([r[1] for r in ch.regions], dtype=np.float64)
            arrays[prefix + "region_flag"] = np.array([r[2] for r in ch.regions], dtype=str).reshape(-1)
        buffer = io.BytesIO()
        np.savez_compressed(buffer, **arrays)
        write_bytes_atomic(folder / BEATS_NAME, buffer.getvalue())
        document = self.to_json_dict()
        document["context"] = dict(
            self.context, beat_count=int(self.beat_count), flag_channels=[f.channel for f in self.flags]
        )
        write_text_atomic(folder / JSON_NAME, json.dumps(document, indent=2, allow_nan=False) + "\n")

    @classmethod
    def load(cls, folder) -> "Assessment":
        """Read an assessment saved by :meth:`save`.

        Raises
        ------
        InputError
            When a file is missing or malformed.
        """
        folder = Path(folder)
        json_path, npz_path = folder / JSON_NAME, folder / BEATS_NAME
        try:
            document = json.loads(json_path.read_text(encoding="utf-8"))
            metrics = dict(document["metrics"])
            context = dict(document.get("context", {}))
            channels_of_flags = list(context.pop("flag_channels", []))
            flags = []
            for i, item in enumerate(document["flags"]):
                flags.append(
                    Flag(
                        id=str(item["id"]),
                        severity=str(item["severity"]),
                        message=str(item["message"]),
                        value=item["value"],
                        limit=item["limit"],
                        source=str(item["source"]),
                        channel=str(channels_of_flags[i]) if i < len(channels_of_flags) else "",
                        where=tuple((float(a), float(b)) for a, b in item.get("where", [])),
                        where_more=int(item.get("where_more", 0)),
                        beats_affected=_optional_int(item.get("beats_affected")),
                        beats_measured=_optional_int(item.get("beats_measured")),
                    )
                )
            beat_count = int(context.pop("beat_count", 0))
        except FileNotFoundError:
            raise InputError(str(json_path), "no such file") from None
        except (OSError, ValueError, KeyError, TypeError) as exc:
            raise InputError(str(json_path), f"not a tracevet assessment ({type(exc).__name__})") from None
        channels = []
        try:
            with np.load(npz_path, allow_pickle=False) as data:
                names = [str(n) for n in data["channels"]]
                for i, name in enumerate(names):
                    p = f"ch{i}_"
                    starts, ends, ids = data[p + "region_start_s"], data[p + "region_end_s"], data[p + "region_flag"]
                    channels.append(
                        ChannelBeats(
                            channel=name,
                            r_peaks=data[p + "r_peaks"],
                            beat_labels=data[p + "beat_labels"],
                            template_time_s=data[p + "template_time_s"],
                            template_original=data[p + "template_original"],
                            template_cleaned=data[p + "template_cleaned"],
                            template_removed=data[p + "template_removed"],
                            regions=tuple((float(a), float(b), str(c)) for a, b, c in zip(starts, ends, ids)),
                        )
                    )
        except FileNotFoundError:
            raise InputError(str(npz_path), "no such file") from None
        except (OSError, ValueError, KeyError) as exc:
            raise InputError(str(npz_path), f"not a tracevet beats file ({type(exc).__name__})") from None
        return cls(metrics=metrics, flags=flags, beat_count=beat_count, channels=channels, context=context)
