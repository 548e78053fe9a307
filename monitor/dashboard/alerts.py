"""The alerts panel: alerts as they happen, newest first, with their actions."""

from __future__ import annotations

from rich.text import Text
from textual.widget import Widget

from tankside.monitor.dashboard.units import wall_time
from tankside.monitor.snapshot import AlertView, Snapshot

SEVERITY_STYLE = {
    "info": ("·", "#87b8d8"),
    "warning": ("!", "#ffb35c"),
    "critical": ("‼", "bold #ff5f87"),
}
ACKED = "#5c6770"


def open_alerts(alerts: list[AlertView]) -> list[AlertView]:
    """Alerts not yet acknowledged, oldest first."""
    return [a for a in alerts if not a.acknowledged]


class AlertList(Widget):
    """Alerts newest first: id, ✓ once acknowledged, time, severity, rule, [actions], message."""

    DEFAULT_CSS = "AlertList { height: 5; }"

    def __init__(self, **kwargs):
        super().__init__(**kwargs)
        self.border_title = "alerts"
        self.alerts: list[AlertView] = []

    def show(self, snap: Snapshot) -> None:
        self.alerts = list(snap.alerts)
        n_open = len(open_alerts(self.alerts))
        self.border_title = f"alerts · {n_open} open" if n_open else "alerts"
        self.border_subtitle = f"{len(self.alerts)} in session" if self.alerts else ""
        self.set_class(n_open > 0, "-open")
        self.refresh()

    def render(self) -> Text:
        rows = self.content_size.height
        out = Text(no_wrap=True, overflow="crop")
        if not self.alerts:
            out.append("no alerts", ACKED)
            return out
        for i, alert in enumerate(reversed(self.alerts[-rows:] if rows else [])):
            if i:
                out.append("\n")
            mark, style = SEVERITY_STYLE.get(alert.severity, ("?", "white"))
            if alert.acknowledged:
                style = ACKED
            out.append(f"#{alert.alert_id:<3}", style)
            out.append("✓ " if alert.acknowledged else "  ", ACKED)
            out.append(f"{wall_time(alert.time_s)} ", ACKED)
            out.append(f"{mark} {alert.severity[:4]:<4} ", style)
            out.append(f"{alert.rule}", style)
            if alert.actions:
                out.append(f" [{', '.join(alert.actions)}]",
                           ACKED if alert.acknowledged else "#c8ccd0")
            out.append(f" {alert.message}", style)
        return out
