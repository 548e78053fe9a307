"""The bench-status panel: instruments, rates, digitiser range use and the session file."""

from __future__ import annotations

import math
import os

from rich.text import Text
from textual.widget import Widget

from tankside.monitor.dashboard.units import size, volts
from tankside.monitor.snapshot import Snapshot

KEY = "#8a9aa6"
VALUE = "#d7dde2"
GOOD = "#7fd88f"
BAD = "#ff6b6b"
WARN = "#ffb35c"


class BenchStatus(Widget):
    """Instrument identities and connection, rates, range use, counts, session file."""

    DEFAULT_CSS = "BenchStatus { height: 8; }"

    def __init__(self, **kwargs):
        super().__init__(**kwargs)
        self.border_title = "bench"
        self._snap: Snapshot | None = None

    def show(self, snap: Snapshot) -> None:
        self._snap = snap
        self.refresh()

    def render(self) -> Text:
        out = Text(no_wrap=True, overflow="ellipsis")
        snap = self._snap
        if snap is None:
            out.append("waiting for the session", KEY)
            return out

        def pair(key: str, value: str, style: str = VALUE) -> None:
            out.append(f"{key} ", KEY)
            out.append(f"{value}  ", style)

        wide = self.content_size.width >= 50
        for inst in snap.instruments:
            out.append("● " if inst.connected else "○ ", GOOD if inst.connected else BAD)
            out.append(f"{inst.name[:3]} ", KEY)
            if not inst.connected:
                out.append("lost ", BAD)
            out.append(inst.identity if wide else short_identity(inst.identity)
                       or inst.resource, VALUE)
            if inst.detail:
                out.append(f"  {inst.detail}", KEY)
            out.append("\n")
        pair("rate", f"{snap.traces_per_s:.1f}/s")
        pair("clipped", str(snap.clipped_traces), BAD if snap.clipped_traces else VALUE)
        out.append("\n")
        frac = snap.range_fraction_used
        used = f"{frac * 100:.0f}%" if math.isfinite(frac) else "-"
        used_style = BAD if math.isfinite(frac) and frac >= 0.98 else (
            WARN if math.isfinite(frac) and frac < 0.1 else VALUE)
        pair("range", volts(snap.range_v))
        pair("used", used, used_style)
        out.append("\n")
        if wide:
            pair("acquired", count(snap.acquired))
            pair("converted", count(snap.converted))
            pair("stored", count(snap.stored))
        else:
            pair("acq/conv/sto", "/".join(count(n) for n in (snap.acquired, snap.converted,
                                                             snap.stored)))
        out.append("\n")
        q_style = WARN if snap.queue_capacity and snap.queue_depth > snap.queue_capacity // 2 else VALUE
        pair("queue", f"{snap.queue_depth}/{snap.queue_capacity}", q_style)
        pair("file", size(snap.session_bytes))
        out.append("\n")
        out.append(os.path.basename(snap.session_path) if snap.session_path else "-", VALUE)
        return out


def count(n: int) -> str:
    """A trace count, with a k suffix from 100 000 on so that it stays short."""
    return str(n) if n < 100_000 else f"{n / 1000:.0f}k"


def short_identity(identity: str) -> str:
    """Maker and model of an IEEE 488.2 ``*IDN?`` reply (maker,model,serial,firmware)."""
    parts = [p.strip() for p in identity.split(",")]
    return " ".join(parts[:2]) if len(parts) >= 2 else identity
