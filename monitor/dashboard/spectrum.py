"""The spectrum panel: pressure spectrum, loaded sensitivity, narrowband window and verdict."""

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

BARS = "#b48ee0"
SENSITIVITY = "#e6d36a"
WINDOW = "#1d2f3a"
LIMIT = "#e06c75"
AXIS = "#8a9aa6"
PASS = "#7fd88f"
FAIL = "#ff6b6b"

LIMIT_DB = 3.0           # IEC 62127-1 narrowband condition: |M_L| within ±3 dB over the window
DB_TOP, DB_BOTTOM = 6.0, -54.0
LIN_TOP = 1.5            # linear scale: amplitude ratio, 0 .. 1.5
SENS_SPAN_DB = 6.0       # right axis for |M_L|: ±6 dB re its value at f_awf
_AXIS_WIDTH = 5
_RIGHT_WIDTH = 5


def narrowband_window_hz(f_awf_hz: float) -> tuple[float, float]:
    """The narrowband check window f_awf/2 .. min(40 MHz, 8 f_awf), Hz (IEC 62127-1)."""
    return 0.5 * f_awf_hz, min(40e6, 8.0 * f_awf_hz)


def no_pulse_text(snap: Snapshot) -> str:
    """Why the latest trace holds nothing to judge: "drive off", "no pulse", or "".

    "drive off" (the generator output is known to be off) wins over "no pulse", the
    trace being noise either way; "" when the trace holds a pulse (or before the first).
    """
    if snap.drive_on is False:
        return "drive off"
    return "no pulse" if snap.pulse_present is False else ""


class SpectrumView(LinePanel):
    """Spectrum in dB (or linear amplitude) with |M_L| overlaid and the ±3 dB limits."""

    DEFAULT_CSS = "SpectrumView { height: 1fr; }"

    def __init__(self, **kwargs):
        super().__init__(**kwargs)
        self.linear = False
        self.seq = -1
        self._freqs_hz = np.zeros(0)
        self._spectrum_db = np.zeros(0)
        self._sensitivity_db = np.zeros(0)
        self._band_hz = (math.nan, math.nan)
        self._ok: bool | None = None
        self._worst_db = math.nan
        self._no_pulse = ""        # why the trace holds no pulse to judge ("" when it does)
        self._set_titles()

    def set_linear(self, linear: bool) -> None:
        self.linear = linear
        self._set_titles()
        self.invalidate()

    def show(self, snap: Snapshot) -> None:
        self.seq = snap.seq
        self._freqs_hz = snap.freqs_hz
        self._spectrum_db = snap.spectrum_db
        self._sensitivity_db = snap.sensitivity_db
        band = snap.narrowband_band_hz
        f_awf = float(snap.result.get("acoustic_working_frequency_hz", math.nan))
        if not all(math.isfinite(b) for b in band) and math.isfinite(f_awf):
            band = narrowband_window_hz(f_awf)
        self._band_hz = band
        self._ok = snap.narrowband_ok
        self._worst_db = snap.narrowband_max_deviation_db
        self._no_pulse = no_pulse_text(snap)
        self._set_titles()
        self.invalidate()

    def verdict(self) -> str:
        """The narrowband verdict as shown, e.g. "narrowband PASS, worst 1.2 dB"."""
        worst = f"{self._worst_db:.1f} dB" if math.isfinite(self._worst_db) else "-"
        if self._no_pulse:
            # noise has no working frequency: a verdict on it would be a verdict on nothing
            return f"no narrowband verdict: {self._no_pulse}"
        if self._ok is None:
            return "narrowband not checked"
        return f"narrowband {'PASS' if self._ok else 'FAIL'}, worst {worst}"

    def _set_titles(self) -> None:
        scale = "linear" if self.linear else "dB"
        colour = AXIS if self._ok is None or self._no_pulse else (PASS if self._ok else FAIL)
        self.set_titles(title=f"spectrum · {scale}",
                        subtitle=f"[{colour}]{self.verdict()}[/]")

    def _scale(self, db: np.ndarray) -> np.ndarray:
        return 10.0 ** (db / 20.0) if self.linear else db

    def build(self, rows: int, cols: int) -> list:
        if rows < 2 or cols < _AXIS_WIDTH + _RIGHT_WIDTH + 4:
            return message_strips("", rows, cols, AXIS)
        f = self._freqs_hz
        if f.size < 2 or self._spectrum_db.size != f.size:
            text = f"{self._no_pulse}: no spectrum" if self._no_pulse else \
                "waiting for the first spectrum"
            return message_strips(text, rows, cols, AXIS)
        lo_hz, hi_hz = self._band_hz
        f_top = f[-1]
        if math.isfinite(hi_hz):
            f_top = min(f[-1], 1.25 * hi_hz)
        keep = f <= f_top
        x0, ncols = _AXIS_WIDTH, cols - _AXIS_WIDTH - _RIGHT_WIDTH
        grid = PlotGrid(rows, cols)
        nsteps = grid.steps

        def col_of(freq_hz: float) -> int:
            return x0 + int(np.clip(freq_hz / f_top * ncols, 0, ncols - 1))

        # left axis: the pressure spectrum, re its maximum
        top, bottom = (LIN_TOP, 0.0) if self.linear else (DB_TOP, DB_BOTTOM)
        spec = self._scale(np.clip(self._spectrum_db[keep], DB_BOTTOM, None))
        _, spec_max = column_extents(spec, ncols)
        hi = to_steps(spec_max, bottom, top, nsteps)
        window_cols = range(0)
        if math.isfinite(lo_hz) and math.isfinite(hi_hz):
            window_cols = range(col_of(lo_hz), col_of(hi_hz) + 1)
            grid.shade(window_cols, WINDOW)
        grid.spans(x0, np.zeros_like(hi), hi, BARS)
        # right axis: |M_L| re its value at f_awf, zoomed so the ±3 dB limits stand apart
        s_top, s_bottom = (self._scale(np.array([SENS_SPAN_DB, -SENS_SPAN_DB])))
        for limit in (LIMIT_DB, -LIMIT_DB):
            step = to_steps(self._scale(np.array([limit])), s_bottom, s_top, nsteps)[0]
            grid.hline(int(step), LIMIT, window_cols, over=True)
        if self._sensitivity_db.size == f.size:
            sens = np.clip(self._sensitivity_db[keep], -SENS_SPAN_DB, SENS_SPAN_DB)
            s_lo, s_hi = column_extents(self._scale(sens), ncols)
            lo_s = to_steps(s_lo, s_bottom, s_top, nsteps)
            hi_s = to_steps(s_hi, s_bottom, s_top, nsteps)
            grid.spans(x0, lo_s, hi_s, SENSITIVITY)
        if self.linear:
            grid.label(0, 0, f"{top:4.1f}", AXIS)
            grid.label(rows - 1, 0, " 0.0", AXIS)
            grid.label(0, cols - _RIGHT_WIDTH, f"{s_top:5.2f}", SENSITIVITY)
            grid.label(rows - 1, cols - _RIGHT_WIDTH, f"{s_bottom:5.2f}", SENSITIVITY)
        else:
            grid.label(0, 0, f"{top:+4.0f}", AXIS)
            grid.label(rows - 1, 0, f"{bottom:4.0f}", AXIS)
            grid.label(rows // 2, 0, "  dB", AXIS)
            grid.label(0, cols - _RIGHT_WIDTH, f"{SENS_SPAN_DB:+5.0f}", SENSITIVITY)
            grid.label(rows - 1, cols - _RIGHT_WIDTH, f"{-SENS_SPAN_DB:+5.0f}", SENSITIVITY)
        if rows >= 3:
            grid.label(rows // 2, cols - _RIGHT_WIDTH, "  M_L", f"bold {SENSITIVITY}")
        axis = f"{f_top * 1e-6:.0f} MHz "
        grid.label(rows - 1, cols - _RIGHT_WIDTH - len(axis), axis, AXIS)
        if window_cols:
            grid.label(0, x0 + 1, self._window_text(), "#9fc7d4")
        return grid.to_strips()

    def _window_text(self) -> str:
        lo, hi = self._band_hz
        return f"{lo * 1e-6:.3g}–{hi * 1e-6:.3g} MHz"
