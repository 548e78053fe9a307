"""What the exports hold of a scan (layout 4): the completed points, their axes, the grid
they lie on and the beam figures (:func:`scan_export`), and the HDF5 group that holds them
(:func:`write_scan_group`; the layout is in :mod:`tankside.monitor.record.export`).

The grid covers the whole plan when the plan in the metadata lists its points with their
targets (``ScanPlan.as_dict()``: ``point_axes`` and a row of mm per point), so that points not
yet done are holes; otherwise it is the grid of the completed points alone. A completed
point's own recorded target (``scan_points.target_json``) always wins over the plan's.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ..errors import SessionFileError
from .h5data import h5py_module, number_dataset, string_dataset
from .reader import SessionReader
from .scanpoints import COMBINED_RESULTS, PlanGrid, PointRecord, plan_grid
from .schema import RESULT_UNITS, SCAN_LAYOUT, EventKind, PointStatus
from .store import strict_json

__all__ = ["ScanExport", "scan_export", "has_scan", "require_scan", "no_scan_error",
           "point_done", "write_scan_group", "GRID_FROM_PLAN", "GRID_FROM_POINTS"]

#: ``grid_from``: the grid is that of every point of the plan.
GRID_FROM_PLAN = "plan"
#: ``grid_from``: the plan lists no points the export can read; the grid is that of the
#: completed points only.
GRID_FROM_POINTS = "completed points"


@dataclass(frozen=True)
class ScanExport:
    """A session's scan as the exports write it.

    Attributes
    ----------
    kind : str
        The plan's kind (``line``, ``raster``, ``volume``, ``points``), ``""`` when the
        metadata holds no plan that says.
    points : list of PointRecord
        The completed points (done or failed), by index.
    axes : tuple of str
        Every axis a completed point has a target or a position for, sorted.
    planned : int or None
        Points in the plan, when the plan lists them.
    grid : PlanGrid or None
        The grid of the targets (:func:`~tankside.monitor.record.scanpoints.plan_grid`);
        None when there is none (no axis varies, targets with different axes, too large).
    grid_indices : tuple of int
        The point index of each row of ``grid.index``.
    grid_from : str
        :data:`GRID_FROM_PLAN` or :data:`GRID_FROM_POINTS`.
    beam : dict or None
        The ``beam`` figures of the session's last ``scan-end`` event, when it has them.
    """

    kind: str
    points: list[PointRecord]
    axes: tuple[str, ...]
    planned: int | None
    grid: PlanGrid | None
    grid_indices: tuple[int, ...]
    grid_from: str
    beam: dict | None

    def gridded(self, by_index: dict[int, float], fill: float = math.nan) -> np.ndarray:
        """``by_index`` (point index -> value) on the grid, ``fill`` where none."""
        if self.grid is None:
            raise ValueError("the scan's targets lie on no grid")
        values = np.array([by_index.get(i, fill) for i in self.grid_indices], dtype=float)
        out = self.grid.gridded(values)
        if not math.isnan(fill):
            out[np.isnan(out)] = fill  # cells without a point at all
        return out


def has_scan(reader: SessionReader) -> bool:
    """Whether the session ran a scan: a plan in the metadata, a completed point or a
    trace acquired at a point (never before layout 4)."""
    if reader.layout < SCAN_LAYOUT:
        return False
    return (reader.scan_plan is not None or bool(reader.scan_points())
            or bool(reader.trace_points()))


def no_scan_error(reader: SessionReader, option: str) -> SessionFileError:
    """The error for ``option`` asked of a session that ran no scan (names the file)."""
    return SessionFileError(f"{reader.path}: the session ran no scan (no scan plan, no scan "
                            f"points): nothing to write for {option}")


def require_scan(reader: SessionReader, option: str) -> None:
    """Raise :func:`no_scan_error` when the session ran no scan."""
    if not has_scan(reader):
        raise no_scan_error(reader, option)


def _plan_targets(plan: dict | None) -> dict[int, dict[str, float]] | None:
    """Point index -> target (mm) of every point the plan lists (``ScanPlan.as_dict()``:
    ``point_axes`` names the columns of ``points``, one row of mm per point in visiting
    order, the index being the row's), or None when it lists none that way (each row
    checked)."""
    if plan is None:
        return None
    axes, rows = plan.get("point_axes"), plan.get("points")
    if not (isinstance(axes, list) and axes and all(isinstance(a, str) for a in axes)
            and isinstance(rows, list) and rows):
        return None
    out: dict[int, dict[str, float]] = {}
    for index, row in enumerate(rows):
        if not isinstance(row, list) or len(row) != len(axes):
            return None
        mm = {}
        for axis, value in zip(axes, row, strict=True):
            if isinstance(value, bool) or not isinstance(value, int | float) \
                    or not math.isfinite(value):
                return None
            mm[axis] = float(value)
        out[index] = mm
    return out


def _last_beam(reader: SessionReader) -> dict | None:
    ends = [e for e in reader.events() if e["kind"] == EventKind.SCAN_END]
    if not ends:
        return None
    beam = ends[-1]["detail"].get("beam")
    return beam if isinstance(beam, dict) and beam else None


def scan_export(reader: SessionReader) -> ScanExport | None:
    """The session's scan (see :class:`ScanExport`), or None when it ran none."""
    if not has_scan(reader):
        return None
    plan = reader.scan_plan
    points = reader.scan_points()
    kind = plan.get("kind") if plan is not None else None
    planned = _plan_targets(plan)
    targets = dict(planned or {})
    grid_from = GRID_FROM_PLAN if planned is not None else GRID_FROM_POINTS
    for p in points:
        targets[p.index] = dict(p.target_mm)
    indices = tuple(sorted(targets))
    ordered = [targets[i] for i in indices]
    same_axes = all(set(t) == set(ordered[0]) for t in ordered) if ordered else False
    grid = plan_grid(ordered) if same_axes else None
    axes = sorted({a for p in points for a in (*p.target_mm, *p.position_mm)})
    return ScanExport(kind=kind if isinstance(kind, str) else "", points=points,
                      axes=tuple(axes), planned=None if planned is None else len(planned),
                      grid=grid, grid_indices=indices if grid is not None else (),
                      grid_from=grid_from, beam=_last_beam(reader))


def point_done(p: PointRecord) -> int:
    """1 for a point done, 0 for one failed (the ``done`` grid's values; -1: none)."""
    return 1 if p.status == PointStatus.DONE else 0


def write_scan_group(g, scan: ScanExport) -> None:
    """``/scan``: the completed points, their grid and the beam figures."""
    g.attrs.update({"kind": scan.kind, "points_planned": -1 if scan.planned is None
                    else scan.planned, "points_completed": len(scan.points),
                    "grid_from": scan.grid_from})
    g.attrs["axes"] = np.array(scan.axes, dtype=h5py_module().string_dtype())
    points = scan.points
    p = g.create_group("points")
    number_dataset(p, "point_index", [q.index for q in points], np.int64, "")
    string_dataset(p, "status", [str(q.status) for q in points])
    number_dataset(p, "time_s", [q.time_s for q in points], np.float64)
    for key, attr in (("target", "target_mm"), ("position", "position_mm")):
        for axis in scan.axes:
            number_dataset(p, f"{key}_{axis}_mm", [getattr(q, attr).get(axis, math.nan)
                                             for q in points], np.float64, "mm")
    for c in ("counted", "rejected"):
        number_dataset(p, c, [getattr(q, c) for q in points], np.int64, "")
    for c in ("first_seq", "last_seq"):
        number_dataset(p, c, [-1 if getattr(q, c) is None else getattr(q, c) for q in points],
                 np.int64, "")
    number_dataset(p, "resumed", [int(q.resumed) for q in points], np.int8, "")
    string_dataset(p, "note", [q.note for q in points])
    for name in COMBINED_RESULTS:
        found = [q.results.get(name) for q in points]
        number_dataset(p, f"mean_{name}", [math.nan if c is None else c.mean for c in found],
                 np.float64, RESULT_UNITS[name])
        number_dataset(p, f"spread_{name}", [math.nan if c is None else c.spread for c in found],
                 np.float64, RESULT_UNITS[name])
        number_dataset(p, f"n_{name}", [0 if c is None else c.n for c in found], np.int64, "")
        if any(q.waveform for q in points):      # a mean-waveform scan
            number_dataset(p, f"waveform_{name}", [q.waveform.get(name, math.nan)
                                                   for q in points],
                           np.float64, RESULT_UNITS[name])
    if scan.grid is not None:
        _write_grid(g.create_group("grid"), scan)
    if scan.beam is not None:
        _write_tree(g.create_group("beam"), scan.beam)
        g["beam"].attrs["beam_json"] = strict_json(scan.beam)


def _write_grid(g, scan: ScanExport) -> None:
    grid = scan.grid
    assert grid is not None
    g.attrs["axes"] = np.array(grid.axes, dtype=h5py_module().string_dtype())
    for axis, mm in grid.fixed_mm.items():
        g.attrs[f"fixed_{axis}_mm"] = float(mm)
    scales = []
    for axis, coords in zip(grid.axes, grid.coords_mm, strict=True):
        ds = g.create_dataset(f"{axis}_mm", data=np.asarray(coords, dtype=np.float64))
        ds.attrs["units"] = "mm"
        ds.make_scale(axis)
        scales.append(ds)
    planned = {i: float(i) for i in scan.grid_indices}
    gridded = {"point_index": (scan.gridded(planned, fill=-1.0).astype(np.int64), ""),
               "done": (scan.gridded({q.index: float(point_done(q)) for q in scan.points},
                                     fill=-1.0).astype(np.int8), "")}
    for name in COMBINED_RESULTS:
        for stat in ("mean", "spread"):
            values = {q.index: getattr(q.results[name], stat) for q in scan.points
                      if q.valid and name in q.results}
            gridded[f"{stat}_{name}"] = (scan.gridded(values), RESULT_UNITS[name])
    for key, (data, units) in gridded.items():
        ds = g.create_dataset(key, data=data)
        ds.attrs["units"] = units
        for k, scale in enumerate(scales):
            ds.dims[k].label = grid.axes[k]
            ds.dims[k].attach_scale(scale)


def _write_tree(g, tree: dict) -> None:
    """A JSON object as attributes of ``g``: integers int64, other numbers float64, text as
    strings, true/false as int8 1/0, null as NaN, lists of numbers or of text as arrays,
    nested objects as groups; anything else as its JSON text."""
    h5py = h5py_module()
    for key, value in tree.items():
        name = str(key).replace("/", "_")
        name = "_" if name in ("", ".") else name     # names HDF5 does not take
        if isinstance(value, dict):
            _write_tree(g.create_group(name), value)
        elif isinstance(value, bool):
            g.attrs[name] = np.int8(value)
        elif isinstance(value, int):
            g.attrs[name] = np.int64(value) if -2 ** 63 <= value < 2 ** 63 else float(value)
        elif isinstance(value, float) or value is None:
            g.attrs[name] = np.float64(math.nan if value is None else value)
        elif isinstance(value, str):
            g.attrs[name] = value
        elif isinstance(value, list) and value and all(
                isinstance(v, int | float) and not isinstance(v, bool) or v is None
                for v in value):
            g.attrs[name] = np.array([math.nan if v is None else v for v in value],
                                     dtype=np.float64)
        elif isinstance(value, list) and value and all(isinstance(v, str) for v in value):
            g.attrs[name] = np.array(value, dtype=h5py.string_dtype())
        else:
            g.attrs[name] = strict_json(value)
