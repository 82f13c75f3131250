"""The demo scenario: invented recordings of a fictional cold-water dive study.

Setting (invented): the *Skarvik cold-water dive study* records chest ECG of
divers during cold-water training dives from a support boat. Shivering adds
muscle noise that overlaps the QRS band, breathing moves the baseline, and the
boat's generator adds 60 Hz mains with harmonics. A bench magnetometer in the
study's shore lab records MCG in picotesla. All signals are synthetic, made with
the dynamical ECG model of McSharry et al. (2003) in :mod:`tracevet.synthetic`,
with heart-rate variability, a few ectopic beats, and noise at realistic levels.

Some records are cleaned with the study's default settings (these should come
out clean); three are cleaned with settings that are too aggressive, and one
arrives as a pair already cleaned by the boat's own (invented) pipeline with a
causal filter. Which of them are flagged is decided by the assessment, never
by this module.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from datetime import datetime, timedelta
from pathlib import Path
from typing import Callable

import numpy as np
from scipy import signal as sps

from tracevet.recording import Recording, write_recording

STUDY_START = datetime(2026, 2, 9, 8, 30, 0)


@dataclass(frozen=True)
class DemoRecord:
    """One invented recording of the scenario and how it is to be cleaned."""

    name: str
    description: str
    duration_s: float
    fs: float
    kind: str = "ecg"
    units: str = "mV"
    heart_rate_bpm: float = 72.0
    channels: int = 1
    muscle_rms: float = 0.03
    wander_mv: float = 0.2
    mains_mv: float = 0.04
    ectopic_every: int | None = None
    overrides: tuple[str, ...] = ()  # cleaning settings other than the queue default
    external: bool = False  # arrives already cleaned by the boat pipeline
    intended_flagged: bool = False
    seed: int = 0
    extra: dict = field(default_factory=dict)


SCENARIO: tuple[DemoRecord, ...] = (
    DemoRecord("dive03-diver-amund", "calm descent, light shivering", 120, 250, heart_rate_bpm=68, seed=3),
    DemoRecord(
        "dive03-diver-brita", "ascent with breathing drift", 180, 500, heart_rate_bpm=84, wander_mv=0.35, seed=4
    ),
    DemoRecord(
        "dive04-diver-cato", "occasional premature ventricular beats", 90, 250,
        heart_rate_bpm=76, ectopic_every=9, seed=5,
    ),
    DemoRecord(
        "dive04-diver-dagny-3lead", "three chest leads, cold surface interval", 120, 500,
        channels=3, heart_rate_bpm=90, seed=6,
    ),
    DemoRecord("dive05-diver-eirik", "long bottom phase", 300, 250, heart_rate_bpm=62, muscle_rms=0.02, seed=7),
    DemoRecord(
        "dive05-diver-frode", "heavy shivering; cleaned far too deep with a hard universal rule", 90, 250,
        heart_rate_bpm=96, muscle_rms=0.06,
        overrides=("transform=dwt", "wavelet=haar", "level=7", "rule=universal", "threshold_mode=hard",
                   "noise_estimate=per_level"),
        intended_flagged=True, seed=8,
    ),
    DemoRecord(
        "dive06-diver-gunn", "baseline filter cutoff typed as 5 Hz instead of 0.5 Hz", 60, 500,
        heart_rate_bpm=70,
        overrides=("baseline=butterworth", "baseline_cutoff_hz=5.0"),
        intended_flagged=True, seed=9,
    ),
    DemoRecord(
        "dive06-diver-hakon", "smooth wavelet at excessive depth", 75, 250,
        heart_rate_bpm=80, muscle_rms=0.05,
        overrides=("transform=dwt", "wavelet=db8", "level=6", "rule=universal", "threshold_mode=soft",
                   "noise_estimate=finest"),
        intended_flagged=True, seed=10,
    ),
    DemoRecord(
        "dive07-diver-ingrid-boatclean", "arrived already cleaned by the boat's causal low-pass pipeline", 60, 250,
        heart_rate_bpm=74, external=True, intended_flagged=True, seed=11,
    ),
    DemoRecord(
        "shorelab-mcg-bench-02", "bench magnetometer, shielded room", 30, 500,
        kind="mcg", units="pT", heart_rate_bpm=66, muscle_rms=0.0, wander_mv=0.0, mains_mv=0.0,
        extra={"sensor_noise_pt": 2.0}, seed=12,
    ),
)


def _ecg_channel(spec: DemoRecord, lead: int) -> np.ndarray:
    """Clean synthetic signal of one lead plus the scenario's noise, in the record's units."""
    from tracevet import synthetic

    seed = spec.seed * 10 + lead
    if spec.kind == "mcg":
        base = synthetic.synthetic_mcg(spec.duration_s, spec.fs, heart_rate_bpm=spec.heart_rate_bpm, seed=seed)
        clean = np.asarray(base.signal, dtype=np.float64)
        noise = synthetic.white_noise(clean.size, spec.extra.get("sensor_noise_pt", 1.0), seed=seed + 1)
        return clean + noise
    ecg = synthetic.synthetic_ecg(
        spec.duration_s,
        spec.fs,
        heart_rate_bpm=spec.heart_rate_bpm,
        ectopic_every=spec.ectopic_every,
        seed=spec.seed,  # same heart for every lead of a record
    )
    # Leads see the same heart with different gains and polarity of small waves.
    gain = (1.0, 0.7, 1.25)[lead % 3]
    clean = gain * np.asarray(ecg.signal, dtype=np.float64)
    n = clean.size
    noise = np.zeros(n)
    if spec.muscle_rms:
        noise += synthetic.muscle_noise(n, spec.fs, spec.muscle_rms, seed=seed + 2)
    if spec.wander_mv:
        noise += synthetic.baseline_wander(n, spec.fs, amplitude_mv=spec.wander_mv, seed=seed + 3)
    if spec.mains_mv:
        noise += synthetic.mains_hum(n, spec.fs, freq_hz=60, amplitude_mv=spec.mains_mv)
    return clean + noise


def make_recording(spec: DemoRecord) -> Recording:
    """Build the original (noisy) recording of one scenario entry."""
    columns = [_ecg_channel(spec, lead) for lead in range(spec.channels)]
    names = ("chest",) if spec.channels == 1 else tuple(f"chest-{i + 1}" for i in range(spec.channels))
    if spec.kind == "mcg":
        names = ("bz",)
    return Recording(
        samples=np.column_stack(columns).astype(np.float32),
        fs=spec.fs,
        channels=names,
        units=spec.units,
        kind=spec.kind,
        start_time=STUDY_START + timedelta(hours=spec.seed),
        source=spec.name,
    )


def boat_pipeline_clean(recording: Recording) -> Recording:
    """The (invented) boat pipeline: a causal 4th-order 25 Hz Butterworth low-pass.

    Causal IIR filtering delays and reshapes the QRS (group delay of tens of
    milliseconds), which is what the assessment should notice.
    """
    sos = sps.butter(4, 25.0, btype="lowpass", fs=recording.fs, output="sos")
    cleaned = sps.sosfilt(sos, recording.samples.astype(np.float64), axis=0)
    return recording.with_samples(cleaned.astype(np.float32))


def write_scenario_files(folder: Path) -> list[tuple[DemoRecord, Path, Path | None]]:
    """Write each scenario recording as ``.npz`` (and the boat-cleaned twin) into ``folder``."""
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    written = []
    for spec in SCENARIO:
        original = make_recording(spec)
        path = folder / f"{spec.name}.npz"
        write_recording(original, path)
        cleaned_path = None
        if spec.external:
            cleaned_path = folder / f"{spec.name}.boat-cleaned.npz"
            write_recording(boat_pipeline_clean(original), cleaned_path)
        written.append((spec, path, cleaned_path))
    return written


def build_demo_queue(path, progress: Callable[[float], None] | None = None) -> list[str]:
    """Make ``path`` a queue holding the demo scenario, cleaned and assessed.

    ``path`` must not exist, be empty, or be an empty queue. Records in
    :data:`SCENARIO` with ``overrides`` are cleaned with the queue's default
    settings changed by those overrides (the too-aggressive ones); the
    boat-cleaned record arrives as a pair cleaned elsewhere. ``progress``
    receives the fraction done (0..1) after each record. Returns the record
    ids in scenario order.
    """
    import tempfile

    from tracevet.errors import InputError
    from tracevet.workqueue import Queue

    root = Path(path)
    try:
        queue = Queue.open(root)
    except InputError:
        queue = Queue.init(root)
    if queue.records():
        raise InputError(str(root), "already holds records; the demo needs an empty queue")
    ids: list[str] = []
    total = len(SCENARIO)
    with tempfile.TemporaryDirectory(prefix="tracevet-demo-") as scratch:
        for done, (spec, original, cleaned) in enumerate(write_scenario_files(Path(scratch)), start=1):
            if cleaned is not None:
                ids.append(queue.add_pair(original, cleaned, added_by="demo"))
            else:
                (record_id,) = queue.add_files([original], added_by="demo")
                settings = queue.settings.cleaning_settings(list(spec.overrides) or None)
                queue.add_run(record_id, settings)
                ids.append(record_id)
            if progress is not None:
                progress(done / total)
    return ids
