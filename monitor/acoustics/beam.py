"""Beam figures of a scan: the grid of its points, the position of the maximum, beam widths
at -3, -6, -12 and -20 dB along each scanned axis, and, along the beam axis, the derated
pulse-intensity integral, the depth of its maximum and the mechanical index there.

Pure functions on numpy arrays: coordinates in mm, pressure in Pa, PII in J m^-2,
frequency in Hz. Nothing here reads a file, a clock or a global.

How to call it
--------------
A scan hands over its points column by column. ``coords_mm`` maps each stage axis name to
the coordinate of every point, mm (``{"x": [...], "y": [...], "z": [...]}``, all of one
length); ``values`` holds the mapped parameter of each point (p_r in Pa, say), NaN for a
point not done yet or failed (any non-finite value counts as no value). Pass every point
of the plan from the start, NaN until measured, so that the grid has its final extent
while the scan runs, and call again as points arrive; a partial scan never raises, its
figures say what is missing::

    figures = beam_figures(coords_mm, p_r)                       # maximum and widths
    figures = beam_figures(coords_mm, p_r, pii_j_per_m2=pii, p_r_pa=p_r, f_awf_hz=f_awf,
                           source_distance_mm=15.0)              # and the axial figures
    figures.width("x", -6.0)       # BeamWidth: width_mm, or None and a reason
    figures.as_dict()              # strict JSON (None for a figure not found)

The points are gridded by :func:`.scangrid.grid_points` (re-exported here, with
:class:`ScanGrid`, :class:`ScanShape` and :func:`coordinate_columns`): its docstring says
how jittery readings are grouped (``tolerance_mm``) and how points not reached yet may be
given. The pieces, for a caller that needs one of them:

- :func:`grid_points` ``(coords_mm, values, *, tolerance_mm=0.005) -> ScanGrid``.
- :func:`maximum_position` ``(grid) -> Maximum``.
- :func:`beam_widths` ``(grid, *, levels_db=BEAM_LEVELS_DB, quantity=Quantity.PRESSURE,
  maximum=None) -> tuple[BeamWidth, ...]``.
- :func:`axial_figures` ``(grid, pii_j_per_m2, p_r_pa, f_awf_hz, *, source_distance_mm,
  beam_axis="z", db_per_cm_mhz=0.3) -> AxialFigures``.
- :func:`derating_factor` ``(depth_mm, f_awf_hz, *, db_per_cm_mhz=0.3)``: the pressure
  factor of IEC 62359 (square it for PII and intensity).

Choices made, and why:

- The maximum is the largest measured value; its position is refined, along each axis
  where both neighbours have values, to the vertex of the parabola through the three
  points (values in linear units, so a point at or below zero is usable).
- A width's level is taken below the value at the maximum, the largest sample of the
  profile (not an interpolated peak): on a coarse scan whose points straddle the peak the
  level is taken from a lower top and the width reads wider. Crossings are interpolated
  linearly in the amplitude between the two points bracketing the level, not in dB: it
  needs no logarithm of the bracketing values, so a point at or below zero (the noise
  floor after baseline removal, far out in the skirt) brackets a crossing like any other;
  interpolation in dB would be exact for a Gaussian beam but undefined there, and both
  err by order step^2 on a smooth beam. Each crossing is searched outward from the
  maximum and the first one counts, so a side lobe rising above the level beyond it is
  not mistaken for the edge of the beam; a profile that does not reach the level within
  the scan, or reaches a point without a value first, gives no width (None, with a reason
  such as "profile does not fall to -20 dB within the scan on the -x side"), never an
  extrapolated one.
- The axial figures take the line along the beam axis through the largest derated PII of
  the grid (for a line scan, the line itself); the depth of a point is its beam-axis
  coordinate plus ``source_distance_mm``, the distance of that axis's origin from the
  source face, so the beam axis must increase away from the source.

The definitions used are stated in :data:`MAXIMUM_DEFINITION`, :data:`WIDTH_DEFINITION`,
:data:`DERATING_DEFINITION` and :data:`MI_DEFINITION`, and carried in
:meth:`BeamFigures.as_dict`, so that a display and a stored record can say them.

References
----------
IEC 62359, Ultrasonics - Field characterization - Test methods for the determination of
thermal and mechanical indices (derating by 0.3 dB cm^-1 MHz^-1, the depth of the
maximum derated pulse-intensity integral, the mechanical index).
IEC 62127-1, Ultrasonics - Hydrophones - Part 1 (beam widths at a level below the
maximum of a profile through it; pulse-intensity integral).
"""

from __future__ import annotations

import enum
import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike

from ..errors import ScanDataError
from .pulse import mechanical_index
from .scangrid import (
    DEFAULT_TOLERANCE_MM,
    ScanGrid,
    ScanShape,
    as_number,
    coordinate_columns,
    grid_points,
    line_through,
    per_point,
)

__all__ = [
    "BEAM_LEVELS_DB", "DEFAULT_TOLERANCE_MM", "DERATING_DB_PER_CM_MHZ", "DERATING_DEFINITION",
    "MAXIMUM_DEFINITION", "MI_DEFINITION", "WIDTH_DEFINITION", "AxialFigures", "BeamFigures",
    "BeamWidth", "Maximum", "Quantity", "ScanGrid", "ScanShape", "axial_figures",
    "beam_figures", "beam_widths", "coordinate_columns", "derating_factor", "grid_points",
    "maximum_position",
]

BEAM_LEVELS_DB: tuple[float, ...] = (-3.0, -6.0, -12.0, -20.0)
"""The levels of the beam widths, dB below the maximum of the profile."""

DERATING_DB_PER_CM_MHZ = 0.3
"""Derating coefficient of IEC 62359, dB cm^-1 MHz^-1."""

MAXIMUM_DEFINITION = (
    "the grid point with the largest value (the first in index order on a tie); along each "
    "scanned axis whose two neighbouring points have values, refined to the vertex of the "
    "parabola through the three points (values in linear units, not dB)")

WIDTH_DEFINITION = (
    "full width between the two crossings of the level L dB below the maximum (its largest "
    "sample) of the profile through it along the axis (20 log10 of a pressure, 10 log10 of an "
    "intensity or PII); each crossing is searched outward from the maximum, so a side lobe "
    "beyond the first crossing is not counted, and interpolated linearly in the amplitude "
    "(not in dB) between the two points bracketing it; a crossing not reached within the "
    "scan, or after a point without a value, is not found (never extrapolated)")

DERATING_DEFINITION = (
    "IEC 62359 derating: p_alpha(z) = p(z) 10^(-a f z / 20) and "
    "PII_alpha(z) = PII(z) 10^(-a f z / 10), a the derating coefficient in dB cm^-1 MHz^-1 "
    "(0.3 in IEC 62359), f the acoustic working frequency of each point in MHz, z its "
    "distance from the source face in cm (the beam-axis coordinate plus the source distance, "
    "the distance of the axis origin from the source face)")

MI_DEFINITION = (
    "IEC 62359: MI = p_r,alpha(z_pii,alpha) / (C_MI sqrt(f_awf)), p_r,alpha in MPa, f_awf "
    "in MHz, C_MI = 1 MPa MHz^-1/2, at the depth z_pii,alpha of the maximum of the derated "
    "PII along the beam axis (the parabolic vertex of the largest point and its two "
    "neighbours), p_r,alpha and f_awf interpolated linearly there between the two points "
    "bracketing it")


class Quantity(enum.StrEnum):
    """How a mapped parameter's level is taken in dB."""

    PRESSURE = "pressure"
    """A pressure-like (root-power) quantity, p_r, p_c, MI: level 20 log10 of the ratio."""
    INTENSITY = "intensity"
    """A power quantity, PII, I_pa: level 10 log10 of the ratio (so a -6 dB width of PII
    is, for a pulse of one shape across the beam, the -6 dB width of its pressure)."""


def _amplitude_ratio(level_db: float, quantity: Quantity) -> float:
    return 10.0 ** (level_db / (20.0 if quantity is Quantity.PRESSURE else 10.0))


@dataclass(frozen=True)
class Maximum:
    """The position of the largest value of a scan (see :data:`MAXIMUM_DEFINITION`).

    ``position_mm`` has every axis: the scanned ones refined where ``refined`` says so
    (else at the grid point), the fixed ones where they stay. All None or empty, with a
    ``reason``, when no point has a value yet.
    """

    value: float | None
    index: tuple[int, ...] | None
    grid_mm: dict[str, float]
    position_mm: dict[str, float]
    refined: dict[str, bool]
    reason: str | None = None


@dataclass(frozen=True)
class BeamWidth:
    """The full width at ``level_db`` along ``axis`` (see :data:`WIDTH_DEFINITION`), mm.

    ``minus_mm`` and ``plus_mm`` are the crossings on the side of decreasing and
    increasing coordinate; a crossing not found is None and ``reason`` says why (both
    sides, joined by "; "); ``width_mm`` is None unless both are found.
    """

    axis: str
    level_db: float
    width_mm: float | None
    minus_mm: float | None
    plus_mm: float | None
    reason: str | None = None


@dataclass(frozen=True, eq=False)
class AxialFigures:
    """Derated figures along the beam axis (see :data:`DERATING_DEFINITION` and
    :data:`MI_DEFINITION`).

    The line is the one along ``beam_axis`` through the cell of the largest derated PII
    (through the first cells while none is done); ``through_mm`` gives its other axes.
    ``depth_mm`` is the distance of each point of the line from the source face, mm;
    ``pii_derated_j_per_m2`` and ``p_r_derated_pa`` are NaN where a point has no PII,
    p_r or f_awf yet. ``depth_of_max_mm`` is z_pii,alpha (refined when ``refined``);
    ``pii_derated_max_j_per_m2`` is the largest derated PII measured;
    ``p_r_derated_pa_at_max`` and ``f_awf_hz_at_max`` are interpolated at z_pii,alpha and
    give ``mechanical_index``. Scalars are None, with a ``reason``, when they cannot be had.
    """

    beam_axis: str
    source_distance_mm: float
    db_per_cm_mhz: float
    through_mm: dict[str, float]
    depth_mm: np.ndarray
    pii_derated_j_per_m2: np.ndarray
    p_r_derated_pa: np.ndarray
    depth_of_max_mm: float | None
    refined: bool
    pii_derated_max_j_per_m2: float | None
    p_r_derated_pa_at_max: float | None
    f_awf_hz_at_max: float | None
    mechanical_index: float | None
    reason: str | None = None

    def as_dict(self) -> dict:
        return {
            "beam_axis": self.beam_axis,
            "source_distance_mm": _json_float(self.source_distance_mm),
            "derating_db_per_cm_mhz": _json_float(self.db_per_cm_mhz),
            "through_mm": {k: _json_float(v) for k, v in self.through_mm.items()},
            "depth_mm": _json_list(self.depth_mm),
            "pii_derated_j_per_m2": _json_list(self.pii_derated_j_per_m2),
            "p_r_derated_pa": _json_list(self.p_r_derated_pa),
            "depth_of_max_mm": _json_float(self.depth_of_max_mm),
            "depth_of_max_refined": self.refined,
            "pii_derated_max_j_per_m2": _json_float(self.pii_derated_max_j_per_m2),
            "p_r_derated_pa_at_max": _json_float(self.p_r_derated_pa_at_max),
            "f_awf_hz_at_max": _json_float(self.f_awf_hz_at_max),
            "mechanical_index": _json_float(self.mechanical_index),
            "reason": self.reason,
        }


@dataclass(frozen=True, eq=False)
class BeamFigures:
    """Everything :func:`beam_figures` finds in one call.

    ``axial`` is None when no axial inputs were given. ``grid`` is the gridded map (not
    in :meth:`as_dict`; an export takes it from :func:`grid_points`).
    """

    grid: ScanGrid
    quantity: Quantity
    levels_db: tuple[float, ...]
    maximum: Maximum
    widths: tuple[BeamWidth, ...]
    axial: AxialFigures | None = None

    @property
    def definitions(self) -> dict[str, str]:
        """The definitions used, by figure."""
        return {"maximum": MAXIMUM_DEFINITION, "widths": WIDTH_DEFINITION,
                "derating": DERATING_DEFINITION, "mechanical_index": MI_DEFINITION}

    @property
    def cells_with_value(self) -> int:
        """How many cells of the grid have a value."""
        return int(np.count_nonzero(self.grid.counts))

    def width(self, axis: str, level_db: float) -> BeamWidth | None:
        """The width along ``axis`` at ``level_db``; None if that axis or level was not
        asked for (an axis not scanned, say)."""
        for w in self.widths:
            if w.axis == axis and w.level_db == level_db:
                return w
        return None

    def as_dict(self) -> dict:
        """The figures as strict-JSON values: floats finite or None, lists for arrays (the
        axial line), enums by value; the grid itself is left out."""
        m = self.maximum
        return {
            "shape": self.grid.shape.value,
            "scanned_axes": list(self.grid.axes),
            "fixed_mm": {k: _json_float(v) for k, v in self.grid.fixed_mm.items()},
            "grid_sizes": [int(c.size) for c in self.grid.coordinates_mm],
            "points": self.grid.points,
            "cells_with_value": self.cells_with_value,
            "quantity": self.quantity.value,
            "levels_db": list(self.levels_db),
            "maximum": {
                "value": _json_float(m.value),
                "index": None if m.index is None else list(m.index),
                "grid_mm": {k: _json_float(v) for k, v in m.grid_mm.items()},
                "position_mm": {k: _json_float(v) for k, v in m.position_mm.items()},
                "refined": dict(m.refined),
                "reason": m.reason,
            },
            "widths": [{"axis": w.axis, "level_db": float(w.level_db),
                        "width_mm": _json_float(w.width_mm),
                        "minus_mm": _json_float(w.minus_mm),
                        "plus_mm": _json_float(w.plus_mm), "reason": w.reason}
                       for w in self.widths],
            "axial": None if self.axial is None else self.axial.as_dict(),
            "definitions": self.definitions,
        }


# --- maximum ----------------------------------------------------------------------------

def maximum_position(grid: ScanGrid) -> Maximum:
    """Position of the largest value (see :data:`MAXIMUM_DEFINITION`)."""
    v = grid.values
    if not np.isfinite(v).any():
        return Maximum(value=None, index=None, grid_mm={}, position_mm={}, refined={},
                       reason="no point has a value yet")
    index = tuple(int(i) for i in np.unravel_index(int(np.nanargmax(v)), v.shape))
    grid_mm: dict[str, float] = {}
    position: dict[str, float] = {}
    refined: dict[str, bool] = {}
    for k, axis in enumerate(grid.axes):
        x = grid.coordinates_mm[k]
        grid_mm[axis] = float(x[index[k]])
        vertex = _vertex(x, grid.profile(k, index), index[k])
        refined[axis] = vertex is not None
        position[axis] = grid_mm[axis] if vertex is None else vertex
    position.update(grid.fixed_mm)
    return Maximum(value=float(v[index]), index=index, grid_mm=grid_mm,
                   position_mm=position, refined=refined)


def _vertex(x: np.ndarray, y: np.ndarray, i: int) -> float | None:
    """Vertex of the parabola through points i-1, i, i+1 (i the largest); None at an edge,
    beside a point without a value, or on a flat top."""
    if i == 0 or i == y.size - 1 or not (np.isfinite(y[i - 1]) and np.isfinite(y[i + 1])):
        return None
    d0, d2 = x[i] - x[i - 1], x[i + 1] - x[i]
    f0, f1, f2 = y[i - 1], y[i], y[i + 1]
    den = d0 * (f1 - f2) + d2 * (f1 - f0)
    if not den > 0.0:
        return None
    num = d0 * d0 * (f1 - f2) - d2 * d2 * (f1 - f0)
    return float(min(max(x[i] - 0.5 * num / den, x[i - 1]), x[i + 1]))


# --- widths -----------------------------------------------------------------------------

def beam_widths(grid: ScanGrid, *, levels_db: Sequence[float] = BEAM_LEVELS_DB,
                quantity: Quantity = Quantity.PRESSURE,
                maximum: Maximum | None = None) -> tuple[BeamWidth, ...]:
    """Full widths at each level along each scanned axis, through the maximum (see
    :data:`WIDTH_DEFINITION`), axis by axis, levels in the order given.

    Parameters
    ----------
    levels_db : sequence of float, keyword-only
        Levels below the maximum, dB, each negative.
    quantity : Quantity, keyword-only
        How the values' level is taken: 20 log10 (pressure) or 10 log10 (intensity).
    maximum : Maximum, optional
        :func:`maximum_position` of the same grid, when the caller has it already.
    """
    levels = _levels(levels_db)
    quantity = _quantity(quantity)
    if maximum is None:
        maximum = maximum_position(grid)
    out: list[BeamWidth] = []
    for k, axis in enumerate(grid.axes):
        for level in levels:
            out.append(_width(grid, k, axis, level, quantity, maximum))
    return tuple(out)


def _quantity(quantity: Quantity | str) -> Quantity:
    try:
        return Quantity(quantity)
    except ValueError as err:
        known = ", ".join(q.value for q in Quantity)
        raise ScanDataError(f"quantity must be one of {known}, not {quantity!r}") from err


def _levels(levels_db: Sequence[float]) -> tuple[float, ...]:
    levels = tuple(as_number(v, "a beam-width level") for v in levels_db)
    for v in levels:
        if not (math.isfinite(v) and v < 0.0):
            raise ScanDataError(f"a beam-width level must be a negative number of dB, "
                                f"not {v!r}")
    return levels


def _width(grid: ScanGrid, k: int, axis: str, level: float, quantity: Quantity,
           maximum: Maximum) -> BeamWidth:
    if maximum.index is None or maximum.value is None:
        return BeamWidth(axis, level, None, None, None, reason=maximum.reason)
    if not maximum.value > 0.0:
        return BeamWidth(axis, level, None, None, None,
                         reason=f"the maximum ({maximum.value:g}) is not positive, so no "
                                f"level in dB can be taken below it")
    x = grid.coordinates_mm[k]
    y = grid.profile(k, maximum.index)
    threshold = maximum.value * _amplitude_ratio(level, quantity)
    centre = maximum.index[k]
    reasons: list[str] = []

    def side(step: int, name: str) -> float | None:
        at, hole = _crossing(x, y, centre, step, threshold)
        if at is None and hole is None:
            reasons.append(f"profile does not fall to {level:g} dB within the scan on the "
                           f"{name} side")
        elif at is None:
            reasons.append(f"no value yet at {axis} = {hole:.3f} mm on the {name} side, "
                           f"before the profile falls to {level:g} dB")
        return at

    minus = side(-1, f"-{axis}")
    plus = side(1, f"+{axis}")
    width = plus - minus if minus is not None and plus is not None else None
    return BeamWidth(axis, level, width, minus, plus,
                     reason="; ".join(reasons) if reasons else None)


def _crossing(x: np.ndarray, y: np.ndarray, i: int, step: int,
              threshold: float) -> tuple[float | None, float | None]:
    """Where ``y`` first falls to ``threshold`` going from ``i`` by ``step``, linearly
    interpolated, and None; or None and the coordinate of the point without a value that
    stopped the search; or None, None when the search reached the end of the scan."""
    j = i
    while 0 <= j + step < y.size:
        k = j + step
        if not np.isfinite(y[k]):
            return None, float(x[k])
        if y[k] <= threshold:
            frac = (y[j] - threshold) / (y[j] - y[k])
            return float(x[j] + frac * (x[k] - x[j])), None
        j = k
    return None, None


# --- axial figures ----------------------------------------------------------------------

def derating_factor(depth_mm: ArrayLike, f_awf_hz: ArrayLike, *,
                    db_per_cm_mhz: float = DERATING_DB_PER_CM_MHZ) -> np.ndarray:
    """The pressure factor of IEC 62359 derating, ``10^(-a f z / 20)``, with ``z`` the
    distance from the source face (given in mm, taken in cm) and ``f`` in MHz (given in
    Hz); square it for PII and intensity. Example: 3 MHz at 50 mm, 0.3 dB cm^-1 MHz^-1:
    4.5 dB, factor 0.5957."""
    loss_db = (db_per_cm_mhz * (np.asarray(depth_mm, dtype=float) * 0.1)
               * (np.asarray(f_awf_hz, dtype=float) * 1e-6))
    return np.asarray(10.0 ** (-loss_db / 20.0))


def axial_figures(grid: ScanGrid, pii_j_per_m2: ArrayLike, p_r_pa: ArrayLike,
                  f_awf_hz: ArrayLike, *, source_distance_mm: float, beam_axis: str = "z",
                  db_per_cm_mhz: float = DERATING_DB_PER_CM_MHZ) -> AxialFigures:
    """Derated PII along the beam axis, the depth of its maximum and MI there.

    Parameters
    ----------
    grid : ScanGrid
        The scan's grid (:func:`grid_points` of the same points; its values are not used).
    pii_j_per_m2, p_r_pa : array_like
        PII (J m^-2) and peak-rarefactional pressure (Pa) of each point, NaN until done.
    f_awf_hz : array_like or float
        Acoustic working frequency of each point (or one for all), Hz.
    source_distance_mm : float, keyword-only
        Distance of the beam axis's origin (coordinate 0) from the source face, mm: the
        depth of a point is its beam-axis coordinate plus this, so the axis must point
        away from the source.
    beam_axis : str, keyword-only
        The stage axis along the beam (default ``"z"``).
    db_per_cm_mhz : float, keyword-only
        Derating coefficient (IEC 62359: 0.3 dB cm^-1 MHz^-1).

    Raises
    ------
    ScanDataError
        An axis the points do not have, a depth behind the source face, a frequency that
        is zero or negative, a source distance or coefficient that is not a number.
    """
    distance = as_number(source_distance_mm, "source_distance_mm")
    coefficient = as_number(db_per_cm_mhz, "db_per_cm_mhz")
    if not math.isfinite(distance):
        raise ScanDataError(f"source_distance_mm must be a finite number of mm, not "
                            f"{source_distance_mm!r}")
    if not (math.isfinite(coefficient) and coefficient >= 0.0):
        raise ScanDataError(f"db_per_cm_mhz must be a number of dB cm^-1 MHz^-1 at least "
                            f"0, not {db_per_cm_mhz!r}")
    if beam_axis not in grid.axes and beam_axis not in grid.fixed_mm:
        known = ", ".join((*grid.axes, *grid.fixed_mm))
        raise ScanDataError(f"beam axis {beam_axis!r} is not an axis of the points "
                            f"({known})")
    f_points = per_point(f_awf_hz, grid.points, "f_awf_hz")
    low = np.flatnonzero(f_points <= 0.0)
    if low.size:
        raise ScanDataError(f"f_awf_hz of point {int(low[0])} is {f_points[low[0]]:g}, "
                            f"not a positive frequency")
    pii = grid.fill(pii_j_per_m2)
    p_r = grid.fill(p_r_pa)
    f = grid.fill(f_points)
    empty = np.empty(0)

    def nothing(reason: str, through: dict[str, float], depth: np.ndarray = empty,
                line_pii: np.ndarray = empty, line_p: np.ndarray = empty) -> AxialFigures:
        return AxialFigures(beam_axis, distance, coefficient, through, depth, line_pii,
                            line_p, None, False, None, None, None, None, reason=reason)

    if beam_axis not in grid.axes:
        return nothing(f"the beam axis {beam_axis} is not scanned (it stays at "
                       f"{grid.fixed_mm[beam_axis]:.3f} mm)", dict(grid.fixed_mm))
    k = grid.axes.index(beam_axis)
    depth = grid.coordinates_mm[k] + distance
    if depth[0] < 0.0:
        raise ScanDataError(
            f"{beam_axis} = {grid.coordinates_mm[k][0]:.3f} mm with source_distance_mm = "
            f"{distance:g} is {-depth[0]:.3f} mm behind the source face: the depth is the "
            f"{beam_axis} coordinate plus the distance of its origin from the face, so "
            f"{beam_axis} must increase away from the source")
    shape = [1] * pii.ndim
    shape[k] = depth.size
    factor = derating_factor(depth.reshape(shape), f, db_per_cm_mhz=coefficient)
    done = np.isfinite(pii) & np.isfinite(p_r) & np.isfinite(f)
    pii_alpha = np.where(done, pii * factor ** 2, math.nan)
    p_r_alpha = np.where(done, p_r * factor, math.nan)
    if not done.any():
        first = (0,) * pii.ndim
        return nothing("no point has PII, p_r and f_awf yet",
                       _through(grid, k, first), depth, line_through(pii_alpha, k, first),
                       line_through(p_r_alpha, k, first))
    index = tuple(int(i) for i in np.unravel_index(int(np.nanargmax(pii_alpha)),
                                                    pii_alpha.shape))
    line_pii = line_through(pii_alpha, k, index)
    line_p = line_through(p_r_alpha, k, index)
    line_f = line_through(f, k, index)
    i = index[k]
    vertex = _vertex(depth, line_pii, i)
    z = float(depth[i]) if vertex is None else vertex
    j = i if vertex is None or z == depth[i] else (i - 1 if z < depth[i] else i + 1)
    w = 0.0 if j == i else (z - depth[i]) / (depth[j] - depth[i])
    p_at = float(line_p[i] + w * (line_p[j] - line_p[i]))
    f_at = float(line_f[i] + w * (line_f[j] - line_f[i]))
    return AxialFigures(
        beam_axis, distance, coefficient, _through(grid, k, index), depth, line_pii, line_p,
        depth_of_max_mm=z, refined=vertex is not None,
        pii_derated_max_j_per_m2=float(line_pii[i]), p_r_derated_pa_at_max=p_at,
        f_awf_hz_at_max=f_at, mechanical_index=mechanical_index(p_at, f_at))


def _through(grid: ScanGrid, k: int, index: tuple[int, ...]) -> dict[str, float]:
    through = {axis: float(grid.coordinates_mm[m][index[m]])
               for m, axis in enumerate(grid.axes) if m != k}
    through.update(grid.fixed_mm)
    return through


# --- all at once ------------------------------------------------------------------------

def beam_figures(coords_mm: Mapping[str, ArrayLike], values: ArrayLike, *,
                 quantity: Quantity = Quantity.PRESSURE,
                 levels_db: Sequence[float] = BEAM_LEVELS_DB,
                 tolerance_mm: float = DEFAULT_TOLERANCE_MM,
                 pii_j_per_m2: ArrayLike | None = None, p_r_pa: ArrayLike | None = None,
                 f_awf_hz: ArrayLike | None = None, source_distance_mm: float | None = None,
                 beam_axis: str = "z",
                 derating_db_per_cm_mhz: float = DERATING_DB_PER_CM_MHZ) -> BeamFigures:
    """The beam figures of a scan, done or partly done.

    ``coords_mm``, ``values`` and ``tolerance_mm`` as for :func:`grid_points`;
    ``quantity`` and ``levels_db`` as for :func:`beam_widths`. The axial figures
    (:func:`axial_figures`) are computed when ``pii_j_per_m2``, ``p_r_pa``, ``f_awf_hz``
    and ``source_distance_mm`` are all given (per point, like ``values``), and are None
    when none is.

    Raises
    ------
    ScanDataError
        Malformed points or settings (see :func:`grid_points`, :func:`axial_figures`), or
        only some of the axial inputs.
    """
    levels = _levels(levels_db)
    grid = grid_points(coords_mm, values, tolerance_mm=tolerance_mm)
    maximum = maximum_position(grid)
    widths = beam_widths(grid, levels_db=levels, quantity=quantity, maximum=maximum)
    axial_inputs = {"pii_j_per_m2": pii_j_per_m2, "p_r_pa": p_r_pa, "f_awf_hz": f_awf_hz,
                    "source_distance_mm": source_distance_mm}
    missing = [name for name, v in axial_inputs.items() if v is None]
    axial = None
    if (pii_j_per_m2 is not None and p_r_pa is not None and f_awf_hz is not None
            and source_distance_mm is not None):
        axial = axial_figures(grid, pii_j_per_m2, p_r_pa, f_awf_hz,
                              source_distance_mm=source_distance_mm, beam_axis=beam_axis,
                              db_per_cm_mhz=derating_db_per_cm_mhz)
    elif len(missing) < len(axial_inputs):
        raise ScanDataError(f"the axial figures need {', '.join(axial_inputs)}; "
                            f"missing: {', '.join(missing)}")
    return BeamFigures(grid=grid, quantity=_quantity(quantity), levels_db=levels,
                       maximum=maximum, widths=widths, axial=axial)


def _json_float(value: float | None) -> float | None:
    if value is None:
        return None
    v = float(value)
    return v if math.isfinite(v) else None


def _json_list(values: np.ndarray) -> list[float | None]:
    return [_json_float(v) for v in values.tolist()]
