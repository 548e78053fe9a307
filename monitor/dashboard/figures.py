"""The running-figures panel: last, minimum, maximum, mean and a trend of each parameter."""

from __future__ import annotations

import math
import time

import numpy as np
from rich.text import Text
from textual.strip import Strip

from ..live.snapshot import FIGURES, RunningFigure, Snapshot
from .panel import LinePanel, text_strips
from .plotgrid import column_extents
from .units import DISPLAY_UNITS, in_display_unit, number, wall_time

_LEVELS = " ▁▂▃▄▅▆▇█"
HEAD = "#8a9aa6"
NAME = "#d7dde2"
LAST = "#6fd3b8"
STALE = "#ffb35c"
TREND = "#b48ee0"


def age_text(seconds: float) -> str:
    """An age as "12 s", "4 min 05 s" or "2 h 03 min"."""
    s = max(0, int(seconds))
    if s < 60:
        return f"{s} s"
    if s < 3600:
        return f"{s // 60} min {s % 60:02d} s"
    return f"{s // 3600} h {s % 3600 // 60:02d} min"


def sparkline(values: np.ndarray, width: int) -> str:
    """A one-line trend of ``values`` (oldest first) in ``width`` block characters.

    Each character shows the largest value of its share of the history (min/max
    decimation, as the trace), scaled between the history's minimum and maximum.
    """
    values = np.asarray(values, dtype=np.float64)
    values = values[np.isfinite(values)]
    if width < 1 or values.size == 0:
        return ""
    _, peaks = column_extents(values, min(width, values.size))
    lo, hi = float(values.min()), float(values.max())
    if hi <= lo:
        return _LEVELS[4] * peaks.size
    idx = 1 + np.round((peaks - lo) / (hi - lo) * (len(_LEVELS) - 2)).astype(int)
    return "".join(_LEVELS[i] for i in idx)


def first_fitting(candidates: list[list[str]], width: int) -> str:
    """The first candidate whose pieces, joined with " · ", fit ``width`` cells.

    Each candidate is a list of markup pieces (empty ones skipped), most complete first;
    the last candidate is taken when none fits.
    """
    text = ""
    for pieces in candidates:
        text = " · ".join(p for p in pieces if p)
        if Text.from_markup(text).cell_len <= width:
            break
    return text


class RunningFigures(LinePanel):
    """A table of the session's running figures in fixed display units."""

    DEFAULT_CSS = "RunningFigures { height: 8; }"

    def __init__(self, **kwargs):
        super().__init__(**kwargs)
        self.border_title = "running figures"
        self._figures: dict[str, RunningFigure] = {}
        self.stale = False
        self._left_out = ""
        self._good_time_s = math.nan
        self._since = ""
        self._since_reason = ""
        self._snap: Snapshot | None = None

    def on_resize(self) -> None:
        if self._snap is not None:
            self.show(self._snap)     # the border texts are fitted to the width

    def show(self, snap: Snapshot) -> None:
        self._snap = snap
        self._figures = snap.figures
        counts = [f.count for f in snap.figures.values()]
        # the figures hold a last good value the latest trace did not renew
        self.stale = bool(snap.figures_left_out) and any(counts)
        self._left_out = snap.figures_left_out
        self._good_time_s = snap.figures_time_s
        self._since = ""
        if math.isfinite(snap.figures_since_s):
            self._since = f"since {wall_time(snap.figures_since_s)}"
            self._since_reason = snap.figures_since_reason
        self.tick()
        codes = snap.last_warnings
        left_out = snap.figures_left_out_counts
        # a doubtful last trace is flagged where its numbers are read
        doubtful = f"last doubtful: {', '.join(codes)}" if codes else ""
        latest = f"latest {self._left_out}" if self.stale else ""
        out = ("left out " + ", ".join(f"{n} {why}" for why, n in left_out.items())
               if left_out else "")
        traces = f"{max(counts)} traces" if counts else ""
        # the least wanted piece goes first when the border is short
        self.set_titles(subtitle=first_fitting(
            [[doubtful, latest, out, traces], [doubtful, latest, traces],
             [doubtful, traces], [doubtful]], self._border_room()))
        self.invalidate()

    def _border_room(self) -> int:
        # corners, the border's dashes and the spaces around a title
        width = self.outer_size.width
        return width - 6 if width > 6 else 1_000

    def tick(self, now_s: float | None = None) -> None:
        """Renew the title, whose stale age grows while no good trace arrives."""
        self.set_titles(title=self.title_text(time.time() if now_s is None else now_s))

    def title_text(self, now_s: float) -> str:
        """The panel's title: since when the figures run, and STALE with the age.

        "running figures", "running figures · since 11:02:13, method change", ... ·
        STALE, 1 min 05 s old; shortened to the panel's width, the stale mark kept last.
        """
        stale = ""
        if self.stale:
            age = (f", {age_text(now_s - self._good_time_s)} old"
                   if math.isfinite(self._good_time_s) else "")
            stale = f"[{STALE}]STALE{age}[/]"
        since = f"{self._since}, {self._since_reason}" if self._since else ""
        name = "running figures"
        return first_fitting([[name, since, stale], [name, self._since, stale],
                              [name, stale], [stale or name]], self._border_room())

    def build(self, rows: int, cols: int) -> list[Strip]:
        name_w, num_w = 12, 6
        trend_w = max(0, cols - name_w - 4 * (num_w + 1) - 1)
        head = [(f"{'':{name_w}}", HEAD)]
        for title in ("last", "min", "max", "mean"):
            head.append((f" {title:>{num_w}}", HEAD))
        if trend_w:
            head.append((f"  {'trend' if trend_w >= 6 else '':<{trend_w - 1}}", HEAD))
        lines = [head]
        for key, _, _ in FIGURES:
            label, unit, _ = DISPLAY_UNITS[key]
            fig = self._figures.get(key, RunningFigure())
            line = [(f"{label:<6}", f"bold {NAME}"), (f"{unit:<{name_w - 6}}", HEAD),
                    (" " + number(in_display_unit(key, fig.last), num_w),
                     STALE if self.stale else f"bold {LAST}")]
            for value in (fig.minimum, fig.maximum, fig.mean):
                line.append((" " + number(in_display_unit(key, value), num_w), NAME))
            if trend_w:
                line.append(("  " + sparkline(fig.trend, trend_w - 1), TREND))
            lines.append(line)
        return text_strips(lines, rows, cols, self.visual_style.rich_style)
