"""Text of the record screen's panels: flags, metrics, run settings, run comparison.

Pure functions returning ``rich.text.Text``; every string that came from a
file or a person goes through :func:`tracevet.app.display.inert_text`.
"""

from __future__ import annotations

from rich.text import Text

from tracevet.app import queue_view
from tracevet.app.plots import format_stretch
from tracevet.assessment import Assessment, Flag
from tracevet.assessment.metric_words import FLAG_METRIC, METRIC_ROWS, channel_metrics, format_metric
from tracevet.app.display import (
    SEVERITY_STYLE,
    format_number,
    inert_text,
    severity_key,
    severity_text,
)

PANELS = ("flags", "metrics", "run", "compare")


def fit_by_priority(parts: list[tuple[int, Text]], width: int, gap: str = "  ") -> Text:
    """Join ``(priority, text)`` parts in their given order, dropping the least important that do not fit.

    Parts are admitted by priority (0 first) while the line stays within
    ``width`` cells; the admitted parts keep their original order. The part
    of priority 0 is always kept (cut with an ellipsis if it alone is too long).
    """
    chosen: set[int] = set()
    used = 0
    for index in sorted(range(len(parts)), key=lambda i: parts[i][0]):
        cost = parts[index][1].cell_len + (len(gap) if chosen else 0)
        if used + cost <= width or not chosen:
            chosen.add(index)
            used += cost
    line = Text(no_wrap=True, overflow="ellipsis")
    for index, (_, part) in enumerate(parts):
        if index in chosen:
            if len(line):
                line.append(gap)
            line.append_text(part)
    line.truncate(max(width, 1), overflow="ellipsis")
    return line


def panel_tabs(current: str, has_compare: bool) -> Text:
    """The one-line tab strip above the panel, the current one highlighted."""
    text = Text(no_wrap=True, overflow="ellipsis")
    text.append("panel ", style="dim")
    for name in PANELS:
        if name == "compare" and not has_compare:
            continue
        style = "reverse bold" if name == current else ""
        text.append(f" {name} ", style=style)
    text.append("  (i: next panel, pgup/pgdn: scroll)", style="dim")
    return text


def stretches_text(flag: Flag, limit: int = 2, duration_s: float | None = None) -> str:
    """Where a flag applies, short: ``12.4-31.9s, 40.0-41.5s +3`` (``whole record`` when it covers it)."""
    where = tuple(flag.where)
    if not where:
        return "where: n/a"
    if duration_s and len(where) == 1 and where[0][0] <= 0.05 and where[0][1] >= duration_s - 0.05:
        return "whole record"
    longest = max([float(end) for _, end in where] + [duration_s or 0.0])
    shown = [format_stretch(float(a), float(b), longest) for a, b in where[:limit]]
    more = len(where) - len(shown) + int(flag.where_more or 0)
    return ", ".join(shown) + (f" +{more}" if more else "")


def _flag_line(flag: Flag, duration_s: float | None) -> Text:
    line = Text(no_wrap=True, overflow="ellipsis")
    line.append_text(severity_text(flag.severity))
    line.append(" ")
    line.append_text(inert_text(flag.id, 24, style="bold"))
    line.append(" ")
    line.append(format_number(flag.value))
    line.append(" vs ", style="dim")
    line.append(format_number(flag.limit))
    line.append("  ")
    line.append(stretches_text(flag, 2, duration_s))
    if flag.beats_affected is not None and flag.beats_measured is not None:
        line.append(f" ({flag.beats_affected}/{flag.beats_measured} beats)", style="dim")
    return line


def flags_panel(assessment: Assessment, channel: str | None = None, details: bool = False,
                duration_s: float | None = None) -> Text:
    """One line per flag (severity, id, value vs limit, where); ``details`` adds message, source, every stretch.

    ``channel`` limits the list to one channel's flags (and flags not tied to a channel).
    """
    flags = [f for f in queue_view.flag_list(assessment) if channel is None or f.channel in (channel, "")]
    if not flags:
        ok = Text.assemble(("\u2713 ok", SEVERITY_STYLE["ok"]), "  no flags")
        ok.append(" in this channel" if channel is not None else "")
        ok.append(": no measure passed its limit.")
        return ok
    text = Text()
    for flag in flags:
        text.append_text(_flag_line(flag, duration_s))
        if details:
            text.append("\n   ")
            text.append_text(inert_text(flag.message, 300))
            text.append("\n   where: ", style="dim")
            text.append_text(inert_text(stretches_text(flag, len(flag.where), duration_s), 2000))
            text.append("\n   source: ", style="dim")
            text.append_text(inert_text(flag.source or "-", 300, style="dim"))
        text.append("\n")
    if not details:
        text.append("d: details (message, source, every stretch)", style="dim")
    text.rstrip()
    return text


def metrics_panel(assessment: Assessment, channel: str, several_channels: bool, units: str | None) -> Text:
    """The shown channel's metrics in words with units, two per line; flagged ones marked with their severity."""
    values = channel_metrics(assessment.metrics, channel, several_channels)
    if not values:
        return Text("no metrics for this channel in this assessment", style="dim")
    flagged: dict[str, str] = {}
    for flag in queue_view.flag_list(assessment):
        key = FLAG_METRIC.get(flag.id)
        if key and flag.channel in (channel, "") and key not in flagged:
            flagged[key] = flag.severity
    text = Text()
    shown = 0
    for key, label, unit in METRIC_ROWS:
        if key not in values:
            continue
        severity = flagged.get(key)
        cell = Text(no_wrap=True)
        if severity:
            cell.append_text(severity_text(severity, word=False))
            cell.append(" ")
        else:
            cell.append("  ")
        cell.append_text(inert_text(label, 26, style="dim"))
        cell.append(" ")
        cell.append_text(inert_text(format_metric(values.get(key), unit, units), 16,
                                    style=SEVERITY_STYLE[severity_key(severity)] if severity else ""))
        cell.truncate(39, pad=True)
        text.append_text(cell)
        shown += 1
        text.append("\n" if shown % 2 == 0 else " ")
    text.rstrip()
    return text


def record_line(record_id: str, source_name: str, original) -> Text:
    """``record ID from FILE; channels A, B; units``: where the record came from, inert."""
    text = Text()
    text.append("record ", style="dim")
    text.append_text(inert_text(record_id, 40, style="bold"))
    if source_name:
        text.append(" from ", style="dim")
        text.append_text(inert_text(source_name, 80))
    if original is not None:
        text.append("  channels ", style="dim")
        for index, name in enumerate(original.channels):
            if index:
                text.append(", ")
            text.append_text(inert_text(name, 30))
        text.append("  units ", style="dim")
        text.append_text(inert_text(original.units or "unknown", 10))
    return text


def run_label(info, runs: list, current_run_id: str | None) -> str:
    """``run ID (2 of 3, current)``."""
    ids = [str(r.run_id) for r in runs]
    position = ids.index(str(info.run_id)) + 1 if str(info.run_id) in ids else 0
    tags = [f"{position} of {len(ids)}"]
    if current_run_id is not None and str(info.run_id) == str(current_run_id):
        tags.append("current")
    return f"run {info.run_id} ({', '.join(tags)})"


def run_panel(info, runs: list, current_run_id: str | None) -> Text:
    """Which run this is (id, position, when, origin, digest) and every setting."""
    text = Text()
    text.append_text(inert_text(run_label(info, runs, current_run_id), 60, style="bold"))
    text.append("  created ", style="dim")
    text.append_text(inert_text(getattr(info, "created", "-"), 25))
    text.append("\norigin ", style="dim")
    text.append_text(inert_text(getattr(info, "origin", "-"), 30))
    made_by = getattr(info, "made_by", None)
    if made_by:
        text.append(" asked by ", style="dim")
        text.append_text(inert_text(made_by, 30))
    text.append("  settings digest ", style="dim")
    text.append_text(inert_text(str(getattr(info, "settings_digest", None) or "-")[:16], 16))
    text.append("\n")
    settings = getattr(info, "settings", None) or {}
    if not settings:
        text.append("cleaned outside tracevet: no settings recorded", style="dim")
    for index, (name, value) in enumerate(settings.items()):
        cell = Text.assemble(inert_text(name, 18, style="dim"), "=", inert_text(value, 14))
        cell.pad_right(max(0, 26 - cell.cell_len))
        text.append_text(cell)
        if index % 3 == 2:
            text.append("\n")
    text.rstrip()
    return text


def compare_panel(previous, shown, shown_id: str | None = None) -> Text:
    """Two runs side by side, older -> newer: worst severity, every flag and metric, changed settings.

    ``previous`` and ``shown`` are :class:`tracevet.app.queue_view.RunData`
    (the older and the newer run); ``shown_id`` marks the run on screen.
    """
    width = 14
    text = Text()

    def head(run) -> Text:
        cell = inert_text(run.run_id, width - 2, style="bold" if run.run_id == shown_id else "")
        if run.run_id == shown_id:
            cell.append(" *", style="bold")
        cell.truncate(width, pad=True)
        return cell

    header = Text.assemble(("(* shown)".ljust(24), "dim"), head(previous), " -> ", head(shown))
    text.append_text(header)
    text.append("\n")
    text.append("worst".ljust(24), style="dim")
    text.append_text(severity_text(queue_view.worst_severity(previous.assessment)))
    text.append(" -> ")
    text.append_text(severity_text(queue_view.worst_severity(shown.assessment)))
    text.append("\n")
    flags_before = {f.id: f for f in queue_view.flag_list(previous.assessment)}
    flags_after = {f.id: f for f in queue_view.flag_list(shown.assessment)}
    for flag_id in sorted(set(flags_before) | set(flags_after), key=str):
        text.append_text(inert_text(flag_id, 23))
        text.append(" " * max(1, 24 - len(str(flag_id)[:23])))
        for side, flags in enumerate((flags_before, flags_after)):
            flag = flags.get(flag_id)
            if flag is None:
                cell = Text("✓ gone" if side else "✓ none", style=SEVERITY_STYLE["ok"])
            else:
                cell = severity_text(flag.severity, word=True)
                cell.append(f" {format_number(flag.value)}", style=SEVERITY_STYLE[severity_key(flag.severity)])
            cell.truncate(width, pad=True)
            text.append_text(cell)
            if side == 0:
                text.append(" -> ")
        text.append("\n")
    metrics_before = dict(queue_view.metric_items(previous.assessment))
    text.append("metrics\n", style="bold")
    metrics_after = dict(queue_view.metric_items(shown.assessment))
    for name in sorted(set(metrics_before) | set(metrics_after), key=str):
        text.append_text(inert_text(name, 23, style="dim"))
        text.append(" " * max(1, 24 - len(str(name)[:23])))
        left = Text(format_number(metrics_before.get(name)))
        left.truncate(width, pad=True)
        text.append_text(left)
        text.append(" -> ")
        text.append(format_number(metrics_after.get(name)))
        text.append("\n")
    text.append("settings changed\n", style="bold")
    before = getattr(previous.info, "settings", None) or {}
    after = getattr(shown.info, "settings", None) or {}
    for name in sorted(set(before) | set(after)):
        if before.get(name) != after.get(name):
            text.append_text(inert_text(name, 23, style="dim"))
            text.append(" " * max(1, 24 - len(str(name)[:23])))
            text.append_text(inert_text(before.get(name), width))
            text.append(" -> ")
            text.append_text(inert_text(after.get(name), width))
            text.append("\n")
    text.rstrip()
    return text
