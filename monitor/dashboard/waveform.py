"""The pressure-trace panel: the latest pressure waveform with p_c and p_r marked."""

from __future__ import annotations

import math

import numpy as np

from ..live.snapshot import Snapshot
from .panel import LinePanel
from .plotgrid import (
    PlotGrid,
    column_extents,
    message_strips,
    to_steps,
)
from .units import number

TRACE = "#6fd3b8"
COMPRESSION = "#ff9466"
RAREFACTION = "#7cb6ff"
ZERO = "#3a4a55"
AXIS = "#8a9aa6"
_AXIS_WIDTH = 6


def pulse_window(y: np.ndarray, *, fraction: float = 0.1, pad_factor: float = 1.0,
                 min_samples: int = 64) -> tuple[int, int]:
    """The sample range ``[start, stop)`` around the pulse in ``y``, padded on both sides.

    The pulse is where ``|y|`` reaches ``fraction`` of its maximum; the window adds
    ``pad_factor`` times the pulse length on each side and is at least ``min_samples``
    long (all of ``y`` when it is shorter). All-zero or empty input gives the whole range.
    """
    y = np.asarray(y, dtype=np.float64)
    n = y.size
    mag = np.abs(np.where(np.isfinite(y), y, 0.0))
    if n == 0 or not np.any(mag > 0):
        return 0, n
    above = np.flatnonzero(mag >= fraction * mag.max())
    first, last = int(above[0]), int(above[-1]) + 1
    pad = int(np.ceil(pad_factor * (last - first)))
    start, stop = first - pad, last + pad
    short = min_samples - (stop - start)
    if short > 0:
        start -= short // 2
        stop += short - short // 2
    if start < 0:
        stop, start = stop - start, 0
    if stop > n:
        start, stop = max(0, start - (stop - n)), n
    return start, stop


class PressureTrace(LinePanel):
    """Draws the latest trace column by column from its min/max, so no spike hides."""

    DEFAULT_CSS = "PressureTrace { height: 1fr; }"

    def __init__(self, **kwargs):
        super().__init__(**kwargs)
        self.border_title = "pressure trace"
        self.seq = -1
        self._times_s = np.zeros(0)
        self._pressure_pa = np.zeros(0)
        self._pc_pa = math.nan
        self._pr_pa = math.nan
        self.zoomed = True
        self._subtitle = ""
        self._window_for: int | None = None       # panel width the pulse window is for
        self._pulse = (0, 0)

    def set_zoom(self, zoomed: bool) -> None:
        """Pulse view (True) or the whole record (False)."""
        self.zoomed = zoomed
        self._set_subtitle()
        self.invalidate()

    def on_resize(self) -> None:
        self._set_subtitle()

    def _window(self, ncols: int) -> tuple[int, int]:
        y = self._pressure_pa
        if not self.zoomed:
            return 0, y.size
        # the subtitle and the plot both ask, once each per trace
        if self._window_for != ncols:
            self._window_for, self._pulse = ncols, pulse_window(y, min_samples=ncols)
        return self._pulse

    def _set_subtitle(self) -> None:
        t = self._times_s
        start, stop = self._window(max(1, self.content_size.width - _AXIS_WIDTH))
        if t.size == self._pressure_pa.size and stop > start:
            view = "pulse" if self.zoomed else "record"
            self.set_titles(subtitle=f"{view} {t[start] * 1e6:.2f}–{t[stop - 1] * 1e6:.2f} µs"
                                     f"  #{self.seq}")

    def show(self, snap: Snapshot) -> None:
        """Take the waveform of a snapshot and redraw."""
        self.seq = snap.seq
        self._times_s = snap.times_s
        self._pressure_pa = snap.pressure_pa
        self._window_for = None
        self._pc_pa = float(snap.result.get("peak_compressional_pa", math.nan))
        self._pr_pa = float(snap.result.get("peak_rarefactional_pa", math.nan))
        self._set_subtitle()
        self.invalidate()

    def build(self, rows: int, cols: int) -> list:
        if rows < 2 or cols < _AXIS_WIDTH + 4:
            return message_strips("", rows, cols, AXIS)
        y = self._pressure_pa
        if y.size == 0 or not np.any(np.isfinite(y)):
            return message_strips("waiting for the first converted trace", rows, cols, AXIS)
        ncols = cols - _AXIS_WIDTH
        start, stop = self._window(ncols)
        y = y[start:stop]
        mins, maxs = column_extents(y, ncols)
        top = float(np.nanmax(maxs))
        bottom = float(np.nanmin(mins))
        # keep zero inside the plot and leave a little headroom for the markers
        top = max(top, 0.0, abs(self._pc_pa) if math.isfinite(self._pc_pa) else 0.0)
        bottom = min(bottom, 0.0, -abs(self._pr_pa) if math.isfinite(self._pr_pa) else 0.0)
        pad = 0.05 * (top - bottom or 1.0)
        top, bottom = top + pad, bottom - pad
        grid = PlotGrid(rows, cols)
        nsteps = grid.steps
        plot_cols = range(_AXIS_WIDTH, cols)
        grid.hline(int(to_steps(np.array([0.0]), bottom, top, nsteps)[0]), ZERO, plot_cols)
        lo = to_steps(mins, bottom, top, nsteps)
        hi = to_steps(maxs, bottom, top, nsteps)
        grid.spans(_AXIS_WIDTH, lo, hi, TRACE)
        marks = []
        if math.isfinite(self._pc_pa):
            marks.append(("p_c", abs(self._pc_pa), COMPRESSION))
        if math.isfinite(self._pr_pa):
            # p_r is reported as a magnitude; it sits below zero on the trace
            marks.append(("p_r", -abs(self._pr_pa), RAREFACTION))
        for name, level, colour in marks:
            step = int(to_steps(np.array([level]), bottom, top, nsteps)[0])
            grid.hline(step, colour, plot_cols)
            row = (nsteps - 1 - step) // 2
            text = f" {name} {number(abs(level) * 1e-6, 0)} "
            grid.label(row, cols - len(text), text, f"bold {colour}")
        grid.label(0, 0, number(top * 1e-6, _AXIS_WIDTH - 1), AXIS)
        grid.label(rows - 1, 0, number(bottom * 1e-6, _AXIS_WIDTH - 1), AXIS)
        grid.label(rows // 2, 0, " MPa", AXIS)
        return grid.to_strips()
