"""The event log: the session's events and alerts, oldest first, in a scrollable list.

Opened by a key over the live view (which goes on refreshing behind it) and closed by
Escape. It lists what the snapshot holds when it opens: marks, method and range
changes, drive on/off, figure resets, faults, and every alert with its whole message.
"""

from __future__ import annotations

from rich.text import Text
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Vertical, VerticalScroll
from textual.screen import ModalScreen
from textual.widgets import Static

from ..live.snapshot import Snapshot
from .alerts import SEVERITY_STYLE
from .units import wall_time

EVENT_STYLE = "#9fc7d4"
TIME_STYLE = "#8a9aa6"


def log_lines(snap: Snapshot) -> list[tuple[float, Text]]:
    """Events and alerts of a snapshot as (time s, line), oldest first."""
    rows: list[tuple[float, Text]] = []
    for ev in snap.events:
        line = Text(f"{wall_time(ev.time_s)} ", TIME_STYLE)
        line.append(f"{ev.kind:<15}", EVENT_STYLE)
        line.append(f" {ev.text}")
        if ev.seq is not None:
            line.append(f"  #{ev.seq}", TIME_STYLE)
        rows.append((ev.time_s, line))
    for alert in snap.alerts:
        mark, style = SEVERITY_STYLE.get(alert.severity, ("?", "white"))
        line = Text(f"{wall_time(alert.time_s)} ", TIME_STYLE)
        line.append(f"{mark} alert #{alert.alert_id:<6}", style)
        line.append(f" {alert.rule}: {alert.message}")
        if alert.acknowledged:
            line.append("  ✓", TIME_STYLE)
        rows.append((alert.time_s, line))
    rows.sort(key=lambda row: row[0])
    return rows


class EventLogScreen(ModalScreen[None]):
    """The session's events and alerts; arrows and page keys scroll, Escape closes."""

    BINDINGS = [Binding("escape", "close", "close"), Binding("e", "close", "close", show=False)]

    def __init__(self, snap: Snapshot | None):
        super().__init__()
        self.lines = log_lines(snap) if snap is not None else []

    def compose(self) -> ComposeResult:
        with Vertical(id="log-box"):
            yield Static(f"[b]event log[/b]  {len(self.lines)} entries, oldest first"
                         "  (arrows scroll, Esc closes)", id="log-head")
            with VerticalScroll(id="log-list"):
                if not self.lines:
                    yield Static("no events yet")
                for _, line in self.lines:
                    yield Static(line, classes="log-line")

    def on_mount(self) -> None:
        scroller = self.query_one("#log-list", VerticalScroll)
        scroller.focus()
        scroller.scroll_end(animate=False)       # the newest in view first

    def action_close(self) -> None:
        self.dismiss(None)
