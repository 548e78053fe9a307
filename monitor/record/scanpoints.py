"""A scan point as recorded (layout 4): plain data shared by the live scan, the store,
the reader and the exports, and the one way traces are combined into a point.

A point's traces are combined parameter by parameter: the mean of each result over the
traces that count (converted, not clipped, stage at rest, drive on), with its spread (the
sample standard deviation, ``ddof = 1``; 0 for a single trace) and how many values
went into it. A NaN value (a parameter a trace has no value for) is left out of that
parameter's mean only.
"""

from __future__ import annotations

import math
from collections.abc import Iterable
from dataclasses import dataclass, field

import numpy as np

from ..acoustics.converter import RESULT_FIELDS
from ..acoustics.scangrid import grid_points
from ..errors import ScanDataError
from .schema import PointStatus

#: The results combined per point: every real-valued result field.
COMBINED_RESULTS = tuple(f.name for f in RESULT_FIELDS if f.dtype == "float64")


@dataclass(frozen=True)
class Combined:
    """One parameter over a point's traces."""

    mean: float
    spread: float        # sample standard deviation (ddof = 1); 0 for one value
    n: int

    def as_dict(self) -> dict:
        return {"mean": self.mean, "spread": self.spread, "n": self.n}


def combine_results(flats: Iterable[dict]) -> dict[str, Combined]:
    """Each of :data:`COMBINED_RESULTS` over ``flats`` (``TraceResult.flat()`` dicts).

    Parameters without a single finite value are left out.
    """
    values: dict[str, list[float]] = {name: [] for name in COMBINED_RESULTS}
    for flat in flats:
        for name in COMBINED_RESULTS:
            v = flat.get(name)
            if isinstance(v, int | float) and not isinstance(v, bool) and math.isfinite(v):
                values[name].append(float(v))
    out = {}
    for name, vs in values.items():
        if not vs:
            continue
        arr = np.asarray(vs)
        spread = float(np.std(arr, ddof=1)) if arr.size > 1 else 0.0
        out[name] = Combined(float(np.mean(arr)), spread, int(arr.size))
    return out


@dataclass(frozen=True)
class PointRecord:
    """One completed scan point (a row of ``scan_points``).

    Attributes
    ----------
    index : int
        The point's index in the plan (0-based).
    status : PointStatus
    time_s : float
        When it was completed, s since the Unix epoch.
    target_mm : dict
        Axis -> the plan's position, mm.
    position_mm : dict
        Axis -> mean of the stage readings of the counted traces, mm (the target's
        axes when no reading was had).
    counted, rejected : int
        Traces that count towards the point, and traces acquired at it that did not
        (clipped, moving, drive off, not converted).
    first_seq, last_seq : int or None
        The first and last counted trace.
    resumed : bool
        Completed after the scan was resumed in this file.
    results : dict
        Result name -> :class:`Combined` (empty for a failed point).
    note : str
        Why a point failed, or what was odd about it ("" when nothing).
    waveform : dict
        With ``combine = "mean-waveform"``: the results (``TraceResult.flat()`` values
        of :data:`COMBINED_RESULTS`) of the mean of the counted traces' waveforms,
        converted once; empty otherwise, or when that conversion failed (``note`` says).
    """

    index: int
    status: PointStatus
    time_s: float
    target_mm: dict[str, float]
    position_mm: dict[str, float]
    counted: int
    rejected: int
    first_seq: int | None
    last_seq: int | None
    resumed: bool = False
    results: dict[str, Combined] = field(default_factory=dict)
    note: str = ""
    waveform: dict[str, float] = field(default_factory=dict)

    @property
    def valid(self) -> bool:
        """Mapped: done, with results."""
        return self.status == PointStatus.DONE and bool(self.results)

    def value(self, name: str) -> float:
        """The combined mean of ``name`` (NaN when the point has none)."""
        c = self.results.get(name)
        return c.mean if c is not None and self.valid else float("nan")


@dataclass(frozen=True)
class PlanGrid:
    """The grid a scan's targets lie on.

    Attributes
    ----------
    axes : tuple of str
        The scanned axes (those whose target varies), in the order first seen varying
        in the plan's first two points, then by name.
    coords_mm : tuple of numpy.ndarray
        Per scanned axis, the sorted distinct target coordinates, mm.
    index : numpy.ndarray
        Shape ``(points, len(axes))``: each point's index along each grid axis.
    fixed_mm : dict
        The axes that do not vary, and where they are, mm.
    """

    axes: tuple[str, ...]
    coords_mm: tuple[np.ndarray, ...]
    index: np.ndarray
    fixed_mm: dict[str, float]

    @property
    def shape(self) -> tuple[int, ...]:
        return tuple(c.size for c in self.coords_mm)

    def gridded(self, values: np.ndarray) -> np.ndarray:
        """``values`` (one per point, NaN for none) on the grid; NaN where no point."""
        out = np.full(self.shape, np.nan)
        if len(values):
            out[tuple(self.index.T)] = values
        return out


#: Target coordinates within this of each other are one grid line, mm (a plan's points
#: are exact, rounded to 1 nm; this only absorbs the rounding of a decimal step).
GRID_TOLERANCE_MM = 1e-6


def plan_grid(targets: list[dict[str, float]]) -> PlanGrid | None:
    """The grid of a scan's targets (axis -> mm per point, in plan order), gridded by
    :func:`tankside.monitor.acoustics.scangrid.grid_points`, the fast axis (the one that
    changes between the first two points) first.

    None when there is no point, no axis varies, the points do not all name the same
    axes, or they lie on no grid of at most
    :data:`~tankside.monitor.acoustics.scangrid.MAX_CELLS` cells (a list of scattered
    points in three dimensions, say).
    """
    if not targets:
        return None
    names = list(targets[0])
    if any(set(t) != set(names) for t in targets):
        return None
    fast = [a for a in names if len(targets) > 1
            and abs(targets[1][a] - targets[0][a]) > GRID_TOLERANCE_MM]
    ordered = fast + sorted(a for a in names if a not in fast)
    try:
        grid = grid_points({a: [t[a] for t in targets] for a in ordered},
                           np.zeros(len(targets)), tolerance_mm=GRID_TOLERANCE_MM)
    except ScanDataError:
        return None
    if not grid.axes:
        return None
    return PlanGrid(grid.axes, grid.coordinates_mm, grid.cell_index, dict(grid.fixed_mm))
