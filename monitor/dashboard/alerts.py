"""The alerts panel: alerts as they happen, newest first, with their actions."""

from __future__ import annotations

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
        for alert in reversed(self.alerts[-rows:] if rows else []):
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
            lines.append(line)
        return text_strips(lines, rows, cols, self.visual_style.rich_style)
