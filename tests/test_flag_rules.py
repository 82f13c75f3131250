"""The flag table (tracevet/assessment/rules.py) is the single owner of what a flag is (issue 9, point 6).

Limits, grading, metric words and the stretch screen must all follow its
rows, so that a flag is added or changed in one place. The wording checks pin
the messages the rows produce to the texts of the release before the table,
which scripts and reviewers read.
"""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np

from tracevet import synthetic as syn
from tracevet.assessment import FLAG_IDS, default_limits, limits_from_mapping
from tracevet.assessment.beats import build_windows
from tracevet.assessment.core import METRIC_NAMES
from tracevet.assessment.flags import evaluate, judge, no_beats_flag
from tracevet.assessment.metric_words import FLAG_METRIC, METRIC_ROWS
from tracevet.assessment.rules import PATHS, RULE, RULES, TEMPLATE_FLAG_IDS, TRACE_FLAG_IDS
from tracevet.assessment.shape_measures import measure_templates
from tracevet.assessment.stretches import SCREEN, Excursions, excursion_flag, geometry, screen_readings

SRC = Path(__file__).resolve().parent.parent / "src" / "tracevet"

# Every metric a row reads, each beyond any fail limit of the defaults, for
# ECG in mV (absolute limits) with an R amplitude of 1 mV.
BEYOND_EVERY_LIMIT = {
    "r_amplitude": 1.0,
    "r_amplitude_ratio": 0.5,
    "qrs_width_change_ms": 25.0,
    "r_timing_shift_ms": -9.0,
    "st_change": 0.4,
    "st_delay_ms": 80.0,
    "p_amplitude_ratio": 0.3,
    "t_amplitude_ratio": 1.6,
    "ringing_rms": 0.09,
    "removed_beat_fraction": 0.5,
    "beat_shape_change_percent": 60.0,
    "clipped_runs": 3.0,
    "edge_deviation": 0.9,
}
# Just within every warn limit.
WITHIN_EVERY_LIMIT = {
    "r_amplitude": 1.0,
    "r_amplitude_ratio": 0.95,
    "qrs_width_change_ms": 4.0,
    "r_timing_shift_ms": -1.0,
    "st_change": -0.03,
    "p_amplitude_ratio": 0.9,
    "t_amplitude_ratio": 1.1,
    "ringing_rms": 0.01,
    "removed_beat_fraction": 0.05,
    "beat_shape_change_percent": 10.0,
    "clipped_runs": 0.0,
    "edge_deviation": 0.05,
}


def test_every_flag_id_has_exactly_one_row():
    ids = [rule.id for rule in RULES]
    assert len(ids) == len(set(ids))
    assert tuple(ids) == FLAG_IDS
    assert set(RULE) == set(FLAG_IDS)
    assert all(rule.path in PATHS for rule in RULES)


def test_default_limits_are_the_rows():
    for kind, units in (("ecg", "mV"), ("mcg", "pT")):
        specs = default_limits(kind, units).specs
        assert tuple(specs) == FLAG_IDS
        for rule in RULES:
            spec = specs[rule.id]
            assert (spec.warn, spec.fail, spec.unit, spec.source, spec.amplitude) == (
                rule.warn, rule.fail, rule.unit, rule.source, rule.amplitude
            )
            assert (spec.warn_relative, spec.fail_relative) == (rule.warn_relative, rule.fail_relative)


def test_rows_are_consistent():
    for rule in RULES:
        assert rule.source.strip(), rule.id
        if rule.warn is not None and rule.fail is not None:
            assert rule.warn <= rule.fail, rule.id
        if rule.amplitude:
            # Amplitudes: absolute in mV, and a relative form for MCG and unknown units.
            assert rule.unit == "mV" and (rule.warn_relative, rule.fail_relative) != (None, None), rule.id
        else:
            assert rule.warn_relative is None and rule.fail_relative is None, rule.id
        # A flag graded from the metrics has a measure; one raised by a path of its own has none.
        assert (rule.measure is not None) == (rule.path in ("template", "trace")), rule.id
        # Only template flags have a per-beat screen reading (a stretch can confirm them).
        assert bool(rule.screen) == (rule.path == "template"), rule.id


def test_every_row_names_a_metric_of_the_assessment():
    shown = {key for key, _, _ in METRIC_ROWS}
    for rule in RULES:
        assert rule.metric in METRIC_NAMES, rule.id
        if rule.measure is not None:
            assert rule.metric in shown, rule.id  # the report shows what the flag judges
    assert FLAG_METRIC == {rule.id: rule.metric for rule in RULES}


def test_evaluate_raises_exactly_the_rows_read_from_metrics():
    limits = default_limits("ecg", "mV")
    flags = evaluate("II", dict(BEYOND_EVERY_LIMIT), {}, limits)
    assert [f.id for f in flags] == [rule.id for rule in RULES if rule.measure is not None]
    assert {f.id for f in flags} == set(TEMPLATE_FLAG_IDS) | set(TRACE_FLAG_IDS)
    assert {f.severity for f in flags} == {"fail"}
    assert all(f.source == RULE[f.id].source for f in flags)
    assert evaluate("II", dict(WITHIN_EVERY_LIMIT), {}, limits) == []
    # Relative limits (MCG in pT, R of 50 pT): the same flags from amplitudes scaled to R.
    scaled = dict(BEYOND_EVERY_LIMIT, r_amplitude=50.0)
    for key in ("st_change", "ringing_rms", "edge_deviation"):
        scaled[key] *= 50.0
    flags = evaluate("II", scaled, {}, default_limits("mcg", "pT"))
    assert {f.id for f in flags} == set(TEMPLATE_FLAG_IDS) | set(TRACE_FLAG_IDS)
    # A flag switched off in the limits is off, the others stay.
    off = default_limits("ecg", "mV").with_overrides(limits_from_mapping({"ringing": "off"}))
    assert "ringing" not in {f.id for f in evaluate("II", dict(BEYOND_EVERY_LIMIT), {}, off)}


def test_messages_keep_their_wording():
    # The texts of the release before the table (the JSON "message" field).
    limits = default_limits("ecg", "mV")
    by_id = {f.id: f for f in evaluate("II", dict(BEYOND_EVERY_LIMIT), {"r_amplitude_ratio": 0.2}, limits)}
    assert by_id["r-peak-change"].message == (
        "channel II: cleaned R peaks are 50.0 % lower than the original's (limit 20.0 %, widened from 16.0 % "
        "for the template noise; relative to the original R amplitude)"
    )
    assert by_id["st-level-change"].message == (
        "channel II: the ST level at J+80 ms moved up by 0.400 mV (limit 0.100 mV; absolute limit in mV "
        "(ECG in known units))"
    )
    assert by_id["beat-timing-shift"].message.startswith("channel II: cleaned beats are 9.0 ms early")
    relative = default_limits("mcg", "pT")
    flag = excursion_flag("B", Excursions(0.25, [(1.0, 2.0)], 1, 10, 0.0), relative)
    assert flag is not None and flag.severity == "fail" and flag.message == (
        "channel B: the cleaning moved beats away from their level by up to 25.0 % of the R amplitude more than "
        "the original had them (a level shift or a filter's start-up swoop; limit 20.0 % of the R amplitude; "
        "relative limit, a fraction of the original R amplitude (MCG or unknown units))"
    )
    gap = judge(RULE["beats-missing"], "II", 5.2, limits, {"unmeasured_s": 7.25, "stretches": 2})
    assert gap is not None and gap.severity == "warn" and gap.message == (
        "channel II: no measurable beats for 7.2 s in 2 stretch(es) (the longest 5.2 s); the shape there is "
        "not assessed (limit 3 s)"
    )
    none = no_beats_flag("II", limits, 1)
    assert none is not None and none.message == (
        "channel II: no heartbeats found in the original (1 detected, at least 2 needed); the waveform shape "
        "cannot be assessed"
    )


def test_screen_readings_are_the_rows_screen_column():
    # Every per-beat reading the stretch screen takes is listed by exactly one template row, and every
    # listed reading is taken (McSharry et al. 2003 model, noise-free, R peaks scaled to 80 %).
    assert set(SCREEN) == {name for rule in RULES for name, _ in rule.screen}
    assert {flag_id for flag_id, _ in SCREEN.values()} == set(TEMPLATE_FLAG_IDS)
    fs = 500.0
    model = syn.synthetic_ecg(12.0, fs, heart_rate_bpm=70.0, seed=4)
    y = model.signal * 0.8
    windows = build_windows(model.signal, y, model.r_peaks, fs)
    tm = measure_templates(windows)
    geo = geometry(tm, windows)
    assert geo is not None
    readings = screen_readings(model.signal, y, windows.peaks[windows.labels == 0] + windows.offset, geo)
    assert set(readings) == set(SCREEN)
    assert np.all(np.isfinite(np.concatenate(list(readings.values()))))


# Where the code names one flag: RULE["id"], limits.spec("id"), limits.in_force("id"), extra_regions["id"], ...
_ID_USE = re.compile(r"""(?:RULE\[|\.spec\(|\.in_force\(|extra_regions\[|flag\.id [!=]= )["']([a-z-]+)["']""")


def test_flag_ids_named_in_the_code_are_rows():
    # Code that wires a particular flag names it by its id; a misspelt id would silently never match.
    named = set()
    for path in sorted(SRC.rglob("*.py")):
        for flag_id in _ID_USE.findall(path.read_text(encoding="utf-8")):
            assert flag_id in FLAG_IDS, f"{path.relative_to(SRC)}: {flag_id!r} is not a row of the flag table"
            named.add(flag_id)
    assert {"no-beats", "baseline-excursion", "beats-missing"} <= named  # the search reads the wiring


def _documented_limit(cell: str, unit: str, amplitude: bool) -> tuple[float | None, float | None]:
    """(absolute, relative) limit from a cell of the docs table, e.g. ``12 %``, ``0.05 mV / 5 % of R``, ``—``."""
    cell = cell.strip()
    if cell == "—":
        return None, None
    if amplitude:
        found = re.fullmatch(r"([\d.]+) mV / ([\d.]+) % of R", cell)
        assert found, cell
        return float(found.group(1)), float(found.group(2)) / 100.0
    if cell.startswith("> "):
        return float(cell[2:]), None
    number = float(cell.split()[0])
    return (number / 100.0 if unit == "fraction" else number), None


def _same(a: float | None, b: float | None) -> bool:
    return a is None and b is None or (a is not None and b is not None and abs(a - b) <= 1e-12)


def test_the_documented_flag_table_follows_the_rows():
    # docs/assessment.md "Flags and limits": one line per row, in table order, with the rows' default limits.
    text = (SRC.parent.parent / "docs" / "assessment.md").read_text(encoding="utf-8")
    lines = [line for line in text.splitlines() if re.match(r"\| `[a-z-]+` \|", line)]
    cells = [[c.strip() for c in re.split(r"(?<!\\)\|", line)[1:-1]] for line in lines]
    assert [c[0].strip("`") for c in cells] == list(FLAG_IDS)
    for rule, row in zip(RULES, cells):
        if rule.id == "no-beats":  # documented as "< 2 beats", the count needed, not a grading limit
            continue
        for cell, limit, relative in ((row[2], rule.warn, rule.warn_relative), (row[3], rule.fail, rule.fail_relative)):
            shown = _documented_limit(cell, rule.unit, rule.amplitude)
            assert _same(shown[0], limit) and _same(shown[1], relative), f"{rule.id}: {cell!r}"
