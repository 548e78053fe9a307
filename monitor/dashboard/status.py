"""The bench-status panel: instruments, rates, digitiser range use and the session file."""

from __future__ import annotations

import math
import os

from textual.strip import Strip

from ..live.snapshot import BenchView, Snapshot
from ..live.views import stage_text, water_text
from .panel import LinePanel, text_strips
from .units import size, volts

KEY = "#8a9aa6"
VALUE = "#d7dde2"
GOOD = "#7fd88f"
BAD = "#ff6b6b"
WARN = "#ffb35c"


class BenchStatus(LinePanel):
    """Instrument identities and connection, rates, range use, counts, session file."""

    DEFAULT_CSS = "BenchStatus { height: 8; }"

    def __init__(self, **kwargs):
        super().__init__(**kwargs)
        self.border_title = "bench"
        self._snap: Snapshot | None = None

    def show(self, snap: Snapshot) -> None:
        self._snap = snap
        self.invalidate()

    def build(self, rows: int, cols: int) -> list[Strip]:
        return text_strips(self.lines(cols, rows), rows, cols, self.visual_style.rich_style)

    def lines(self, cols: int, rows: int | None = None) -> list[list[tuple[str, str]]]:
        """The panel's lines as (text, style) pieces, for a panel ``cols`` wide (and
        ``rows`` high: with a stage or thermometer line, the session file's name goes
        when there is no room for it)."""
        snap = self._snap
        if snap is None:
            return [[("waiting for the session", KEY)]]
        lines: list[list[tuple[str, str]]] = []

        def pair(key: str, value: str, style: str = VALUE) -> None:
            lines[-1] += [(f"{key} ", KEY), (f"{value}  ", style)]

        wide = cols >= 50
        for inst in snap.instruments:
            lost = not inst.connected and not inst.ended
            line = [("● " if inst.connected else "○ ", GOOD if inst.connected else
                     KEY if inst.ended else BAD), (f"{inst.name[:3]} ", KEY)]
            if lost:
                line.append(("lost ", BAD))
            elif not inst.connected:
                line.append(("closed ", KEY))
            identity = (inst.identity if wide else short_identity(inst.identity)
                        or inst.resource, VALUE)
            if inst.detail and not wide:
                # narrow: the output state matters more than the identity, so it goes first
                line += [(f"{inst.detail}  ", KEY), identity]
            else:
                line.append(identity)
                if inst.detail:
                    line.append((f"  {inst.detail}", KEY))
            lines.append(line)
        if snap.bench is not None:
            lines.append(bench_line(snap.bench, cols))
        lines.append([])
        pair("rate", f"{snap.traces_per_s:.1f}/s")
        pair("clipped", str(snap.clipped_traces), BAD if snap.clipped_traces else VALUE)
        lines.append([])
        frac = snap.range_fraction_used
        used = f"{frac * 100:.0f}%" if math.isfinite(frac) else "-"
        used_style = BAD if math.isfinite(frac) and frac >= 0.98 else (
            WARN if math.isfinite(frac) and frac < 0.1 else VALUE)
        pair("range", volts(snap.range_v))
        pair("used", used, used_style)
        lines.append([])
        if wide:
            pair("acquired", count(snap.acquired))
            pair("converted", count(snap.converted))
            pair("stored", count(snap.stored))
        else:
            pair("acq/conv/sto", "/".join(count(n) for n in (snap.acquired, snap.converted,
                                                             snap.stored)))
        lines.append([])
        half_full = snap.queue_capacity and snap.queue_depth > snap.queue_capacity // 2
        q_style = WARN if half_full else VALUE
        pair("queue", f"{snap.queue_depth}/{snap.queue_capacity}", q_style)
        pair("file", size(snap.session_bytes))
        if snap.bench is None or rows is None or len(lines) < rows:
            lines.append([(os.path.basename(snap.session_path) if snap.session_path else "-",
                           VALUE)])
        return lines


def bench_line(view: BenchView, cols: int) -> list[tuple[str, str]]:
    """The stage's position and the water's temperature on one line, shorter when
    ``cols`` is narrow; LOST, or a reading too old to use, in warning colours."""
    width = max(0, cols - 2)
    for compact in (False, True):
        stage = stage_text(view, compact=compact)
        water = water_text(view, compact=compact)
        if len(stage) + len(water) + 2 <= width or compact:
            break
    line: list[tuple[str, str]] = []
    if stage:
        lost = not view.stage_connected and not view.stage_ended
        line.append((f"{stage}  ", BAD if lost else
                     WARN if view.stage_moving else VALUE))
    if water:
        lost = (view.has_thermometer and not view.thermometer_connected
                and not view.thermometer_ended)
        line.append((water, BAD if lost else WARN if view.water_source == "bench"
                     else VALUE))
    return line


def count(n: int) -> str:
    """A trace count, with a k suffix from 100 000 on so that it stays short."""
    return str(n) if n < 100_000 else f"{n / 1000:.0f}k"


def short_identity(identity: str) -> str:
    """Maker and model of an IEEE 488.2 ``*IDN?`` reply (maker,model,serial,firmware)."""
    parts = [p.strip() for p in identity.split(",")]
    return " ".join(parts[:2]) if len(parts) >= 2 else identity
