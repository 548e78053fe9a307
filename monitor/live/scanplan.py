"""Scan plans: the points a scan visits, what it does at each, and the dry run's summary.

A plan is read from a TOML file of its own (:func:`load_plan`) or from the bench file's
``[scan]`` table (the bench file parses it, :attr:`BenchConfig.scan
<tankside.monitor.live.benchfile.BenchConfig>`; the same keys, relative paths resolved
against the bench file's folder). Every point is checked against the bench file's soft
limits (``[stage.limits]``) when the plan is loaded, so a plan that would leave them is
refused before the stage moves at all. An example plan file (the scene is invented)::

    # A raster across the beam, 40 mm from the transducer.
    kind = "raster"            # line (1 axis), raster (2), volume (3) or points (a CSV)
    settle_s = 0.3             # wait after each move before acquiring, s
    traces = 8                 # traces acquired at each point
    combine = "parameters"     # or "mean-waveform"; see Combine
    speed_mm_s = 5.0           # optional: the stage's speed, for the time estimate only
    serpentine = true          # raster, volume: the fast axis turns back at every row
    fixed = { z = 40.0 }       # optional: axes not scanned, moved here first (mm)
    beam_axis = "z"            # optional: the stage axis along the beam (default z),
                               # increasing away from the source
    source_distance_mm = 10.0  # optional: how far that axis's 0 is from the source face,
                               # mm; with it a scan along the beam gives the derated PII,
                               # the depth of its maximum and the MI there

    [[axes]]                   # the first [[axes]] is the fast one (changes every point)
    name = "x"
    start_mm = -6.0
    stop_mm = 6.0
    step_mm = 0.5

    [[axes]]                   # the next one steps once per row, a third once per level
    name = "y"
    start_mm = -6.0
    stop_mm = 6.0
    step_mm = 0.5

A list of points instead of ``[[axes]]``::

    kind = "points"
    file = "points.csv"        # relative to the plan file (to the bench file for [scan])
    settle_s = 0.5
    traces = 16

where ``points.csv`` has a header naming its axis columns (mm), one point per line in
the order they are visited, and optionally the columns ``settle_s`` and ``traces`` that
override the plan's values for their row (an empty cell keeps the plan's value); blank
lines and lines starting with ``#`` are skipped::

    x,y,z,traces
    0.0,0.0,30.0,
    0.0,0.0,40.0,32
    1.5,0.0,40.0,

Rules (each breach is a :class:`~tankside.monitor.errors.ScanPlanError` naming the file
and the key, point or line; a point outside the soft limits is its subclass
:class:`~tankside.monitor.errors.PlanOutsideLimitsError`):

- ``step_mm`` is a size, above 0; the direction runs from ``start_mm`` to ``stop_mm``
  (``start_mm = 5``, ``stop_mm = -5`` steps downward). A step that does not divide the
  span ends at the last point not beyond ``stop_mm``, and the plan says so in its
  :attr:`ScanPlan.notes` (and the dry run prints it). ``start_mm = stop_mm`` is one point.
- Positions are rounded to 1 nm (1e-6 mm), far below any stage's resolution, so that
  ``-6 + 24 * 0.5`` is exactly the ``stop_mm`` written and a point at a soft limit is
  not refused for a round-off.
- Axes the plan neither scans nor fixes stay where the stage is when the scan starts
  (they are not in the points' positions, so a move leaves them alone). A fixed axis is
  part of every point's position. An axis both scanned and fixed is refused.
- In a volume the serpentine applies to each level alike: every level starts with its
  first row, so every level has the same pattern of points.
- At most :data:`MAX_POINTS` points, :data:`MAX_TRACES` traces a point and a settle time
  of at most :data:`MAX_SETTLE_S`.

Point indices count from 0 in the order the points are visited.

API for the scan runner and the ``scan`` command:

- ``load_plan(path, *, limits) -> ScanPlan``: read a plan file, check every point.
- ``plan_from_table(table, *, source, base_dir, limits, where="") -> ScanPlan``: the
  same from a parsed table (the bench file's ``[scan]``, with ``where="[scan] "``).
- ``check_limits(plan, limits, *, source="") -> None``: check again (a resumed scan
  against today's bench file); raises PlanOutsideLimitsError naming the point.
- ``ScanPlan.as_dict() -> dict`` (strict JSON: no NaN, only str keys) and
  ``ScanPlan.from_dict(d) -> ScanPlan``, which rebuilds the identical plan.
- ``summarise_plan(plan, *, start_mm=None, trace_rate_hz=20.0,
  default_speed_mm_s=DEFAULT_SPEED_MM_S, show=5) -> PlanSummary``; its ``lines()``
  and ``text()`` are what ``--dry-run`` prints.

The plan knows nothing of the stage's own axes: limits may name an axis the stage lacks,
which only the connected stage can tell; :attr:`ScanPlan.moved_axes` is what to compare.
"""

from __future__ import annotations

import csv
import enum
import io
import json
import math
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from ..errors import PlanOutsideLimitsError, ScanPlanError
from .tomlfile import read_toml

MAX_POINTS = 100_000
MAX_TRACES = 10_000
MAX_SETTLE_S = 600.0
DEFAULT_SPEED_MM_S = 5.0
"""Speed of the time estimate when the plan gives none, mm/s: a cautious guess for a
lab positioning stage, not a measured value."""
DEFAULT_TRACE_RATE_HZ = 20.0
POSITION_DECIMALS = 6          # mm: positions rounded to 1 nm
FORMAT = 1                     # of as_dict()

_RATIO_SLACK = 1e-9            # a span within this fraction of a step of a whole count
_OVERRIDE_COLUMNS = ("settle_s", "traces")
_PLAN_KEYS = ("kind", "settle_s", "traces", "combine", "speed_mm_s", "serpentine", "fixed",
              "beam_axis", "source_distance_mm",
              "axes", "file")
_AXIS_KEYS = ("name", "start_mm", "stop_mm", "step_mm")


class PlanKind(enum.StrEnum):
    """The shape of a plan; the value is the plan file's ``kind``."""

    LINE = "line"          # one axis
    RASTER = "raster"      # two axes, the first fast
    VOLUME = "volume"      # three axes, the first fast, the last slowest
    POINTS = "points"      # a CSV of points


_AXES_OF_KIND = {PlanKind.LINE: 1, PlanKind.RASTER: 2, PlanKind.VOLUME: 3}


class Combine(enum.StrEnum):
    """How a point's traces are combined; the value is the plan file's ``combine``."""

    PARAMETERS = "parameters"
    """Each trace converted; each parameter averaged, with its spread (the sample
    standard deviation, ddof = 1). The default."""
    MEAN_WAVEFORM = "mean-waveform"
    """As PARAMETERS, and also the mean of the traces' waveforms converted once."""


@dataclass(frozen=True, slots=True)
class ScanPoint:
    """One point: its index (from 0, in visiting order), its position (axis -> mm: the
    scanned and fixed axes), the settle time after the move (s) and the traces to
    acquire there."""

    index: int
    position_mm: dict[str, float]
    settle_s: float
    traces: int


@dataclass(frozen=True)
class ScanPlan:
    """A checked scan plan.

    Attributes
    ----------
    kind : PlanKind
    points : tuple of ScanPoint
        In visiting order; ``points[i].index == i``.
    axes : tuple of str
        The scanned axes: fast first (line, raster, volume), or the CSV's axis columns.
    fixed_mm : dict
        Axes held at one position for the whole scan, mm (also in every point).
    settle_s, traces : float, int
        The plan's settle time (s) and traces a point; a CSV row may override them, so
        the runner reads each point's own.
    combine : Combine
    speed_mm_s : float or None
        The stage speed the plan gives for the time estimate, mm/s.
    serpentine : bool
    source : str
        Where the plan was read: the plan file, or ``"BENCH.toml [scan]"``.
    text : str
        The plan as written: the plan file's text verbatim, or for a ``[scan]`` table the
        table as JSON (the bench file itself is recorded with the session).
    points_source, points_text : str or None
        The CSV of a points plan (its resolved path, its text verbatim).
    notes : tuple of str
        What the user may not expect (a step that does not reach ``stop_mm``).
    """

    kind: PlanKind
    points: tuple[ScanPoint, ...]
    axes: tuple[str, ...]
    fixed_mm: dict[str, float]
    settle_s: float
    traces: int
    combine: Combine = Combine.PARAMETERS
    speed_mm_s: float | None = None
    serpentine: bool = False
    source: str = ""
    text: str = ""
    points_source: str | None = None
    points_text: str | None = None
    notes: tuple[str, ...] = ()
    beam_axis: str = "z"
    source_distance_mm: float | None = None

    @property
    def moved_axes(self) -> tuple[str, ...]:
        """Every axis a point's position names: the scanned ones, then the fixed ones."""
        return (*self.axes, *(a for a in self.fixed_mm if a not in self.axes))

    def as_dict(self) -> dict[str, Any]:
        """The plan as strict JSON (see :meth:`from_dict`), for the session's metadata.

        Points are stored, not regenerated, so a resumed scan visits exactly what was
        planned even if the CSV changed since."""
        axes = self.moved_axes
        settles = [p.settle_s for p in self.points]
        traces = [p.traces for p in self.points]
        return {
            "format": FORMAT,
            "kind": self.kind.value,
            "axes": list(self.axes),
            "fixed_mm": dict(self.fixed_mm),
            "settle_s": self.settle_s,
            "traces": self.traces,
            "combine": self.combine.value,
            "speed_mm_s": self.speed_mm_s,
            "serpentine": self.serpentine,
            "source": self.source,
            "text": self.text,
            "points_source": self.points_source,
            "points_text": self.points_text,
            "notes": list(self.notes),
            "beam_axis": self.beam_axis,
            "source_distance_mm": self.source_distance_mm,
            "point_axes": list(axes),
            "points": [[p.position_mm[a] for a in axes] for p in self.points],
            # per point only where a CSV row overrides the plan's value
            "point_settle_s": None if all(s == self.settle_s for s in settles) else settles,
            "point_traces": None if all(n == self.traces for n in traces) else traces,
        }

    @classmethod
    def from_dict(cls, data: Any) -> ScanPlan:
        """Rebuild a plan from :meth:`as_dict` (after JSON); checks what it reads.

        Raises
        ------
        ScanPlanError
            Not a stored plan of this format, or a value of the wrong kind.
        """
        where = "stored scan plan"
        if not isinstance(data, dict) or data.get("format") != FORMAT:
            raise ScanPlanError(f"{where}: not a scan plan of format {FORMAT}")
        try:
            kind = PlanKind(data["kind"])
            combine = Combine(data["combine"])
            axes = tuple(_stored_str(a, where, "axes") for a in data["axes"])
            point_axes = [_stored_str(a, where, "point_axes") for a in data["point_axes"]]
            fixed = {_stored_str(a, where, "fixed_mm"): _stored_number(v, where, "fixed_mm")
                     for a, v in data["fixed_mm"].items()}
            settle_s = _stored_number(data["settle_s"], where, "settle_s")
            traces = data["traces"]
            if type(traces) is not int:
                raise ScanPlanError(f"{where}: traces {traces!r} is not a count")
            rows = data["points"]
            settles = data["point_settle_s"] or [settle_s] * len(rows)
            counts = data["point_traces"] or [traces] * len(rows)
            if not (len(settles) == len(counts) == len(rows)):
                raise ScanPlanError(f"{where}: per-point lists of unequal lengths")
            points = []
            width = len(point_axes)
            for i, (row, s, n) in enumerate(zip(rows, settles, counts, strict=True)):
                # type() rather than isinstance: a bool is no coordinate (and this is the
                # inner loop of up to MAX_POINTS points)
                if len(row) != width or not all(type(v) is float or type(v) is int
                                                for v in row):
                    raise ScanPlanError(f"{where}: point {i}: expected {width} coordinates "
                                        f"(mm), got {row!r}")
                if type(n) is not int:
                    raise ScanPlanError(f"{where}: point {i}: traces {n!r} is not a count")
                position = dict(zip(point_axes, map(float, row), strict=True))
                if not all(map(math.isfinite, position.values())):
                    raise ScanPlanError(f"{where}: point {i}: a coordinate is not finite")
                points.append(ScanPoint(i, position, _stored_number(s, where, f"point {i}"),
                                        n))
            speed = data["speed_mm_s"]
            distance = data.get("source_distance_mm")
            plan = cls(beam_axis=_stored_str(data.get("beam_axis", "z"), where, "beam_axis"),
                       source_distance_mm=None if distance is None else _stored_number(
                           distance, where, "source_distance_mm"),
                       kind=kind, points=tuple(points), axes=axes, fixed_mm=fixed,
                       settle_s=settle_s, traces=traces, combine=combine,
                       speed_mm_s=None if speed is None else _stored_number(
                           speed, where, "speed_mm_s"),
                       serpentine=bool(data["serpentine"]), source=str(data["source"]),
                       text=str(data["text"]),
                       points_source=_stored_optional(data["points_source"]),
                       points_text=_stored_optional(data["points_text"]),
                       notes=tuple(str(n) for n in data["notes"]))
        except (KeyError, TypeError, ValueError, AttributeError) as err:
            raise ScanPlanError(f"{where}: {type(err).__name__}: {err}") from err
        return plan


def _stored_str(value: Any, where: str, key: str) -> str:
    if not isinstance(value, str):
        raise ScanPlanError(f"{where}: {key}: {value!r} is not a name")
    return value


def _stored_number(value: Any, where: str, key: str) -> float:
    if isinstance(value, bool) or not isinstance(value, int | float) \
            or not math.isfinite(value):
        raise ScanPlanError(f"{where}: {key}: {value!r} is not a finite number")
    return float(value)


def _stored_optional(value: Any) -> str | None:
    return None if value is None else str(value)


# -- loading ------------------------------------------------------------------------

def load_plan(path: str | Path, *, limits: dict[str, tuple[float, float]]) -> ScanPlan:
    """Read a plan file (TOML) and check every point against the soft limits.

    Parameters
    ----------
    path : str or Path
        The plan file; a points CSV is found relative to its folder.
    limits : dict
        The bench file's soft limits, axis -> (low, high) in mm
        (:attr:`StageConfig.limits <tankside.monitor.live.benchfile.StageConfig>`).

    Raises
    ------
    ScanPlanError
        Unreadable file, bad TOML, a missing, unknown or bad key, a bad CSV; the message
        names the file and the key (or the CSV's line).
    PlanOutsideLimitsError
        A point outside the limits, or an axis without limits; names the point.
    """
    path = Path(path)
    source = str(path)
    text, table = read_toml(path, "scan plan file", ScanPlanError)
    return _parse(table, source=source, base_dir=path.resolve().parent, limits=limits,
                  where="", text=text)


def plan_from_table(table: Any, *, source: str, base_dir: Path,
                    limits: dict[str, tuple[float, float]], where: str = "") -> ScanPlan:
    """A plan from a parsed table (the bench file's ``[scan]``: ``where="[scan] "``).

    ``source`` is the file named in errors, ``base_dir`` the folder a CSV is relative
    to. Raises as :func:`load_plan`."""
    if not isinstance(table, dict):
        raise _error(source, where.strip() or "plan", "must be a table")
    text = json.dumps(table, sort_keys=True, default=str)
    return _parse(table, source=source, base_dir=Path(base_dir), limits=limits, where=where,
                  text=text)


def _error(source: str, key: str, problem: str,
           cls: type[ScanPlanError] = ScanPlanError) -> ScanPlanError:
    err = cls(f"{source}: {key}: {problem}")
    err.key = key
    return err


def _number(value: Any, source: str, key: str) -> float:
    if isinstance(value, bool) or not isinstance(value, int | float):
        raise _error(source, key, f"expected a number, got {value!r}")
    if not math.isfinite(value):
        raise _error(source, key, f"expected a finite number, got {value!r}")
    return float(value)


def _count(value: Any, source: str, key: str) -> int:
    if isinstance(value, bool) or not isinstance(value, int):
        raise _error(source, key, f"expected a whole number, got {value!r}")
    if not 1 <= value <= MAX_TRACES:
        raise _error(source, key, f"{value} traces a point: expected 1 to {MAX_TRACES}")
    return value


def _settle(value: Any, source: str, key: str) -> float:
    s = _number(value, source, key)
    if not 0.0 <= s <= MAX_SETTLE_S:
        raise _error(source, key, f"{s:g} s: expected 0 to {MAX_SETTLE_S:g} s")
    return s


def _axis_name(value: Any, source: str, key: str) -> str:
    if not (isinstance(value, str) and value.isidentifier() and value.isascii()):
        raise _error(source, key, f"an axis name must be a plain word, got {value!r}")
    return value


def _parse(table: dict, *, source: str, base_dir: Path,
           limits: dict[str, tuple[float, float]], where: str, text: str) -> ScanPlan:
    for key in table:
        if key not in _PLAN_KEYS:
            raise _error(source, f"{where}{key}",
                         f"unknown key (expected one of {', '.join(_PLAN_KEYS)})")
    for key in ("kind", "settle_s", "traces"):
        if key not in table:
            raise _error(source, f"{where}{key}", "missing")
    try:
        kind = PlanKind(table["kind"])
    except ValueError as err:
        raise _error(source, f"{where}kind", f"expected one of "
                     f"{', '.join(k.value for k in PlanKind)}, got {table['kind']!r}") from err
    settle_s = _settle(table["settle_s"], source, f"{where}settle_s")
    traces = _count(table["traces"], source, f"{where}traces")
    try:
        combine = Combine(table.get("combine", Combine.PARAMETERS.value))
    except ValueError as err:
        raise _error(source, f"{where}combine", f"expected one of "
                     f"{', '.join(c.value for c in Combine)}, got {table['combine']!r}") \
            from err
    speed = None
    if "speed_mm_s" in table:
        speed = _number(table["speed_mm_s"], source, f"{where}speed_mm_s")
        if speed <= 0:
            raise _error(source, f"{where}speed_mm_s", "must be above 0 mm/s")
    beam_axis = _axis_name(table.get("beam_axis", "z"), source, f"{where}beam_axis")
    distance = None
    if "source_distance_mm" in table:
        distance = _number(table["source_distance_mm"], source, f"{where}source_distance_mm")
        if distance < 0:
            raise _error(source, f"{where}source_distance_mm", "must be 0 mm or more (the "
                         "distance of the beam axis's 0 from the source face)")
    serpentine = table.get("serpentine", False)
    if not isinstance(serpentine, bool):
        raise _error(source, f"{where}serpentine", f"expected true or false, got "
                     f"{serpentine!r}")
    if serpentine and kind not in (PlanKind.RASTER, PlanKind.VOLUME):
        raise _error(source, f"{where}serpentine", "applies to a raster or a volume only")
    fixed_table = table.get("fixed", {})
    if not isinstance(fixed_table, dict):
        raise _error(source, f"{where}fixed", "expected a table of axis = position in mm")
    fixed = {}
    for axis, value in fixed_table.items():
        key = f"{where}fixed.{axis}"
        fixed[_axis_name(axis, source, key)] = _round(_number(value, source, key))

    notes: list[str] = []
    points_source = points_text = None
    if kind is PlanKind.POINTS:
        if "axes" in table:
            raise _error(source, f"{where}axes", "a points plan takes its points from a CSV "
                         "file (key file), not [[axes]]")
        if "file" not in table:
            raise _error(source, f"{where}file", "missing: the CSV of the points")
        csv_name = table["file"]
        if not isinstance(csv_name, str) or not csv_name:
            raise _error(source, f"{where}file", f"expected a file name, got {csv_name!r}")
        csv_path = Path(csv_name).expanduser()
        if not csv_path.is_absolute():
            csv_path = (base_dir / csv_path).resolve()
        points_source = str(csv_path)
        axes, points, points_text = _read_points(csv_path, source, f"{where}file", fixed,
                                                 settle_s, traces)
        _check_axes(axes, fixed, limits, source, lambda a: f"{points_source}, column {a}")
    else:
        if "file" in table:
            raise _error(source, f"{where}file", f"a {kind.value} plan takes [[axes]], not "
                         "a file of points")
        axes, values, notes = _read_axes(table.get("axes"), kind, source, where)
        _check_axes(axes, fixed, limits, source,
                    lambda a: f"{where}axes number {axes.index(a) + 1} ({a}) name")
        points = _grid(axes, values, fixed, serpentine, settle_s, traces)
    _check_axes_fixed(fixed, limits, source, where)
    plan = ScanPlan(kind=kind, points=tuple(points), axes=tuple(axes), fixed_mm=fixed,
                    settle_s=settle_s, traces=traces, combine=combine, speed_mm_s=speed,
                    serpentine=serpentine,
                    source=source if not where else f"{source} {where.strip()}",
                    text=text, points_source=points_source, points_text=points_text,
                    notes=tuple(notes), beam_axis=beam_axis, source_distance_mm=distance)
    check_limits(plan, limits, source=source)
    return plan


def _round(mm: float) -> float:
    return round(mm, POSITION_DECIMALS) + 0.0      # + 0.0: no -0.0


def _read_axes(entries: Any, kind: PlanKind, source: str,
               where: str) -> tuple[list[str], list[list[float]], list[str]]:
    """The ``[[axes]]`` tables: names (fast first), each axis's positions, notes."""
    want = _AXES_OF_KIND[kind]
    key = f"{where}axes"
    if entries is None:
        raise _error(source, key, f"missing: a {kind.value} takes {want} [[axes]] table(s)")
    if not isinstance(entries, list) or not all(isinstance(e, dict) for e in entries):
        raise _error(source, key, "expected [[axes]] tables (name, start_mm, stop_mm, "
                     "step_mm)")
    if len(entries) != want:
        raise _error(source, key, f"a {kind.value} takes {want} [[axes]] table(s), got "
                     f"{len(entries)}")
    names: list[str] = []
    values: list[list[float]] = []
    notes: list[str] = []
    total = 1
    for number, entry in enumerate(entries, start=1):
        at = f"{where}axes number {number}"
        for k in entry:
            if k not in _AXIS_KEYS:
                raise _error(source, f"{at} {k}", f"unknown key (expected one of "
                             f"{', '.join(_AXIS_KEYS)})")
        for k in _AXIS_KEYS:
            if k not in entry:
                raise _error(source, f"{at} {k}", "missing")
        name = _axis_name(entry["name"], source, f"{at} name")
        if name in names:
            raise _error(source, f"{at} name", f"axis {name} is scanned twice")
        at = f"{at} ({name})"
        start = _number(entry["start_mm"], source, f"{at} start_mm")
        stop = _number(entry["stop_mm"], source, f"{at} stop_mm")
        step = _number(entry["step_mm"], source, f"{at} step_mm")
        if step <= 0:
            raise _error(source, f"{at} step_mm", f"{step:g} mm: must be above 0 (the "
                         "direction runs from start_mm to stop_mm)")
        ratio = abs(stop - start) / step
        if not ratio < MAX_POINTS:
            raise _error(source, f"{at} step_mm", f"{step:g} mm from {start:g} to "
                         f"{stop:g} mm is more than {MAX_POINTS} points")
        n = math.floor(ratio + _RATIO_SLACK) + 1
        total *= n
        if total > MAX_POINTS:
            raise _error(source, f"{at} step_mm", f"the plan would have more than "
                         f"{MAX_POINTS} points; use a larger step or a smaller span")
        sign = 1.0 if stop >= start else -1.0
        axis_values = [_round(start + sign * k * step) for k in range(n)]
        if not math.isclose(axis_values[-1], stop, rel_tol=0.0, abs_tol=1e-6):
            notes.append(f"{name}: the step {step:g} mm does not divide {start:g} to "
                         f"{stop:g} mm; the last point is {axis_values[-1]:g} mm")
        names.append(name)
        values.append(axis_values)
    return names, values, notes


def _grid(axes: list[str], values: list[list[float]], fixed: dict[str, float],
          serpentine: bool, settle_s: float, traces: int) -> list[ScanPoint]:
    """Points in visiting order: the first axis fastest, the last slowest."""
    fast = values[0]
    back = fast[::-1]
    rows = values[1] if len(values) > 1 else [None]
    levels = values[2] if len(values) > 2 else [None]
    points: list[ScanPoint] = []
    for level in levels:
        for r, row in enumerate(rows):
            line = back if serpentine and r % 2 else fast
            for x in line:
                position = {axes[0]: x}
                if row is not None:
                    position[axes[1]] = row
                if level is not None:
                    position[axes[2]] = level
                position.update(fixed)
                points.append(ScanPoint(len(points), position, settle_s, traces))
    return points


def _read_points(path: Path, source: str, key: str, fixed: dict[str, float],
                 settle_s: float, traces: int) -> tuple[list[str], list[ScanPoint], str]:
    """The CSV of a points plan: its axis columns, its points, its text verbatim."""
    try:
        text = path.read_text(encoding="utf-8-sig")
    except FileNotFoundError as err:
        raise _error(source, key, f"no such file {str(path)!r}") from err
    except (OSError, UnicodeDecodeError) as err:
        raise _error(source, key, f"cannot read {str(path)!r}: {err}") from err
    name = str(path)
    reader = csv.reader(io.StringIO(text))
    header: list[str] | None = None
    points: list[ScanPoint] = []
    for cells in reader:
        line = reader.line_num
        if not cells or not "".join(cells).strip() or cells[0].lstrip().startswith("#"):
            continue
        cells = [c.strip() for c in cells]
        if header is None:
            header = cells
            axes = [c for c in header if c not in _OVERRIDE_COLUMNS]
            for c in header:
                if c not in _OVERRIDE_COLUMNS:
                    _axis_name(c, name, f"line {line}, column {c!r}")
                if header.count(c) > 1:
                    raise _error(name, f"line {line}", f"column {c} is given twice")
            if not axes:
                raise _error(name, f"line {line}", "the header names no axis column "
                             f"(expected axis names such as x,y,z; got {','.join(header)})")
            for a in axes:
                if a in fixed:
                    raise _error(source, f"fixed.{a}", f"axis {a} is a column of {name} too")
            continue
        if len(cells) != len(header):
            raise _error(name, f"line {line}", f"expected {len(header)} cells "
                         f"({', '.join(header)}), got {len(cells)}")
        if len(points) >= MAX_POINTS:
            raise _error(name, f"line {line}", f"more than {MAX_POINTS} points")
        position: dict[str, float] = {}
        settle, count = settle_s, traces
        for column, cell in zip(header, cells, strict=True):
            at = f"line {line}, column {column}"
            if column == "settle_s":
                if cell:
                    settle = _settle(_cell_number(cell, name, at, "s"), name, at)
            elif column == "traces":
                if cell:
                    try:
                        value: Any = int(cell)
                    except ValueError:
                        value = cell
                    count = _count(value, name, at)
            else:
                position[column] = _round(_cell_number(cell, name, at, "mm"))
        position.update(fixed)
        points.append(ScanPoint(len(points), position, settle, count))
    if header is None or not points:
        raise _error(name, "the points", "no points (expected a header naming the axis "
                     "columns, then one point per line)")
    return axes, points, text


def _cell_number(cell: str, source: str, at: str, unit: str) -> float:
    if not cell:
        raise _error(source, at, f"empty; expected a number ({unit})")
    try:
        value = float(cell)
    except ValueError:
        raise _error(source, at, f"{cell!r} is not a number ({unit})") from None
    if not math.isfinite(value):
        raise _error(source, at, f"{cell!r} is not a finite number ({unit})")
    return value


# -- soft limits --------------------------------------------------------------------

def _check_axes(axes: list[str], fixed: dict[str, float],
                limits: dict[str, tuple[float, float]], source: str, key_of) -> None:
    if not limits:
        raise _error(source, "[stage.limits]", "a scan needs the bench file's [stage] and "
                     "its soft limits [stage.limits]", PlanOutsideLimitsError)
    for a in axes:
        if a in fixed:
            raise _error(source, key_of(a), f"axis {a} is both scanned and fixed")
        if a not in limits:
            raise _error(source, key_of(a), f"the stage has no axis {a} (the bench file's "
                         f"[stage.limits] has {', '.join(limits)})", PlanOutsideLimitsError)


def _check_axes_fixed(fixed: dict[str, float], limits: dict[str, tuple[float, float]],
                      source: str, where: str) -> None:
    for a, mm in fixed.items():
        if a not in limits:
            raise _error(source, f"{where}fixed.{a}", f"the stage has no axis {a} (the "
                         f"bench file's [stage.limits] has {', '.join(limits)})",
                         PlanOutsideLimitsError)
        low, high = limits[a]
        if not low <= mm <= high:
            raise _error(source, f"{where}fixed.{a}", f"{a} = {mm:g} mm is outside the soft "
                         f"limits {low:g} to {high:g} mm", PlanOutsideLimitsError)


def check_limits(plan: ScanPlan, limits: dict[str, tuple[float, float]], *,
                 source: str = "") -> None:
    """Check every point of ``plan`` against the soft limits (inclusive, as
    :func:`tankside.monitor.live.stage.check_target` does).

    Raises
    ------
    PlanOutsideLimitsError
        The first point (in visiting order) outside them, or on an axis without limits:
        ``point 37 (x = 12.5 mm, y = -3 mm): x is outside the soft limits -10 to 10 mm``.
    """
    prefix = f"{source or plan.source}: "
    for point in plan.points:
        for axis, mm in point.position_mm.items():
            bounds = limits.get(axis)
            if bounds is None:
                problem = (f"the stage has no axis {axis} (the bench file's [stage.limits] "
                           f"has {', '.join(limits) or 'no axis'})")
            elif not bounds[0] <= mm <= bounds[1]:
                problem = (f"{axis} is outside the soft limits {bounds[0]:g} to "
                           f"{bounds[1]:g} mm ([stage.limits])")
            else:
                continue
            err = PlanOutsideLimitsError(f"{prefix}{_point_name(point, plan)}: {problem}; "
                                         "the plan was refused, nothing was moved")
            err.key = f"point {point.index}"
            raise err


def _point_name(point: ScanPoint, plan: ScanPlan) -> str:
    where = ", ".join(f"{a} = {mm:g} mm" for a, mm in point.position_mm.items())
    return f"point {point.index} ({where})"


# -- the dry run --------------------------------------------------------------------

@dataclass(frozen=True)
class PlanSummary:
    """What a scan would do, for ``scan --dry-run``; the times are an estimate.

    Attributes
    ----------
    plan : ScanPlan
    shown : tuple of ScanPoint
        The points listed: all of them, or the first and last ``show``.
    travel_mm : dict
        Per axis, the sum of the absolute steps, mm (from ``start_mm``).
    travel_total_mm : float
        The sum of the straight-line moves between successive points, mm.
    speed_mm_s : float
        The speed of the estimate; ``speed_from_plan`` says whether the plan gave it.
    trace_rate_hz : float
        The digitiser's trace rate of the estimate.
    move_s, settle_s, acquire_s, total_s : float
        The estimate: moves at ``speed_mm_s`` along straight lines (no acceleration),
        the settle times, traces / trace rate; and their sum.
    start_mm : dict
        The start position the travel counts from (empty: from the first point).
    """

    plan: ScanPlan
    shown: tuple[ScanPoint, ...]
    travel_mm: dict[str, float]
    travel_total_mm: float
    speed_mm_s: float
    speed_from_plan: bool
    trace_rate_hz: float
    move_s: float
    settle_s: float
    acquire_s: float
    total_s: float
    start_mm: dict[str, float] = field(default_factory=dict)

    def lines(self) -> list[str]:
        """The summary as lines of text, without line ends."""
        plan = self.plan
        n = len(plan.points)
        out = [f"scan plan {plan.source}: {plan.kind.value}, {n} point{'s' * (n != 1)}"]
        if plan.kind is not PlanKind.POINTS:
            order = ", then ".join(plan.axes)
            out.append(f"  order: {order} (first the fastest)"
                       + (", serpentine" if plan.serpentine else ""))
        else:
            out.append(f"  points from {plan.points_source}")
        if plan.fixed_mm:
            out.append("  fixed: " + ", ".join(f"{a} = {mm:g} mm"
                                               for a, mm in plan.fixed_mm.items()))
        out.append(f"  each point: settle {plan.settle_s:g} s, {plan.traces} "
                   f"trace{'s' * (plan.traces != 1)}, combined as {plan.combine.value}"
                   + (" (some points override these)" if self._overridden() else ""))
        out.extend(self._point_table())
        start = (", ".join(f"{a} = {mm:g} mm" for a, mm in self.start_mm.items())
                 if self.start_mm else "the first point")
        per_axis = ", ".join(f"{a} {mm:.1f} mm" for a, mm in self.travel_mm.items())
        out.append(f"travel from {start}: {per_axis}; {self.travel_total_mm:.1f} mm in all "
                   "(straight-line moves between successive points)")
        speed = (f"at {self.speed_mm_s:g} mm/s" if self.speed_from_plan else
                 f"at {self.speed_mm_s:g} mm/s (a default; the plan gives no speed_mm_s)")
        out.append(f"time, an estimate: moves {_duration(self.move_s)} {speed}, settling "
                   f"{_duration(self.settle_s)}, acquisition {_duration(self.acquire_s)} "
                   f"(at {self.trace_rate_hz:g} traces/s); about {_duration(self.total_s)} "
                   "in all")
        out.append("  (no acceleration, position reads or re-acquired points counted)")
        out.extend(f"note: {note}" for note in plan.notes)
        return out

    def text(self) -> str:
        return "\n".join(self.lines()) + "\n"

    def _overridden(self) -> bool:
        return any(p.settle_s != self.plan.settle_s or p.traces != self.plan.traces
                   for p in self.plan.points)

    def _point_table(self) -> list[str]:
        plan = self.plan
        axes = plan.moved_axes
        extra = self._overridden()
        n = len(plan.points)
        heading = "points" if len(self.shown) == n else \
            f"points (the first and last {len(self.shown) // 2} of {n})"
        head = f"  {'index':>6}" + "".join(f"{a + ' mm':>12}" for a in axes)
        if extra:
            head += f"{'settle s':>10}{'traces':>8}"
        rows = [f"{heading}:", head]
        previous = -1
        for p in self.shown:
            if p.index != previous + 1:
                rows.append(f"  {'...':>6}  ({p.index - previous - 1} points not shown)")
            row = f"  {p.index:>6}" + "".join(f"{p.position_mm[a]:>12.3f}" for a in axes)
            if extra:
                row += f"{p.settle_s:>10g}{p.traces:>8}"
            rows.append(row)
            previous = p.index
        return rows


def _duration(seconds: float) -> str:
    if seconds < 60:
        return f"{seconds:.1f} s"
    whole = round(seconds)
    h, rest = divmod(whole, 3600)
    m, s = divmod(rest, 60)
    return f"{h} h {m:02d} min {s:02d} s" if h else f"{m} min {s:02d} s"


def summarise_plan(plan: ScanPlan, *, start_mm: dict[str, float] | None = None,
                   trace_rate_hz: float = DEFAULT_TRACE_RATE_HZ,
                   default_speed_mm_s: float = DEFAULT_SPEED_MM_S,
                   show: int = 5) -> PlanSummary:
    """The dry run's numbers: travel and an estimate of the time (pure; nothing moves).

    Parameters
    ----------
    plan : ScanPlan
    start_mm : dict, optional
        Where the stage is before the first move, axis -> mm. Axes of the plan it does not
        give (or all, without it) count from the first point: no travel to it.
    trace_rate_hz : float
        The digitiser's trace rate (traces/s) of the acquisition estimate; above 0.
    default_speed_mm_s : float
        The stage speed when the plan gives no ``speed_mm_s``; above 0.
    show : int
        With more than ``4 * show`` points, only the first and last ``show`` are listed.

    Raises
    ------
    ScanPlanError
        A rate or speed that is not a finite number above 0, a start position that is
        not finite.
    """
    for name, value in (("trace_rate_hz", trace_rate_hz),
                        ("default_speed_mm_s", default_speed_mm_s)):
        if not (math.isfinite(value) and value > 0):
            raise ScanPlanError(f"dry run: {name} = {value!r}: expected a number above 0")
    axes = plan.moved_axes
    start = {a: float(mm) for a, mm in (start_mm or {}).items() if a in axes}
    if not all(map(math.isfinite, start.values())):
        raise ScanPlanError(f"dry run: start position {start}: expected finite numbers (mm)")
    current = {a: start.get(a, plan.points[0].position_mm[a]) for a in axes}
    travel = dict.fromkeys(axes, 0.0)
    total = 0.0
    for p in plan.points:
        squared = 0.0
        for a in axes:
            d = abs(p.position_mm[a] - current[a])
            travel[a] += d
            squared += d * d
            current[a] = p.position_mm[a]
        total += math.sqrt(squared)
    speed = plan.speed_mm_s if plan.speed_mm_s is not None else default_speed_mm_s
    move_s = total / speed
    settle_s = math.fsum(p.settle_s for p in plan.points)
    acquire_s = sum(p.traces for p in plan.points) / trace_rate_hz
    n = len(plan.points)
    shown = plan.points if n <= 4 * show else (*plan.points[:show], *plan.points[-show:])
    return PlanSummary(plan=plan, shown=tuple(shown), travel_mm=travel,
                       travel_total_mm=total, speed_mm_s=speed,
                       speed_from_plan=plan.speed_mm_s is not None,
                       trace_rate_hz=float(trace_rate_hz), move_s=move_s, settle_s=settle_s,
                       acquire_s=acquire_s, total_s=move_s + settle_s + acquire_s,
                       start_mm=start)
