"""Text of the record screen's panels: flags, metrics, run settings, run comparison.

Pure functions returning ``rich.text.Text``; every string that came from a
file or a person goes through :func:`tracevet.app.display.inert_text`.
"""

from __future__ import annotations

from rich.text import Text

from tracevet.app import queue_view
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


def _flag_line(flag) -> Text:
    line = Text(no_wrap=True, overflow="ellipsis")
    line.append_text(severity_text(flag.severity))
    line.append("  ")
    line.append_text(inert_text(flag.id, 28, style="bold"))
    channel = getattr(flag, "channel", None)
    if channel:
        line.append("  ")
        line.append_text(inert_text(channel, 12))
    line.append("  value ", style="dim")
    line.append(format_number(flag.value))
    line.append("  limit ", style="dim")
    line.append(format_number(flag.limit))
    return line


def flags_panel(assessment) -> Text:
    """Every flag: severity (symbol, word, colour), id, value, limit, then its message and source."""
    flags = queue_view.flag_list(assessment)
    if not flags:
        return Text.assemble(("✓ ok", SEVERITY_STYLE["ok"]), "  no flags: no measure passed its limit.")
    text = Text()
    for flag in flags:
        text.append_text(_flag_line(flag))
        text.append("\n   ")
        text.append_text(inert_text(flag.message, 200))
        text.append("\n   source: ", style="dim")
        text.append_text(inert_text(getattr(flag, "source", "") or "-", 200, style="dim"))
        text.append("\n")
    text.rstrip()
    return text


def metrics_panel(assessment) -> Text:
    """The assessment's metrics, two per line."""
    items = queue_view.metric_items(assessment)
    if not items:
        return Text("no metrics in this assessment", style="dim")
    text = Text()
    for index, (name, value) in enumerate(items):
        cell = Text.assemble(inert_text(name, 28, style="dim"), " ", format_number(value))
        cell.pad_right(max(0, 39 - cell.cell_len))
        text.append_text(cell)
        if index % 2 == 1:
            text.append("\n")
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


def compare_panel(previous, shown) -> Text:
    """Two runs side by side: changed settings, worst severity, every flag and metric of either run.

    ``previous`` and ``shown`` are :class:`tracevet.app.queue_view.RunData`.
    """
    width = 14
    text = Text()
    header = Text.assemble(
        ("".ljust(24), ""), inert_text(previous.run_id, width), " -> ", inert_text(shown.run_id, width)
    )
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
