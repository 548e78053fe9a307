"""Drawing a scan's values in character cells: a heat map of two axes, a plot of one.

The heat map uses half-cells (``▀`` with its upper colour as foreground and its lower
one as background), so each character cell shows two rows of the grid. Grid cells are
drawn as equal blocks of half-cells when the grid fits the panel; a grid larger than
the panel is decimated by the largest value of the cells under each half-cell, so a
peak never hides. Markers take a whole character cell. Pure functions of arrays and a
size: the widget (``scanmap.py``) picks the values and the texts.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from textual.strip import Strip

from .plotgrid import PlotGrid, to_steps
from .scantext import mm_text

# The colour ramp, lowest first: from slate blue through sea-green and sand to coral.
# Its lowest colour stands clear of the panel's dark background (a done point at the
# floor is not mistaken for a point not done), and its highest is no near-white, so
# the ramp also reads on a light terminal. The value of the maximum and of the current
# point are always given in text as well.
_RAMP_STOPS = ("#3a4f9a", "#2f79b5", "#2a9fa8", "#3fb981", "#8ccb5a", "#d9c84a",
               "#f2a040", "#ee6a3c", "#d8354f")
NLEVELS = 16
AXIS = "#8a9aa6"
LINE = "#6fd3b8"
FAILED_STYLE = "bold #ff6b6b"

MAX_GLYPH = "◆"
CURRENT_GLYPH = "●"
FAILED_GLYPH = "×"

#: The floor of the map in dB re its maximum.
DB_FLOOR = -30.0


def _ramp(stops: tuple[str, ...], n: int) -> tuple[str, ...]:
    rgb = np.array([[int(s[i:i + 2], 16) for i in (1, 3, 5)] for s in stops], dtype=float)
    at = np.linspace(0.0, len(stops) - 1.0, n)
    out = []
    for t in at:
        k = min(int(t), len(stops) - 2)
        c = rgb[k] + (t - k) * (rgb[k + 1] - rgb[k])
        out.append("#" + "".join(f"{int(round(v)):02x}" for v in c))
    return tuple(out)


RAMP = _ramp(_RAMP_STOPS, NLEVELS)


def glyph_style(colour: str | None, glyph_colour: str | None = None) -> str:
    """A marker's style: bold, dark on a light cell and light on a dark one."""
    if colour is None:
        return f"bold {glyph_colour or '#f4f7f8'}"
    r, g, b = (int(colour[i:i + 2], 16) for i in (1, 3, 5))
    # relative luminance weights of ITU-R BT.709 (common practice for contrast)
    light = 0.2126 * r + 0.7152 * g + 0.0722 * b > 128
    return f"bold {'#0b0f12' if light else '#f4f7f8'} on {colour}"


@dataclass(frozen=True)
class Scale:
    """The map's value scale: ``lo`` .. ``hi`` in the unit shown (a display unit or dB)."""

    lo: float
    hi: float
    unit: str

    def levels(self, shown: np.ndarray) -> np.ndarray:
        """Ramp level 0 .. NLEVELS-1 per value; -1 where NaN."""
        shown = np.asarray(shown, dtype=np.float64)
        span = self.hi - self.lo if self.hi > self.lo else 1.0
        lev = np.floor((shown - self.lo) / span * NLEVELS)
        lev = np.clip(np.nan_to_num(lev, nan=-1.0), 0, NLEVELS - 1)
        return np.where(np.isfinite(shown), lev, -1).astype(np.int64)


def shown_values(values_si: np.ndarray, factor: float, unit: str, *, db: bool,
                 power_like: bool) -> tuple[np.ndarray, Scale | None]:
    """The values as shown, and their scale (None while no point has a value).

    Linear: ``values_si * factor`` (the display unit), from 0 (or the lowest value, if
    below) to the largest. dB: re the largest value, ``10 log10`` for a quantity
    proportional to power (PII, intensity) and ``20 log10`` for one proportional to
    amplitude (pressure, MI), so that both give the same dB for the same field (common
    practice); values at or below zero, and below :data:`DB_FLOOR`, sit at the floor.
    """
    v = np.asarray(values_si, dtype=np.float64)
    finite = np.isfinite(v)
    if not finite.any():
        return np.full(v.shape, np.nan), None
    if db:
        top = float(v[finite].max())
        if top <= 0:
            return np.where(finite, DB_FLOOR, np.nan), Scale(DB_FLOOR, 0.0, "dB")
        k = 10.0 if power_like else 20.0
        with np.errstate(divide="ignore", invalid="ignore"):
            shown = k * np.log10(np.where(v > 0, v, 0.0) / top)
        shown = np.where(finite, np.maximum(shown, DB_FLOOR), np.nan)
        return shown, Scale(DB_FLOOR, 0.0, "dB")
    shown = v * factor
    hi = float(shown[finite].max())
    lo = min(0.0, float(shown[finite].min()))
    if hi <= lo:
        hi = lo + 1.0
    return shown, Scale(lo, hi, unit)


class PixelAxis:
    """How ``n`` grid cells lie on ``pixels`` columns (or half-rows) of the screen.

    When they fit, each cell takes ``pixels // n`` of them (the rest is left blank);
    when not, each pixel takes the consecutive cells ``starts[p]`` .. ``starts[p+1]-1``.
    """

    def __init__(self, n: int, pixels: int):
        self.n = max(1, n)
        pixels = max(1, pixels)
        if self.n <= pixels:
            self.per_cell = pixels // self.n
            self.used = self.n * self.per_cell
            self.starts = np.arange(self.n)
        else:
            self.per_cell = 0
            self.used = pixels
            self.starts = (np.arange(pixels) * self.n) // pixels

    def pixel_of(self, cell: int) -> tuple[int, int]:
        """The pixels ``[start, stop)`` a cell is drawn on."""
        if self.per_cell:
            return cell * self.per_cell, (cell + 1) * self.per_cell
        p = int(np.searchsorted(self.starts, cell, side="right")) - 1
        return p, p + 1

    def cell_of(self, pixel: int) -> int | None:
        """The (first) cell drawn on a pixel; None outside the map."""
        if not 0 <= pixel < self.used:
            return None
        if self.per_cell:
            return pixel // self.per_cell
        return int(self.starts[pixel])

    def reduce(self, values: np.ndarray, axis: int) -> np.ndarray:
        """``values`` on the pixels along ``axis``: repeated, or the largest per pixel."""
        if self.per_cell:
            return np.repeat(values, self.per_cell, axis=axis)
        return np.fmax.reduceat(values, self.starts, axis=axis)


@dataclass(frozen=True)
class MapGeometry:
    """Where a heat map lies in its panel's content (rows from the top, columns)."""

    col0: int                 # column of the first pixel column
    row_bottom: int           # character row holding the lowest half-rows
    x: PixelAxis
    y: PixelAxis

    def cell_at(self, row: int, col: int) -> tuple[int, int] | None:
        """The grid cell (i along x, j along y) drawn at a character cell (its upper
        half-row when the cell holds two)."""
        i = self.x.cell_of(col - self.col0)
        j = self.y.cell_of(2 * (self.row_bottom - row) + 1)
        if j is None:
            j = self.y.cell_of(2 * (self.row_bottom - row))
        return None if i is None or j is None else (i, j)

    def char_of(self, cell: tuple[int, int]) -> tuple[int, int]:
        """(row, column) of the character cell a marker of grid cell ``cell`` goes in."""
        xs, xe = self.x.pixel_of(cell[0])
        ys, ye = self.y.pixel_of(cell[1])
        half = (ys + ye - 1) // 2
        return self.row_bottom - half // 2, self.col0 + (xs + xe - 1) // 2


def _ticks(positions: list[int], labels: list[str], lo: int, hi: int,
           name: tuple[int, int] | None = None) -> tuple[list[tuple[int, str]], bool]:
    """Tick labels centred on their positions within columns ``lo .. hi-1``, none
    overlapping: the first and the last always, the axis name's place ``name`` (start,
    stop) if it is free, and every k-th of the others for the smallest k that fits
    (leaving out those that would meet an end or the name).

    Returns the (start column, text) of each label placed, and whether the name fits.
    """
    Span = tuple[int, int, str]

    def span(k: int) -> Span:
        start = max(lo, min(positions[k] - (len(labels[k]) - 1) // 2, hi - len(labels[k])))
        return start, start + len(labels[k]), labels[k]

    def clear(a: Span, taken: list[Span]) -> bool:
        return not any(a[0] - 1 < b[1] and b[0] < a[1] + 1 for b in taken)

    n = len(labels)
    taken = [span(0)]
    if n > 1 and clear(span(n - 1), taken):
        taken.append(span(n - 1))
    named: Span | None = (name[0], name[1], "") if name is not None else None
    name_fits = named is not None and clear(named, taken)
    if name_fits and named is not None:
        taken.append(named)
    # a middle tick that meets an end or the name is left out; one that meets another
    # middle tick calls for a longer stride
    fixed = list(taken)
    for stride in range(1, n):
        middle: list[Span] = []
        for k in range(stride, n - 1, stride):
            if not clear(span(k), fixed):
                continue
            if not clear(span(k), middle):
                break
            middle.append(span(k))
        else:
            taken = fixed + middle
            break
    return [(a, text) for a, _, text in taken if text], name_fits


def heat_map(rows: int, cols: int, shown: np.ndarray, failed: np.ndarray,
             scale: Scale | None, coords_mm: tuple[np.ndarray, np.ndarray],
             axes: tuple[str, str], *, current: tuple[int, int] | None,
             maximum: tuple[int, int] | None,
             scale_text: tuple[str, str]) -> tuple[list[Strip], MapGeometry | None]:
    """A heat map ``rows`` x ``cols`` of ``shown[i, j]`` (i along ``axes[0]``, across;
    j along ``axes[1]``, up), with tick labels in mm, a colour bar and the markers.

    ``failed[i, j]`` marks failed cells; ``scale_text`` is the colour bar's (top,
    bottom) labels; ``scale`` None draws no colours (no point done yet).
    """
    nx, ny = shown.shape
    ylabels = [mm_text(v) for v in coords_mm[1]]
    left = max([len(t) for t in ylabels] + [len(axes[1]), 2]) + 1
    unit = scale.unit if scale is not None else ""
    label_w = max(len(scale_text[0]), len(scale_text[1]), len(unit))
    right = 3 + label_w if scale is not None else 0
    width = cols - left - right
    heat_rows = rows - 1
    if heat_rows < 1 or width < 2:
        return [Strip.blank(cols) for _ in range(rows)], None
    xa, ya = PixelAxis(nx, width), PixelAxis(ny, 2 * heat_rows)
    grid = PlotGrid(rows, cols)
    step0 = 2                                    # the tick row takes steps 0 and 1
    # pixels: rows from the bottom, columns from the left
    img = ya.reduce(xa.reduce(shown, 0), 1).T
    levels = scale.levels(img) if scale is not None else np.full(img.shape, -1)
    grid.image(left, step0, levels, RAMP)
    geometry = MapGeometry(col0=left, row_bottom=rows - 2, x=xa, y=ya)
    # colour bar, hottest at the top of the map's height
    if scale is not None:
        bar = np.floor(np.arange(ya.used) / max(ya.used, 1) * NLEVELS).astype(np.int64)
        bar_col = cols - right + 1
        grid.image(bar_col, step0, bar[:, None], RAMP)
        top_row = rows - 2 - (ya.used - 1) // 2
        grid.label(top_row, bar_col + 2, scale_text[0], AXIS)
        grid.label(rows - 2, bar_col + 2, scale_text[1], AXIS)
        if rows - 2 - top_row >= 2:
            grid.label((top_row + rows - 2) // 2, bar_col + 2, unit, f"bold {AXIS}")
    # y ticks (left): first and last, then others a row apart; the name between
    y_rows = [geometry.char_of((0, j))[0] for j in range(ny)]
    name_row = (y_rows[0] + y_rows[-1]) // 2
    used_rows: set[int] = set()
    for j in list(dict.fromkeys([0, ny - 1])) + list(range(1, ny - 1)):
        r = y_rows[j]
        if r in used_rows or (0 < j < ny - 1 and (r == name_row
                                                  or used_rows & {r - 1, r + 1})):
            continue
        used_rows.add(r)
        grid.label(r, left - 1 - len(ylabels[j]), ylabels[j], AXIS)
    if name_row not in used_rows:
        grid.label(name_row, left - 1 - len(axes[1]), axes[1], f"bold {AXIS}")
    # x ticks and the x axis name in the tick row; "mm" in its corner
    xlabels = [mm_text(v) for v in coords_mm[0]]
    x_cols = [geometry.char_of((i, 0))[1] for i in range(nx)]
    name_col = left + xa.used // 2 - len(axes[0]) // 2
    ticks, name_fits = _ticks(x_cols, xlabels, left, cols - right,
                              (name_col, name_col + len(axes[0])))
    for start, text in ticks:
        grid.label(rows - 1, start, text, AXIS)
    if name_fits:
        grid.label(rows - 1, name_col, axes[0], f"bold {AXIS}")
    grid.label(rows - 1, 0, "mm", AXIS)
    # markers: failed cells, the maximum, then the current point over it
    colour_at = _colour_at(levels)
    for i, j in zip(*np.nonzero(failed), strict=True):
        r, c = geometry.char_of((int(i), int(j)))
        grid.label(r, c, FAILED_GLYPH, FAILED_STYLE)
    for cell, glyph in ((maximum, MAX_GLYPH), (current, CURRENT_GLYPH)):
        if cell is None:
            continue
        r, c = geometry.char_of(cell)
        ys, _ = ya.pixel_of(cell[1])
        grid.label(r, c, glyph, glyph_style(colour_at(ys, c - left)))
    return grid.to_strips(), geometry


def _colour_at(levels: np.ndarray):
    def colour(pixel_row: int, pixel_col: int) -> str | None:
        if 0 <= pixel_row < levels.shape[0] and 0 <= pixel_col < levels.shape[1]:
            lev = int(levels[pixel_row, pixel_col])
            return RAMP[lev] if lev >= 0 else None
        return None
    return colour


def line_plot(rows: int, cols: int, shown: np.ndarray, failed: np.ndarray,
              scale: Scale | None, coords_mm: np.ndarray, axis: str, *,
              current: int | None, maximum: int | None,
              scale_text: tuple[str, str]) -> tuple[list[Strip], list[int]]:
    """The values of a line scan against position: ``shown[i]`` at ``coords_mm[i]``.

    Consecutive done points are joined; a point not done breaks the line. Returns the
    strips and the column of each point.
    """
    unit = scale.unit if scale is not None else ""
    left = max(len(scale_text[0]), len(scale_text[1]), len(unit), 2) + 1
    width = cols - left
    plot_rows = rows - 1
    n = shown.size
    if plot_rows < 1 or width < 2 or n == 0:
        return [Strip.blank(cols) for _ in range(rows)], []
    grid = PlotGrid(rows, cols)
    nsteps = 2 * plot_rows
    step0 = 2
    x0, x1 = float(coords_mm[0]), float(coords_mm[-1])
    if x1 > x0:
        point_cols = np.rint((coords_mm - x0) / (x1 - x0) * (width - 1)).astype(int) + left
    else:
        point_cols = np.full(n, left + (width - 1) // 2)
    if scale is not None:
        steps = to_steps(shown, scale.lo, scale.hi, nsteps)
        finite = np.isfinite(shown)
        # runs of consecutive done points, joined column by column
        k = 0
        while k < n:
            if not finite[k]:
                k += 1
                continue
            e = k
            while e + 1 < n and finite[e + 1]:
                e += 1
            cs = np.arange(point_cols[k], point_cols[e] + 1)
            ys = np.interp(cs, point_cols[k:e + 1], shown[k:e + 1])
            st = to_steps(ys, scale.lo, scale.hi, nsteps)
            prev = np.concatenate(([st[0]], st[:-1]))
            grid.spans(int(cs[0]), np.minimum(prev, st) + step0, np.maximum(prev, st) + step0,
                       LINE)
            k = e + 1
        grid.label(0, left - 1 - len(scale_text[0]), scale_text[0], AXIS)
        grid.label(rows - 2, left - 1 - len(scale_text[1]), scale_text[1], AXIS)
        if plot_rows >= 3:
            grid.label((rows - 2) // 2, left - 1 - len(unit), unit, f"bold {AXIS}")
    else:
        steps = np.full(n, -1)
    labels = [mm_text(v) for v in coords_mm]
    name_col = left + width // 2 - len(axis) // 2
    ticks, name_fits = _ticks([int(c) for c in point_cols], labels, left, cols,
                              (name_col, name_col + len(axis)))
    for start, text in ticks:
        grid.label(rows - 1, start, text, AXIS)
    if name_fits:
        grid.label(rows - 1, name_col, axis, f"bold {AXIS}")
    grid.label(rows - 1, 0, "mm", AXIS)
    for i in np.flatnonzero(failed):
        grid.label(rows - 2, int(point_cols[i]), FAILED_GLYPH, FAILED_STYLE)

    def row_of(i: int) -> int:
        s = int(steps[i])
        return rows - 2 if s < 0 else rows - 2 - s // 2

    for index, glyph in ((maximum, MAX_GLYPH), (current, CURRENT_GLYPH)):
        if index is not None and 0 <= index < n:
            grid.label(row_of(index), int(point_cols[index]), glyph, glyph_style(None, LINE
                       if glyph == MAX_GLYPH else None))
    return grid.to_strips(), [int(c) for c in point_cols]
