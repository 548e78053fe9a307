"""The scan map panel: the chosen parameter of a running scan over its grid.

A line is drawn as the parameter against position, a raster as a heat map, a volume as
the raster through the current point's level of its third axis, and points on no grid
as a list of the latest ones. The border says the parameter, the scale, the point, the
phase and the time left (title) and the maximum and the current point in text
(subtitle), so that nothing rests on colour alone.
"""

from __future__ import annotations

import math

import numpy as np
from rich.markup import escape
from textual.strip import Strip

from ..live.snapshot import ScanView
from .figures import first_fitting
from .panel import LinePanel, text_strip, text_strips
from .plotgrid import message_strips
from .scanplot import (
    AXIS,
    CURRENT_GLYPH,
    FAILED_GLYPH,
    MAX_GLYPH,
    MapGeometry,
    Scale,
    heat_map,
    line_plot,
    shown_values,
)
from .scantext import (
    beam_text,
    mm_text,
    phase_text,
    point_number,
    position_mm,
    position_text,
)
from .units import DISPLAY_UNITS, countdown, in_display_unit, number

#: The parameters the map cycles through, in order (keys of the snapshot's results).
PARAMETERS = (
    "peak_rarefactional_pa",
    "peak_compressional_pa",
    "pulse_intensity_integral_j_per_m2",
    "pulse_average_intensity_w_per_m2",
    "mechanical_index",
)
#: Proportional to power rather than amplitude: 10 log10 in dB.
POWER_LIKE = frozenset({"pulse_intensity_integral_j_per_m2",
                        "pulse_average_intensity_w_per_m2"})
PHASE_STYLE = {"paused": "#ffb35c", "waiting": "#ffb35c", "ended": "#8a9aa6"}
INFO = "#9fc7d4"


def gridded(view: ScanView, per_point: np.ndarray) -> np.ndarray:
    """Per-point values on the scan's grid (cell ``grid_index[i]`` takes ``per_point[i]``,
    as :meth:`tankside.monitor.record.scanpoints.PlanGrid.gridded`); NaN where no point."""
    shape = tuple(c.size for c in view.grid_coords_mm)
    out = np.full(shape, np.nan)
    if len(per_point) and view.grid_index.shape[0] == len(per_point):
        out[tuple(view.grid_index.T)] = per_point
    return out


class ScanMap(LinePanel):
    """The map of a running scan (shown in the spectrum's place while a scan runs)."""

    DEFAULT_CSS = "ScanMap { height: 1fr; }"

    def __init__(self, **kwargs):
        super().__init__(**kwargs)
        self.parameter = PARAMETERS[0]
        self.db = False
        self.view: ScanView | None = None
        self.geometry: MapGeometry | None = None   # of the heat map last drawn
        self.point_columns: list[int] = []         # of the line plot last drawn
        self.border_title = "scan map"

    # -- controls ---------------------------------------------------------------------

    def cycle_parameter(self) -> str:
        """The next parameter of :data:`PARAMETERS`; returns its label."""
        k = PARAMETERS.index(self.parameter)
        self.parameter = PARAMETERS[(k + 1) % len(PARAMETERS)]
        self._refresh_all()
        return DISPLAY_UNITS[self.parameter][0]

    def set_db(self, db: bool) -> None:
        self.db = db
        self._refresh_all()

    def show(self, view: ScanView | None) -> None:
        self.view = view
        self._refresh_all()

    def on_resize(self) -> None:
        self._set_titles()

    def _refresh_all(self) -> None:
        self._set_titles()
        self.invalidate()

    # -- what is shown ----------------------------------------------------------------

    @property
    def label(self) -> str:
        return DISPLAY_UNITS[self.parameter][0]

    @property
    def unit(self) -> str:
        return DISPLAY_UNITS[self.parameter][1]

    def per_point(self) -> np.ndarray:
        """The parameter at every point, SI, NaN where not done or failed."""
        view = self.view
        if view is None:
            return np.zeros(0)
        values = view.values.get(self.parameter)
        if values is None or len(values) != view.total:
            return np.full(view.total, np.nan)
        out = np.asarray(values, dtype=float).copy()
        if view.failed.shape == out.shape:
            out[view.failed] = np.nan
        return out

    def maximum_index(self, among: np.ndarray | None = None) -> int | None:
        """The point with the largest value (of ``among``, a mask; all by default)."""
        v = self.per_point()
        if among is not None:
            v = np.where(among, v, np.nan)
        if not np.isfinite(v).any():
            return None
        return int(np.nanargmax(v))

    def slice_level(self) -> int | None:
        """For a volume, the level of the third axis shown: the current point's, else the
        last done point's, else the first."""
        view = self.view
        if view is None or len(view.grid_axes) != 3:
            return None
        index = view.current
        if index is None:
            done = np.flatnonzero(np.isfinite(self.per_point()))
            index = int(done[-1]) if done.size else None
        if index is None:
            return 0
        return int(view.grid_index[index, 2])

    def _value_text(self, si: float, shown: float) -> str:
        value = f"{number(in_display_unit(self.parameter, si), 0)} {self.unit}".strip()
        if self.db and math.isfinite(shown):
            return f"{value} ({shown:.1f} dB)"
        return value

    def _set_titles(self) -> None:
        view = self.view
        width = max(10, self.size.width - 5)
        if view is None:
            self.set_titles(title="scan map", subtitle="")
            return
        scale = "dB" if self.db else "linear"
        point = f"{point_number(view)}/{view.total}"
        phase = phase_text(view)
        colour = PHASE_STYLE.get(view.phase)
        phase_markup = f"[{colour}]{escape(phase)}[/]" if colour else escape(phase)
        short_markup = f"[{colour}]{escape(view.phase)}[/]" if colour else escape(view.phase)
        left = countdown(view.time_left_s)
        short = "dB" if self.db else "lin"
        busy = view.phase not in PHASE_STYLE      # moving, settling, acquiring
        title = first_fitting([
            [f"map {self.label}", scale, f"point {point}", f"{view.completed} done",
             phase_markup, f"{left} left" if left else ""],
            [f"map {self.label}", scale, f"point {point}", phase_markup,
             f"{left} left" if left else ""],
            [f"{self.label} {short}", point, phase_markup, f"{left} left" if left else ""],
            [f"{self.label} {short}", point, phase_markup, left],
            [f"{self.label} {short}", point, "" if busy else phase_markup, left],
            [f"{self.label} {short}", point, short_markup],
        ], width)
        self.set_titles(title=title, subtitle=first_fitting(self._subtitles(), width))

    def _subtitles(self) -> list[list[str]]:
        view = self.view
        assert view is not None
        v = self.per_point()
        shown, _ = self._shown(v)
        among = None
        level = self.slice_level()
        if level is not None:
            among = view.grid_index[:, 2] == level
        top = self.maximum_index(among)
        where = ""
        best = ""
        if top is not None:
            where = position_text(position_mm(view, top))
            best = f"{MAX_GLYPH} {'max' if level is None else 'slice max'} " \
                   f"{self._value_text(v[top], shown[top])}"
        now = ""
        now_short = ""
        cur = view.current
        if cur is not None:
            here = position_text(position_mm(view, cur))
            value = self._value_text(v[cur], shown[cur]) if np.isfinite(v[cur]) else ""
            now = f"{CURRENT_GLYPH} {here}" + (f" {value}" if value else "")
            now_short = f"{CURRENT_GLYPH} {value}" if value else ""
        return [
            [f"{best} at {where}" if best else "", now, "p param · l dB"],
            [f"{best} at {where}" if best else "", now],
            [f"{best} at {where}" if best else "", now_short],
            [best, now_short],
            [best],
        ]

    def _shown(self, v: np.ndarray) -> tuple[np.ndarray, Scale | None]:
        factor = DISPLAY_UNITS[self.parameter][2]
        return shown_values(v, factor, self.unit or self.label, db=self.db,
                            power_like=self.parameter in POWER_LIKE)

    # -- drawing ----------------------------------------------------------------------

    def cell_at(self, row: int, col: int) -> tuple[int, ...] | None:
        """The grid cell drawn at a character cell of the content (heat map only)."""
        if self.geometry is None:
            return None
        offset = 1 if self._info_line() else 0
        return self.geometry.cell_at(row - offset, col)

    def _info_line(self) -> str:
        view = self.view
        if view is None:
            return ""
        parts = []
        level = self.slice_level()
        if level is not None:
            axis = view.grid_axes[2]
            coords = view.grid_coords_mm[2]
            parts.append(f"slice {axis} {mm_text(float(coords[level]))} mm "
                         f"({level + 1}/{coords.size})")
        beam = beam_text(view.beam)
        if beam:
            parts.append(beam)
        return " · ".join(parts)

    def build(self, rows: int, cols: int) -> list[Strip]:
        self.geometry = None
        self.point_columns = []
        view = self.view
        if rows < 2 or cols < 12:
            return message_strips("", rows, cols, AXIS)
        if view is None:
            return message_strips("no scan running", rows, cols, AXIS)
        if view.total == 0:
            return message_strips("the scan has no points", rows, cols, AXIS)
        info = self._info_line()
        head = [text_strip([(info, INFO)], cols)] if info and rows >= 4 else []
        body_rows = rows - len(head)
        ndim = len(view.grid_axes)
        if ndim == 1:
            return head + self._line(body_rows, cols)
        if ndim in (2, 3):
            return head + self._heat(body_rows, cols)
        return head + self._table(body_rows, cols)

    def _scale_text(self, scale: Scale | None) -> tuple[str, str]:
        if scale is None:
            return "", ""
        if scale.unit == "dB":
            return f"{scale.hi:.0f}", f"{scale.lo:.0f}"
        return number(scale.hi, 0), "0" if scale.lo == 0 else number(scale.lo, 0)

    def _gridded(self):
        """The view, the shown parameter and failed points on the grid (a point planned
        twice: the later one), the scale, and the maximum's and current point's index."""
        view = self.view
        assert view is not None
        shown, scale = self._shown(self.per_point())
        cells = gridded(view, shown)
        failed = gridded(view, view.failed.astype(float)) > 0
        return view, cells, failed, scale, self.maximum_index(), view.current

    def _line(self, rows: int, cols: int) -> list[Strip]:
        view, cells, failed, scale, top, cur = self._gridded()
        strips, columns = line_plot(
            rows, cols, cells, failed, scale, view.grid_coords_mm[0], view.grid_axes[0],
            current=None if cur is None else int(view.grid_index[cur, 0]),
            maximum=None if top is None else int(view.grid_index[top, 0]),
            scale_text=self._scale_text(scale))
        self.point_columns = columns
        return strips

    def _heat(self, rows: int, cols: int) -> list[Strip]:
        view, cells, failed, scale, top, cur = self._gridded()
        current = None if cur is None else tuple(int(k) for k in view.grid_index[cur])
        maximum = None if top is None else tuple(int(k) for k in view.grid_index[top])
        level = self.slice_level()
        if level is not None:
            cells, failed = cells[:, :, level], failed[:, :, level]
            top = self.maximum_index(view.grid_index[:, 2] == level)
            maximum = None if top is None else tuple(int(k) for k in view.grid_index[top])
            current = current if current is not None and current[2] == level else None
        strips, geometry = heat_map(
            rows, cols, cells, failed, scale,
            (view.grid_coords_mm[0], view.grid_coords_mm[1]),
            (view.grid_axes[0], view.grid_axes[1]),
            current=None if current is None else (current[0], current[1]),
            maximum=None if maximum is None else (maximum[0], maximum[1]),
            scale_text=self._scale_text(scale))
        self.geometry = geometry
        return strips

    def _table(self, rows: int, cols: int) -> list[Strip]:
        """The latest points, newest first, with the point being measured on top."""
        view = self.view
        assert view is not None
        v = self.per_point()
        shown, _ = self._shown(v)
        axes = view.target_axes
        unit = "dB" if self.db else self.unit
        texts = [[mm_text(float(x)) for x in row] for row in view.targets_mm]
        w = max([len(a) + 3 for a in axes] + [len(t) for row in texts for t in row]) + 1
        head = "    # " + "".join(f"{a + ' mm':>{w}}" for a in axes) + \
            f"  {self.label} {unit}".rstrip()
        lines: list[list[tuple[str, str | None]]] = [[(head, f"bold {AXIS}")]]
        done = np.flatnonzero(np.isfinite(v) | view.failed)
        order = list(done[::-1])
        cur = view.current
        if cur is not None:
            order = [cur] + [i for i in order if i != cur]
        top = self.maximum_index()
        for i in order[:max(0, rows - 1)]:
            mark = CURRENT_GLYPH if i == cur else MAX_GLYPH if i == top else \
                FAILED_GLYPH if view.failed[i] else " "
            where = "".join(f"{t:>{w}}" for t in texts[i])
            if view.failed[i]:
                value = "failed"
            elif np.isfinite(shown[i]):
                value = f"{shown[i]:.1f}" if self.db else number(shown[i], 0)
            else:
                value = "measuring" if i == cur else "-"
            lines.append([(f"{mark}{i + 1:>4} {where}  {value}", None)])
        return text_strips(lines, rows, cols)
