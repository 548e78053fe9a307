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
from .spectrum import no_pulse_text
from .units import number

TRACE = "#6fd3b8"
COMPRESSION = "#ff9466"
RAREFACTION = "#7cb6ff"
ZERO = "#3a4a55"
AXIS = "#8a9aa6"
NO_PULSE = "#ffb35c"
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
        self._voltage_v = np.zeros(0)
        self._no_pulse = ""          # "no pulse", "drive off", ... ("" when a pulse is there)
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

    def _shown(self) -> tuple[np.ndarray, float, str]:
        """The samples drawn, their scale to the axis unit, and the unit.

        The pressure when the trace converted; else the voltage as acquired, so a trace
        of noise (drive off, no pulse) is still seen arriving.
        """
        p = self._pressure_pa
        if p.size and np.any(np.isfinite(p)):
            return p, 1e-6, " MPa"
        v = self._voltage_v
        if v.size and np.any(np.isfinite(v)):
            return v, 1e3, "  mV"
        return p, 1e-6, " MPa"

    def _window(self, ncols: int) -> tuple[int, int]:
        y = self._shown()[0]
        if not self.zoomed:
            return 0, y.size
        # the subtitle and the plot both ask, once each per trace
        if self._window_for != ncols:
            self._window_for, self._pulse = ncols, pulse_window(y, min_samples=ncols)
        return self._pulse

    def _set_subtitle(self) -> None:
        t = self._times_s
        y, _, unit = self._shown()
        start, stop = self._window(max(1, self.content_size.width - _AXIS_WIDTH))
        title = "voltage trace" if unit == "  mV" else "pressure trace"
        if self._no_pulse:
            self.set_titles(title=title, subtitle=f"{self._no_pulse}, noise only  #{self.seq}")
        elif t.size == y.size and stop > start:
            view = "pulse" if self.zoomed else "record"
            self.set_titles(title=title,
                            subtitle=f"{view} {t[start] * 1e6:.2f}–{t[stop - 1] * 1e6:.2f} µs"
                                     f"  #{self.seq}")

    def show(self, snap: Snapshot) -> None:
        """Take the waveform of a snapshot and redraw."""
        self.seq = snap.seq
        self._times_s = snap.times_s
        self._pressure_pa = snap.pressure_pa
        self._voltage_v = snap.voltage_v
        self._no_pulse = no_pulse_text(snap)
        self._window_for = None
        self._pc_pa = float(snap.result.get("peak_compressional_pa", math.nan))
        self._pr_pa = float(snap.result.get("peak_rarefactional_pa", math.nan))
        self._set_subtitle()
        self.invalidate()

    def build(self, rows: int, cols: int) -> list:
        if rows < 2 or cols < _AXIS_WIDTH + 4:
            return message_strips("", rows, cols, AXIS)
        y, scale, unit = self._shown()
        if y.size == 0 or not np.any(np.isfinite(y)):
            return message_strips("waiting for the first trace", rows, cols, AXIS)
        ncols = cols - _AXIS_WIDTH
        start, stop = self._window(ncols)
        y = y[start:stop] * scale
        # p_c and p_r of noise are no peaks of a field: not marked
        pc = self._pc_pa * scale if unit == " MPa" and not self._no_pulse else math.nan
        pr = self._pr_pa * scale if unit == " MPa" and not self._no_pulse else math.nan
        mins, maxs = column_extents(y, ncols)
        top = float(np.nanmax(maxs))
        bottom = float(np.nanmin(mins))
        # keep zero inside the plot and leave a little headroom for the markers
        top = max(top, 0.0, abs(pc) if math.isfinite(pc) else 0.0)
        bottom = min(bottom, 0.0, -abs(pr) if math.isfinite(pr) else 0.0)
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
        if math.isfinite(pc):
            marks.append(("p_c", abs(pc), COMPRESSION))
        if math.isfinite(pr):
            # p_r is reported as a magnitude; it sits below zero on the trace
            marks.append(("p_r", -abs(pr), RAREFACTION))
        for name, level, colour in marks:
            step = int(to_steps(np.array([level]), bottom, top, nsteps)[0])
            grid.hline(step, colour, plot_cols)
            row = (nsteps - 1 - step) // 2
            text = f" {name} {number(abs(level), 0)} "
            grid.label(row, cols - len(text), text, f"bold {colour}")
        if self._no_pulse:
            note = f" {self._no_pulse}: noise only "[:cols - _AXIS_WIDTH - 1]
            grid.label(0, cols - len(note), note, f"bold {NO_PULSE}")
        grid.label(0, 0, number(top, _AXIS_WIDTH - 1), AXIS)
        grid.label(rows - 1, 0, number(bottom, _AXIS_WIDTH - 1), AXIS)
        grid.label(rows // 2, 0, unit, AXIS)
        return grid.to_strips()
