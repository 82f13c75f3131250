"""The suggestion search: clean and assess candidate settings, rank them, verify the winner.

Every candidate is cleaned by :func:`tracevet.cleaning.clean_with_report`, the
function ``tracevet denoise`` runs, with nothing changed: a candidate's cleaning is
exactly what ``denoise`` with the same settings gives for the same samples.
The assessment is :func:`tracevet.assessment.assess` with the queue's or the
default limits.

Cost is bounded:

* records up to :data:`WHOLE_RECORD_MAX_S` are searched on the whole record;
* longer ones on sampled windows of :data:`WINDOW_S` seconds, from the start,
  the middle and the end, plus up to :data:`MAX_STRETCH_WINDOWS` windows
  around flagged stretches. Each window is cleaned with
  :data:`MARGIN_S` seconds more on each side inside the record (so that the
  window's own ends do not look like record ends), and assessed on its core.
  Only the best candidate is then cleaned and assessed on the whole record; if
  it does worse there than on the windows, the next one (up to
  :data:`FULL_RUNS_MAX` in all) is run too and the best whole-record result
  is offered.

Work shared between candidates: the R peaks are found once on the original
(the assessment always finds them on the original, so they are the same for
every candidate): for a long record, once per window for the search, and
once on the whole record in a background thread while the windows are
searched, for the final assessment. The filter designs are cached by the
engine, and settings that repeat along the coordinate search are evaluated
once.
"""

from __future__ import annotations

import hashlib
from concurrent.futures import Future, ThreadPoolExecutor
from dataclasses import dataclass, replace
from typing import Any, Callable

import numpy as np

from tracevet.assessment.rules import TRACE_FLAG_IDS
from tracevet.cleaning import DEFAULT_SETTINGS, CleaningSettings
from tracevet.errors import InputError, TracevetError
from tracevet.recording import Recording
from tracevet.suggestion import candidates as cand
from tracevet.suggestion import noise as noise_mod
from tracevet.suggestion.result import (
    KEY_METRICS,
    CandidateResult,
    Suggestion,
    candidate_set_digest,
    explain,
    cannot_beat,
    rank_key,
)

WHOLE_RECORD_MAX_S = 90.0
WINDOW_S = 20.0
MARGIN_S = 10.0
MAX_STRETCH_WINDOWS = 3
FULL_RUNS_MAX = 3
KEEP_WHOLE = 3  # whole-record searches keep the cleaned trace of this many best candidates

NO_BEATS = "cannot suggest: no beats"


class SuggestionCancelled(TracevetError):
    """The caller asked the suggestion to stop."""

    def __init__(self):
        super().__init__("suggestion cancelled")


class NoBeats(TracevetError):
    """No channel of the record has beats: nothing to judge a cleaning by."""

    def __init__(self, source: str):
        self.source = source
        super().__init__(f"{NO_BEATS} in {source}")


@dataclass(frozen=True)
class Window:
    """A stretch searched: its core ``[start, stop)`` and the part read for cleaning ``[read_start, read_stop)``."""

    start: int
    stop: int
    read_start: int
    read_stop: int


def plan_windows(n: int, fs: float, stretches_s=()) -> list[Window]:
    """The windows searched for a record of ``n`` samples at ``fs`` Hz.

    The whole record when it lasts at most :data:`WHOLE_RECORD_MAX_S`;
    otherwise start, middle and end windows of :data:`WINDOW_S` and up to
    :data:`MAX_STRETCH_WINDOWS` windows centred on the flagged stretches
    ``(start_s, end_s)`` not already covered, overlapping windows merged.
    """
    if n / fs <= WHOLE_RECORD_MAX_S:
        return [Window(0, n, 0, n)]
    core = int(round(WINDOW_S * fs))
    margin = int(round(MARGIN_S * fs))
    cores = [(0, core), (n // 2 - core // 2, n // 2 - core // 2 + core), (n - core, n)]
    added = 0
    for start_s, end_s in sorted(stretches_s):
        if added >= MAX_STRETCH_WINDOWS:
            break
        centre = int(round(0.5 * (start_s + end_s) * fs))
        if any(a <= centre < b for a, b in cores):
            continue
        a = min(max(0, centre - core // 2), n - core)
        cores.append((a, a + core))
        added += 1
    cores.sort()
    merged: list[list[int]] = []
    for a, b in cores:
        if merged and a <= merged[-1][1]:
            merged[-1][1] = max(merged[-1][1], b)
        else:
            merged.append([a, b])
    return [Window(a, b, max(0, a - margin), min(n, b + margin)) for a, b in merged]


class PeakCache:
    """An R-peak detector that remembers: each trace (by content) is searched once.

    The assessment calls ``detector(original_channel, fs)``; the suggestion
    assesses many cleanings of the same original, so the peaks are found once
    and handed out again. Windows get the whole record's peaks that fall in
    them.
    """

    def __init__(self, detector: Callable[[np.ndarray, float], np.ndarray]):
        self.detector = detector
        self.store: dict[tuple, np.ndarray] = {}

    @staticmethod
    def _key(signal: np.ndarray, fs: float) -> tuple:
        data = np.ascontiguousarray(signal)
        digest = hashlib.blake2b(data.view(np.uint8).data, digest_size=16).digest()
        return (data.shape[0], str(data.dtype), float(fs), digest)

    def put(self, signal: np.ndarray, fs: float, peaks: np.ndarray) -> None:
        """Remember ``peaks`` for ``signal``."""
        self.store[self._key(signal, fs)] = np.asarray(peaks, dtype=np.int64)

    def __call__(self, signal: np.ndarray, fs: float) -> np.ndarray:
        """The peaks of ``signal``, found once."""
        key = self._key(signal, fs)
        if key not in self.store:
            self.store[key] = np.asarray(self.detector(signal, fs), dtype=np.int64).reshape(-1)
        return self.store[key]


def _cancel_check(cancel) -> Callable[[], bool]:
    if cancel is None:
        return lambda: False
    if hasattr(cancel, "is_set"):
        return cancel.is_set
    return cancel


def _merge_flags(flag_lists: list[list]) -> list:
    """The worst of each (flag, channel) over windows; fail first."""
    worst: dict[tuple[str, str], Any] = {}
    order = {"fail": 2, "warn": 1}
    for flags in flag_lists:
        for f in flags:
            key = (f.id, f.channel)
            old = worst.get(key)
            if old is None or (order.get(f.severity, 0), f.value or 0.0) > (
                order.get(old.severity, 0),
                old.value or 0.0,
            ):
                worst[key] = f
    return sorted(worst.values(), key=lambda f: (0 if f.severity == "fail" else 1, f.id, f.channel))


def _shape_change(metrics: dict) -> float | None:
    values = [v for k, v in metrics.items() if k.split("@")[0] == "beat_shape_change_percent" and v is not None]
    return max(values) if values else None


def _key_metrics(metric_dicts: list[dict]) -> dict:
    out: dict = {}
    if not metric_dicts:
        return out
    for name in metric_dicts[0]:
        if name.split("@")[0] not in KEY_METRICS:
            continue
        values = [v for m in metric_dicts if (v := m.get(name)) is not None]
        out[name] = float(np.mean(values)) if values else None
    return out


class _Evaluator:
    """Cleans and assesses settings on the planned windows of one record."""

    def __init__(
        self,
        recording: Recording,
        windows: list[Window],
        window_peaks: list[list[np.ndarray]],
        cache: PeakCache,
        limits,
        base,
    ):
        from tracevet.assessment import resolve_limits

        self.recording = recording
        self.windows = windows
        self.window_peaks = window_peaks  # per window, per channel: R peaks in the core (core-relative)
        self.peaks: list[np.ndarray] = window_peaks[0] if len(windows) == 1 else []  # whole record, per channel
        self.cache = cache
        self.base = base
        self.limits = resolve_limits(limits, recording.kind, recording.units)
        self.whole = len(windows) == 1 and windows[0].start == 0 and windows[0].stop == recording.n_samples
        self.scope = "whole record" if self.whole else "sampled windows"
        self.done: dict[str, CandidateResult] = {}
        self.order: list[CandidateResult] = []
        self.kept: dict[str, tuple] = {}  # whole-record scope: (cleaned, assessment) of the best few
        fs = recording.fs
        for w, per_channel in zip(windows, window_peaks):  # the assessment of a core gets its peaks
            for c in range(recording.n_channels):
                cache.put(recording.samples[w.start : w.stop, c], fs, per_channel[c])

    def _segment(self, a: int, b: int) -> Recording:
        if a == 0 and b == self.recording.n_samples:
            return self.recording
        return replace(self.recording, samples=self.recording.samples[a:b], start_time=None)

    def known(self, settings: CleaningSettings, role: str) -> CandidateResult | None:
        """The result of settings evaluated before (the role added), or None."""
        found = self.done.get(settings.digest())
        if found is not None and role not in found.roles:
            found.roles = found.roles + (role,)
        return found

    def register(self, outcome: CandidateResult, kept: tuple | None) -> CandidateResult:
        """Record a new result in evaluation order; keep the cleaned trace of the best few."""
        digest = outcome.settings.digest()
        if digest in self.done:
            found = self.known(outcome.settings, outcome.roles[0])
            assert found is not None  # its digest is in self.done
            return found
        self.done[digest] = outcome
        self.order.append(outcome)
        if kept is not None:
            self.kept[digest] = kept
            for d in sorted(self.kept, key=lambda d: rank_key(self.done[d]))[KEEP_WHOLE:]:
                del self.kept[d]
        return outcome

    def run(
        self, settings: CleaningSettings, role: str, bar: CandidateResult | None = None
    ) -> tuple[CandidateResult, tuple | None]:
        """Clean ``settings`` on the windows, estimate the noise removed and assess.

        Returns (result, (cleaned, assessment) for a whole-record search). With
        ``bar`` (the best so far, without flags), a candidate whose estimated
        noise removed falls a whole :data:`~tracevet.suggestion.result.TIE_DB`
        step below it cannot come first whatever its flags, and is not
        assessed (``screened``).
        """
        from tracevet.assessment import assess
        from tracevet.cleaning import clean_with_report

        change = cand.describe_change(settings, self.base)
        per_channel: list[list[noise_mod.NoiseEstimate]] = [[] for _ in range(self.recording.n_channels)]
        pairs = []
        report = None
        try:
            for w, window_peaks in zip(self.windows, self.window_peaks):
                segment = self._segment(w.read_start, w.read_stop)
                cleaned, report = clean_with_report(segment, settings)
                core_o = self._segment(w.start, w.stop)
                lo = w.start - w.read_start
                core_c = cleaned if self.whole else core_o.with_samples(cleaned.samples[lo : lo + (w.stop - w.start)])
                pairs.append((core_o, core_c))
                for c in range(self.recording.n_channels):
                    per_channel[c].append(
                        noise_mod.estimate(
                            core_o.samples[:, c], core_c.samples[:, c], window_peaks[c], self.recording.fs
                        )
                    )
        except InputError as exc:  # e.g. a window or record too short for a level
            return CandidateResult(settings, change, scope=self.scope, roles=(role,), error=exc.problem), None
        channel_db = [v for estimates in per_channel if (v := noise_mod.pooled_removed_db(estimates)) is not None]
        noise_db = float(np.mean(channel_db)) if channel_db else None
        outcome = CandidateResult(
            settings=settings,
            change=change,
            noise_removed_db=noise_db,
            scope=self.scope,
            roles=(role,),
            n_changes=cand.count_changes(settings, self.base),
        )
        if bar is not None and cannot_beat(outcome, bar):
            outcome.screened = True
            return outcome, None
        flag_lists, metric_dicts, kept = [], [], None
        for core_o, core_c in pairs:
            result = assess(core_o, core_c, limits=self.limits, detector=self.cache)
            if self.whole:
                kept = (core_c, result, report)
            flag_lists.append(result.flags)
            metric_dicts.append(result.metrics)
        shapes = [s for s in (_shape_change(m) for m in metric_dicts) if s is not None]
        outcome.flags = _merge_flags(flag_lists)
        outcome.shape_change_percent = max(shapes) if shapes else None
        outcome.metrics = _key_metrics(metric_dicts)
        return outcome, kept

    def full(self, settings: CleaningSettings, roles: tuple, progress=None):
        """Clean and assess ``settings`` on the whole record: (result, cleaned, assessment, cleaning report)."""
        from tracevet.assessment import assess
        from tracevet.cleaning import clean_with_report

        cleaned, report = clean_with_report(self.recording, settings, progress=progress)
        result = assess(self.recording, cleaned, limits=self.limits, detector=self.cache)
        channel_db = []
        for c in range(self.recording.n_channels):
            est = noise_mod.estimate(
                self.recording.samples[:, c], cleaned.samples[:, c], self.peaks[c], self.recording.fs
            )
            if est.removed_db is not None:
                channel_db.append(est.removed_db)
        outcome = CandidateResult(
            settings=settings,
            change=cand.describe_change(settings, self.base),
            flags=list(result.flags),
            noise_removed_db=float(np.mean(channel_db)) if channel_db else None,
            shape_change_percent=_shape_change(result.metrics),
            metrics=_key_metrics([result.metrics]),
            scope="whole record",
            roles=roles,
            n_changes=cand.count_changes(settings, self.base),
        )
        return outcome, cleaned, result, report


def suggest(
    recording: Recording,
    base: CleaningSettings | None = None,
    current: CleaningSettings | None = None,
    limits=None,
    flagged_stretches_s=(),
    progress: Callable[[float, str], None] | None = None,
    cancel=None,
    detector: Callable[[np.ndarray, float], np.ndarray] | None = None,
    threads: int = 2,
) -> Suggestion:
    """Search the candidate settings for ``recording`` and return the best, verified on the whole record.

    Parameters
    ----------
    recording : Recording
        The original (never changed).
    base : CleaningSettings, optional
        Where the search starts (a profile, the queue's settings); the defaults when None.
    current : CleaningSettings, optional
        The current run's settings, evaluated alongside for comparison.
    limits : optional
        Flag limits, as :func:`tracevet.assessment.assess` takes them.
    flagged_stretches_s : iterable of (start_s, end_s)
        Stretches flagged by the current run; long records get a window on each (up to three).
    progress : callable(fraction, message), optional
        Called after every candidate and during the final run.
    cancel : threading.Event or callable() -> bool, optional
        Checked between candidates and during the final cleaning; when set,
        :class:`SuggestionCancelled` is raised.
    detector : callable(signal, fs) -> R-peak indices, optional
        Defaults to :func:`tracevet.assessment.qrs.detect_qrs`.
    threads : int
        Candidates of one search dimension evaluated at once (NumPy, PyWavelets
        and SciPy release the interpreter lock in their loops).

    Returns
    -------
    Suggestion

    Raises
    ------
    NoBeats
        No channel has at least two beats.
    SuggestionCancelled
        ``cancel`` was set.
    """
    from tracevet.assessment.qrs import detect_qrs

    base = base or DEFAULT_SETTINGS
    stopped = _cancel_check(cancel)
    report = progress or (lambda fraction, message: None)

    def check() -> None:
        if stopped():
            raise SuggestionCancelled()

    detect = detector or detect_qrs
    cache = PeakCache(detect)
    check()
    report(0.0, "finding beats")
    fs, n_channels = recording.fs, recording.n_channels
    windows = plan_windows(recording.n_samples, fs, flagged_stretches_s)
    whole = len(windows) == 1
    full_peaks: Future | None = None
    if whole:
        window_peaks = [[cache(recording.samples[:, c], fs) for c in range(n_channels)]]
        if all(p.size < 2 for p in window_peaks[0]):
            raise NoBeats(recording.source)
    else:
        # The whole record's beats (for the final assessment) are found in the background while
        # the windows are searched with beats found in each window alone.
        background = ThreadPoolExecutor(max_workers=1, thread_name_prefix="tracevet-beats")
        full_peaks = background.submit(lambda: [cache(recording.samples[:, c], fs) for c in range(n_channels)])
        background.shutdown(wait=False)  # the submitted search runs on; nothing else is queued
        window_peaks = []
        for w in windows:
            per_channel = []
            for c in range(n_channels):
                p = np.asarray(detect(recording.samples[w.read_start : w.read_stop, c], fs), dtype=np.int64)
                p = p + w.read_start
                per_channel.append(p[(p >= w.start) & (p < w.stop)] - w.start)
            window_peaks.append(per_channel)
        if all(p.size < 2 for per_channel in window_peaks for p in per_channel):
            if all(p.size < 2 for p in full_peaks.result()):
                raise NoBeats(recording.source)
    evaluator = _Evaluator(recording, windows, window_peaks, cache, limits, base)
    search_share = 0.95 if evaluator.whole else 0.5
    expected = cand.upper_bound(recording.fs, base)
    pool = ThreadPoolExecutor(max_workers=max(1, int(threads)), thread_name_prefix="tracevet-suggest")

    def evaluate_all(
        items: list[tuple[CleaningSettings, str]], bar: CandidateResult | None = None
    ) -> list[CandidateResult]:
        """Evaluate settings (new ones on the pool), registered in the order given."""
        check()
        if bar is not None and (bar.flags or bar.screened or bar.noise_removed_db is None):
            bar = None
        futures = {}
        for settings, role in items:
            digest = settings.digest()
            if evaluator.known(settings, role) is None and digest not in futures:
                futures[digest] = pool.submit(evaluator.run, settings, role, bar)
        results: list[CandidateResult] = []
        try:
            for settings, role in items:
                future = futures.pop(settings.digest(), None)
                if future is None:
                    found = evaluator.known(settings, role)
                    assert found is not None  # evaluated before, in this call or an earlier one
                    results.append(found)
                    continue
                results.append(evaluator.register(*future.result()))
                report(
                    search_share * min(1.0, len(evaluator.order) / expected),
                    f"{len(evaluator.order)} candidates tried; last: {cand.describe_change(settings, base)}",
                )
                check()
        except BaseException:
            for future in futures.values():
                future.cancel()
            raise
        return results

    try:
        first = [(base, "base")] + ([(current, "current")] if current is not None else [])
        best = evaluate_all(first)[0]
        for _name, variants in cand.dimensions(recording.fs, base):
            for result in evaluate_all([(s, "searched") for s in cand.unique(variants(best.settings))], bar=best):
                if result.error is None and rank_key(result) < rank_key(best):
                    best = result
    finally:
        pool.shutdown(wait=True, cancel_futures=True)
    check()
    ranked = sorted(evaluator.order, key=rank_key)
    base_result = evaluator.done[base.digest()]
    current_result = evaluator.done.get(current.digest()) if current is not None else None

    # The winner on the whole record (and, if it does worse there, the next ones).
    usable = [c for c in ranked if c.error is None and not c.screened]
    if not usable:
        problem = ranked[0].error if ranked else "no candidate settings"
        raise InputError(recording.source, f"no candidate settings can clean this record ({problem})")
    if full_peaks is not None:
        report(search_share, "finding the beats of the whole record")
        evaluator.peaks = full_peaks.result()
    if evaluator.whole:
        chosen = usable[0]
        cleaned, assessment, cleaning_report = evaluator.kept[chosen.settings.digest()]
        final = chosen
    else:
        finals = []
        tries = usable[:FULL_RUNS_MAX]
        for i, chosen in enumerate(tries):
            check()
            report(search_share + (1 - search_share) * i / len(tries), f"cleaning the whole record: {chosen.change}")

            def clean_progress(fraction: float, i=i) -> None:
                check()
                report(
                    search_share + (1 - search_share) * (i + 0.8 * fraction) / len(tries), "cleaning the whole record"
                )

            finals.append(evaluator.full(chosen.settings, chosen.roles, progress=clean_progress))
            if rank_key(finals[-1][0])[:4] <= rank_key(chosen)[:4]:
                break
        final, cleaned, assessment, cleaning_report = min(finals, key=lambda item: rank_key(item[0]))
    others = [c for c in ranked if c.error is None and not c.screened and c.settings != final.settings]
    windows_s = [(w.start / recording.fs, w.stop / recording.fs) for w in windows]
    report(1.0, "done")
    return Suggestion(
        best=final,
        runners_up=others[:2],
        ranked=ranked,
        base=base_result,
        current=current_result,
        cleaned=cleaned,
        assessment=assessment,
        report=cleaning_report,
        candidate_set_digest=candidate_set_digest(evaluator.order, windows_s),
        windows_s=windows_s,
        reason=explain(final, ranked, current_result),
    )


def flagged_stretches(assessment, duration_s: float) -> list[tuple[float, float]]:
    """Local flagged stretches of an assessment, in seconds (whole-record ones left out).

    Uses the flags' ``where`` stretches when the assessment has them, else the
    clipping and edge regions of the beat data.
    """
    out: list[tuple[float, float]] = []
    for flag in getattr(assessment, "flags", []):
        for start, end in getattr(flag, "where", ()) or ():
            if end - start < 0.9 * duration_s:
                out.append((float(start), float(end)))
    if not out:
        for channel in getattr(assessment, "channels", []):
            for start, end, flag_id in getattr(channel, "regions", ()):
                if flag_id in TRACE_FLAG_IDS and end - start < 0.9 * duration_s:
                    out.append((float(start), float(end)))
    return sorted(set(out))


__all__ = [
    "NO_BEATS",
    "NoBeats",
    "PeakCache",
    "SuggestionCancelled",
    "Window",
    "flagged_stretches",
    "plan_windows",
    "suggest",
]
