"""Scan points on their grid: the scanned axes, the sorted coordinates of each, and the
values of the points in an array with NaN where no point is done.

Pure functions on numpy arrays, coordinates in mm. Used by the beam figures
(:mod:`.beam`) and by anything that wants a scan as coordinate axes and a gridded array
(a map display, an HDF5 export).

A scan hands over its points column by column: ``coords_mm`` maps each stage axis name to
the coordinate of every point, mm (``{"x": [...], "y": [...], "z": [...]}``, all of one
length), and ``values`` holds a parameter of each point, NaN (any non-finite value) for a
point not done yet or failed. :func:`grid_points` returns a :class:`ScanGrid`:
``values[i, j, ...]`` lies at ``coordinates_mm[0][i]``, ``coordinates_mm[1][j]``, ...
(numpy ``indexing="ij"``); :meth:`ScanGrid.fill` grids another parameter of the same
points on the same cells. :func:`coordinate_columns` turns per-point positions
(``[{"x": ..., "y": ...}, ...]``) into columns.

Stage readings jitter by a count or two, so the readings of one axis are grouped: sorted,
a new coordinate starts wherever two neighbouring readings differ by more than
``tolerance_mm``, and each coordinate is the mean of its readings. A group whose readings
spread over more than ``tolerance_mm`` is not a grid line (a drift, a free list of
points): :class:`~tankside.monitor.errors.ScanDataError`. Pass about a tenth of the plan's
smallest step; the default, 0.005 mm, is five counts of a 1 um stage, a tenth of a 0.05 mm
step. An axis with one coordinate is not scanned (``fixed_mm``); one scanned axis is a
line, two a raster, three a volume, more a ScanDataError. Several points in one cell (a
point visited twice) are averaged, their count in ``ScanGrid.counts``; a cell no point
falls in (a free list of points) stays NaN like a point not done. Pass every point of a
plan from the start, NaN until measured, so that the grid has its final extent while the
scan runs; a point given by a position that is NaN (its reading, not known before it is
reached) is left out while its value is NaN too.
"""

from __future__ import annotations

import enum
import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike

from ..errors import ScanDataError

DEFAULT_TOLERANCE_MM = 0.005
"""Readings of one axis closer than this are one coordinate of the grid, mm."""


MAX_SCANNED_AXES = 3
#: The largest grid :func:`grid_points` builds, cells: scattered points in three
#: dimensions would ask for their count cubed.
MAX_CELLS = 4_000_000


class ScanShape(enum.StrEnum):
    """What a scan's points span, by the number of axes whose coordinate varies."""

    POINT = "point"
    """No axis varies (one point, or none yet)."""
    LINE = "line"
    RASTER = "raster"
    VOLUME = "volume"


_SHAPES = (ScanShape.POINT, ScanShape.LINE, ScanShape.RASTER, ScanShape.VOLUME)


@dataclass(frozen=True, eq=False)
class ScanGrid:
    """Points of a scan on their grid.

    ``values`` has one dimension per scanned axis, in the order of ``axes`` (numpy
    ``indexing="ij"``); NaN where no point has a value. ``counts`` is the number of finite
    values averaged in each cell. ``cell_index[n]`` is the cell of point ``n`` (one column
    per scanned axis; -1 for a point left out, ``placed[n]`` False, because its position
    is not known yet). ``fixed_mm`` holds the axes that do not vary, at the mean of their
    readings (NaN when no point has a position).
    """

    axes: tuple[str, ...]
    coordinates_mm: tuple[np.ndarray, ...]
    values: np.ndarray
    counts: np.ndarray
    fixed_mm: dict[str, float]
    cell_index: np.ndarray
    placed: np.ndarray

    @property
    def shape(self) -> ScanShape:
        return _SHAPES[len(self.axes)]

    @property
    def points(self) -> int:
        """How many points were given."""
        return int(self.cell_index.shape[0])

    def fill(self, values: ArrayLike) -> np.ndarray:
        """Another per-point parameter on the same cells (same order as the points given),
        averaged where several points share a cell, NaN where none has a finite value."""
        gridded, _ = _fill(self.cell_index, self.placed, self.values.shape,
                           per_point(values, self.points, "values"))
        return gridded

    def profile(self, axis: int, through: tuple[int, ...]) -> np.ndarray:
        """``values`` along scanned axis number ``axis`` through the cell ``through``."""
        return line_through(self.values, axis, through)



def coordinate_columns(positions_mm: Sequence[Mapping[str, float]]) -> dict[str, np.ndarray]:
    """Per-point positions (``[{"x": 1.0, "y": 2.0}, ...]``, mm) as the columns that
    :func:`grid_points` takes, axes in the order they first appear; an axis missing from
    a point is NaN there (so a point without a value is left out of the grid).

    Raises
    ------
    ScanDataError
        A coordinate that is not a number.
    """
    names: list[str] = []
    for position in positions_mm:
        names.extend(a for a in position if a not in names)
    out = {a: np.full(len(positions_mm), math.nan) for a in names}
    for n, position in enumerate(positions_mm):
        for a, v in position.items():
            out[a][n] = as_number(v, f"coordinate {a} of point {n}")
    return out


def grid_points(coords_mm: Mapping[str, ArrayLike], values: ArrayLike, *,
                tolerance_mm: float = DEFAULT_TOLERANCE_MM) -> ScanGrid:
    """Put a scan's points on their grid.

    Parameters
    ----------
    coords_mm : mapping of str to array_like
        Each stage axis's coordinate of every point, mm; every axis of the stage that
        the points were read on, in the order the grid's axes should take.
    values : array_like
        The parameter of each point; NaN (any non-finite value) where it has none yet.
    tolerance_mm : float, keyword-only
        Readings of one axis closer than this are one grid coordinate, mm (about a tenth
        of the smallest step).

    A point whose coordinates are not all finite (a point not reached, given by its
    reading rather than its planned position) is left out of the grid while it has no
    value either.

    Raises
    ------
    ScanDataError
        No axis, arrays of different lengths, a point with a value but a coordinate that
        is not finite, readings of one grid coordinate spread over more than
        ``tolerance_mm``, more than three scanned axes, a grid of more than
        :data:`MAX_CELLS` cells, a tolerance that is not a positive number.
    """
    tol = _positive(tolerance_mm, "tolerance_mm")
    if not coords_mm:
        raise ScanDataError("scan points need at least one axis coordinate; none given")
    names = tuple(coords_mm)
    columns = [_coordinates(name, coords_mm[name]) for name in names]
    n = columns[0].size
    for name, col in zip(names, columns, strict=True):
        if col.size != n:
            raise ScanDataError(f"axis {name} has {col.size} coordinates, axis {names[0]} "
                                f"{n}: every axis needs one coordinate per point")
    vals = per_point(values, n, "values")
    placed = np.logical_and.reduce([np.isfinite(col) for col in columns])
    axes: list[str] = []
    coords: list[np.ndarray] = []
    labels: list[np.ndarray] = []
    fixed: dict[str, float] = {}
    for name, col in zip(names, columns, strict=True):
        centres, label = _group(name, col[placed], tol)
        if centres.size > 1:
            axes.append(name)
            coords.append(centres)
            labels.append(label)
        else:
            fixed[name] = float(centres[0]) if centres.size else math.nan
    if len(axes) > MAX_SCANNED_AXES:
        raise ScanDataError(f"the points vary along {len(axes)} axes ({', '.join(axes)}); "
                            f"a scan grid has at most {MAX_SCANNED_AXES}")
    cell_index = np.full((n, len(axes)), -1, dtype=np.intp)
    if labels:
        cell_index[placed] = np.stack(labels, axis=1)
    shape = tuple(c.size for c in coords)
    cells = math.prod(shape)
    if cells > MAX_CELLS:
        raise ScanDataError(f"the points span a grid of {' x '.join(map(str, shape))} = "
                            f"{cells} cells, more than {MAX_CELLS}: not a grid (a list of "
                            "scattered points?)")
    gridded, counts = _fill(cell_index, placed, shape, vals, names, columns)
    return ScanGrid(axes=tuple(axes), coordinates_mm=tuple(coords), values=gridded,
                    counts=counts, fixed_mm=fixed, cell_index=cell_index, placed=placed)


def _coordinates(name: str, column: ArrayLike) -> np.ndarray:
    try:
        col = np.asarray(column, dtype=float)
    except (TypeError, ValueError) as err:
        raise ScanDataError(f"coordinates of axis {name} are not numbers: {err}") from err
    if col.ndim != 1:
        raise ScanDataError(f"coordinates of axis {name} must be one number per point "
                            f"(a 1-d array), not an array of shape {col.shape}")
    return col


def per_point(values: ArrayLike, n: int, what: str) -> np.ndarray:
    """``values`` as a float array of one number per point (a single number is repeated
    ``n`` times); ScanDataError naming ``what`` otherwise."""
    try:
        arr = np.asarray(values, dtype=float)
    except (TypeError, ValueError) as err:
        raise ScanDataError(f"{what} are not numbers: {err}") from err
    if arr.ndim == 0:
        return np.full(n, float(arr))
    if arr.shape != (n,):
        raise ScanDataError(f"{what} must be one number per point ({n}), not an array of "
                            f"shape {arr.shape}")
    return arr


def as_number(value: float, name: str) -> float:
    """``float(value)``, or a ScanDataError naming the setting ``name``."""
    try:
        return float(value)
    except (TypeError, ValueError) as err:
        raise ScanDataError(f"{name} must be a number, not {value!r}") from err


def _positive(value: float, name: str) -> float:
    v = as_number(value, name)
    if not (math.isfinite(v) and v > 0.0):
        raise ScanDataError(f"{name} must be a positive number, not {value!r}")
    return v


def _group(name: str, col: np.ndarray, tol: float) -> tuple[np.ndarray, np.ndarray]:
    """Grid coordinates of one axis (mean of each group of readings) and the group of
    each reading."""
    if col.size == 0:
        return np.empty(0), np.empty(0, dtype=np.intp)
    order = np.argsort(col, kind="stable")
    ordered = col[order]
    starts = np.concatenate(([True], np.diff(ordered) > tol))
    group_sorted = np.cumsum(starts) - 1
    label = np.empty(col.size, dtype=np.intp)
    label[order] = group_sorted
    first = np.flatnonzero(starts)
    last = np.append(first[1:] - 1, ordered.size - 1)
    spread = ordered[last] - ordered[first]
    # the mean as the first reading plus the mean offset, so identical readings give
    # exactly their value
    offsets = ordered - ordered[first][group_sorted]
    centres = (ordered[first]
               + np.bincount(group_sorted, weights=offsets) / np.bincount(group_sorted))
    wide = np.flatnonzero(spread > tol * (1.0 + 1e-9))
    if wide.size:
        k = int(wide[0])
        raise ScanDataError(
            f"readings of axis {name} near {centres[k]:.4f} mm spread over "
            f"{spread[k]:.4f} mm, more than the gridding tolerance {tol:g} mm: the points "
            f"are not on a grid along {name} (or the tolerance is too small: about a tenth "
            f"of the step)")
    return centres, label


def _fill(cell_index: np.ndarray, placed: np.ndarray, shape: tuple[int, ...],
          vals: np.ndarray, names: Sequence[str] = (),
          columns: Sequence[np.ndarray] = ()) -> tuple[np.ndarray, np.ndarray]:
    ok = np.isfinite(vals)
    lost = np.flatnonzero(ok & ~placed)
    if lost.size:
        k = int(lost[0])
        where = ", ".join(f"{a} = {c[k]}" for a, c in zip(names, columns, strict=True))
        position = f" ({where})" if where else ""
        raise ScanDataError(f"point {k} has a value ({vals[k]:g}) but no position{position}: "
                            f"a point with a value needs every coordinate")
    size = math.prod(shape)
    flat = np.zeros(cell_index.shape[0], dtype=np.intp)
    if shape:
        flat[placed] = np.ravel_multi_index(tuple(cell_index[placed].T), shape)
    counts = np.bincount(flat[ok], minlength=size)
    total = np.bincount(flat[ok], weights=vals[ok], minlength=size)
    out = np.full(size, math.nan)
    done = counts > 0
    out[done] = total[done] / counts[done]
    return out.reshape(shape), counts.reshape(shape)


def line_through(values: np.ndarray, axis: int, through: tuple[int, ...]) -> np.ndarray:
    """The 1-d line of a gridded array along ``axis`` through the cell ``through``."""
    key: list[int | slice] = list(through)
    key[axis] = slice(None)
    return values[tuple(key)]
