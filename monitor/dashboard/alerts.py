"""The alerts panel: alerts as they happen, newest first, with their actions."""

from __future__ import annotations

import re

from rich.cells import cell_len
from textual.strip import Strip

from ..live.snapshot import AlertView, Snapshot
from .panel import LinePanel, text_strips
from .units import wall_time

SEVERITY_STYLE = {
    "info": ("·", "#87b8d8"),
    "warning": ("!", "#ffb35c"),
    "critical": ("‼", "bold #ff5f87"),
}
ACKED = "#5c6770"


def open_alerts(alerts: list[AlertView]) -> list[AlertView]:
    """Alerts not yet acknowledged, oldest first."""
    return [a for a in alerts if not a.acknowledged]


class AlertList(LinePanel):
    """Alerts newest first: id, ✓ once acknowledged, time, severity, rule, [actions], message."""

    DEFAULT_CSS = "AlertList { height: 5; }"

    def __init__(self, **kwargs):
        super().__init__(**kwargs)
        self.border_title = "alerts"
        self.alerts: list[AlertView] = []
        self.cut = False        # a message did not fit (the event log has it whole)

    def show(self, snap: Snapshot) -> None:
        self.alerts = list(snap.alerts)
        n_open = len(open_alerts(self.alerts))
        self.set_titles(title=f"alerts · {n_open} open" if n_open else "alerts",
                        subtitle=f"{len(self.alerts)} in session" if self.alerts else "")
        self.set_class(n_open > 0, "-open")
        self.invalidate()

    def build(self, rows: int, cols: int) -> list[Strip]:
        lines: list[list[tuple[str, str]]] = []
        if not self.alerts:
            lines.append([("no alerts", ACKED)])
        shown = list(reversed(self.alerts[-rows:] if rows else []))
        self.cut = False
        for i, alert in enumerate(shown):
            mark, style = SEVERITY_STYLE.get(alert.severity, ("?", "white"))
            if alert.acknowledged:
                style = ACKED
            line = [(f"#{alert.alert_id:<3}", style),
                    ("✓ " if alert.acknowledged else "  ", ACKED),
                    (f"{wall_time(alert.time_s)} ", ACKED),
                    (f"{mark} {alert.severity[:4]:<4} ", style),
                    (f"{alert.rule}", style)]
            if alert.actions:
                line.append((f" [{', '.join(alert.actions)}]",
                             ACKED if alert.acknowledged else "#c8ccd0"))
            line.append((f" {alert.message}", style))
            # a long message goes on over the next rows, indented under the time, as far
            # as the rows go with one kept for each older alert in view
            wrapped = wrap_pieces(line, cols, indent=CONTINUATION_INDENT)
            room = max(1, rows - len(lines) - (len(shown) - i - 1))
            if len(wrapped) > room:
                wrapped = wrapped[:room]
                wrapped[-1] = ellipsised(wrapped[-1], cols)
                self.cut = True
            lines += wrapped
        return text_strips(lines, rows, cols, self.visual_style.rich_style)


CONTINUATION_INDENT = 6      # the width of the id and the acknowledged mark


def ellipsised(line: list[tuple[str, str]], cols: int) -> list[tuple[str, str]]:
    """A line of pieces cut to ``cols - 1`` cells and ended with "…" (more follows)."""
    out: list[tuple[str, str]] = []
    used = 0
    for text, style in line:
        take = text[:max(0, cols - 1 - used)]
        if take:
            out.append((take, style))
            used += cell_len(take)
    style = line[-1][1] if line else ""
    return out + [("…", style)]


def wrap_pieces(pieces: list[tuple[str, str]], cols: int, *,
                indent: int = 0) -> list[list[tuple[str, str]]]:
    """(text, style) pieces broken into lines of at most ``cols`` cells, at spaces.

    Lines after the first start with ``indent`` spaces; a word longer than a line is
    broken where the line ends. Every character of the input is kept (but the spaces a
    line breaks at).
    """
    if cols <= indent + 1:
        return [list(pieces)]
    words: list[tuple[str, str]] = []
    for text, style in pieces:
        for word in re.findall(r"\s+|\S+", text):
            words.append((word, style))
    lines: list[list[tuple[str, str]]] = [[]]
    used = 0
    for word, style in words:
        room = cols - used
        width = cell_len(word)
        if word.isspace():
            if width <= room:
                lines[-1].append((word, style))
                used += width
            else:
                lines.append([(" " * indent, "")])
                used = indent
            continue
        if width > room and used > indent and width <= cols - indent:
            lines.append([(" " * indent, "")])
            used, room = indent, cols - indent
        while width > room:         # a word longer than a whole line
            lines[-1].append((word[:room], style))
            word = word[room:]
            width = cell_len(word)
            lines.append([(" " * indent, "")])
            used, room = indent, cols - indent
        if word:
            lines[-1].append((word, style))
            used += width
    return lines
