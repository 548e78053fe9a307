"""A scan running in a live session: move, settle, acquire, combine, point by point.

Two parts, on two threads:

- :class:`ScanRunner` (a thread of its own) walks the plan: it asks the stage worker to
  move to a point (soft limits checked there, before anything is sent), waits until the
  stage reads back at the target and at rest, waits the settle time, and then opens the
  point to traces. It waits while the drive is off (tankside never switches it on), and
  pauses while the stage is lost or does not arrive, with an event and an alert, going
  on when the cause is gone. It never waits on the digitiser: acquisition runs on
  throughout, and traces acquired while moving or settling are recorded without a point.
- :class:`ScanCollector` (called by the processing thread, in order with the traces)
  decides for each trace whether it counts towards the open point. A trace counts when
  it converted, did not clip, was acquired with the drive on and with the stage at rest
  within ``tolerance_mm`` of the target. A trace with no pulse above its noise counts
  (the beam's edges and nulls are measurements too), even when it could not be
  converted: the point is then a measurement of "nothing above the noise" there,
  recorded done with a note and without the parameters it has no value for. Once the
  point has its traces (the plan's ``traces``) the combined point
  (:func:`..record.scanpoints.combine_results`) is recorded, after the trace that
  completed it. A point whose traces keep being
  refused (``max_rejected``; every trace clipped, say) is recorded as failed, never
  mapped as valid; the clipping rule's auto-range acts on those traces as on any other,
  so a clipped point is normally re-acquired at the new range and counts then.

Passive: where another program moves the stage (a stage profile with query commands
only, or ``tankside scan --passive``), the runner never moves it; it measures each point
of the plan when the stage comes to rest there, and records what it sees between.

Over-pressure: a rule's safe-off stops the stage and the drive (processing does both),
and the scan ends there; the session then stops, and ``tankside scan --resume`` goes on
from the first point not completed once the cause is understood.

Resume: a point is completed when its ``scan_points`` row is written (the primary key
keeps it from being written twice). A scan resumed in the same file skips the completed
points; traces of a point that was being measured when the session died stay in the file
with their ``trace_points`` rows (an attempt that did not complete) and the point is
measured again.
"""

from __future__ import annotations

import math
import threading
import time
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import Any, Protocol

import numpy as np

from ..errors import TanksideError
from ..record.scanpoints import COMBINED_RESULTS, PointRecord, combine_results, plan_grid
from ..record.schema import EventKind, PointStatus
from .actions import RaisedAlert
from .snapshot import FIGURES, ScanView

#: The results a scan's map and beam figures show, per point (the running figures' set):
#: a snapshot carries these, not every combined result, so that it stays small.
MAPPED_RESULTS = tuple(name for name, _, _ in FIGURES)
#: A reading within this of the target is at the target, mm (the simulated stage and
#: most controllers resolve a micrometre; a stall leaves the stage far further off).
TOLERANCE_MM = 0.01
#: How long a move may take beyond its travel at the plan's speed, s.
ARRIVE_MARGIN_S = 10.0
#: A stage read at rest but off the target this long (after as long again for the move
#: to start) has not arrived: stalled, or the move was not taken, s.
STILL_OFF_TARGET_S = 0.5
#: The speed assumed for the arrival timeout when the plan gives none, mm/s.
ASSUMED_SPEED_MM_S = 1.0
#: Refused traces at one point before it is recorded as failed: this many times the
#: traces it needs, and at least :data:`MIN_REJECTED`.
REJECTED_FACTOR = 10
MIN_REJECTED = 50


class Plan(Protocol):
    """What the runner needs of a scan plan (:class:`.scanplan.ScanPlan`): ``points``
    with ``index``, ``position_mm`` (the target), ``settle_s`` and ``traces`` each."""

    kind: Any
    points: Sequence[Any]
    speed_mm_s: float | None


class StageLike(Protocol):
    @property
    def connected(self) -> bool: ...
    def latest(self) -> Any: ...
    def request_move(self, target: dict[str, float]) -> dict[str, float]: ...
    def request_stop(self, cause: str) -> None: ...


@dataclass(frozen=True)
class ScanResume:
    """What a resumed scan takes from its file (:func:`.build.scan_resume`): the points
    completed, the stop record the file had (None: none), the first seq and the first
    point not completed, and the bench configuration it resumes with."""

    completed: tuple[PointRecord, ...]
    previous_stop: dict | None
    first_seq: int
    first_point: int | None
    configuration: dict


@dataclass
class _OpenPoint:
    index: int
    target_mm: dict[str, float]
    from_seq: int
    needed: int
    resumed: bool
    flats: list
    positions: list
    seqs: list
    rejected: int = 0
    quiet: int = 0          # counted traces with no pulse that did not convert
    done: bool = False
    # a mean-waveform plan: the sum of the counted traces' volts, their time step, how
    # many, the largest code step among them, and why no mean was formed
    wave_sum: np.ndarray | None = None
    wave_dt: float = float("nan")
    wave_n: int = 0
    wave_resolution: float = 0.0
    wave_note: str = ""


class ScanCollector:
    """The processing thread's side of a scan: which trace belongs to which point.

    Parameters
    ----------
    plan : Plan
    completed : list of PointRecord
        Points already in the file (a resumed scan); they are mapped and skipped.
    tolerance_mm : float
    max_rejected : int, optional
        Refused traces before a point fails (default from :data:`REJECTED_FACTOR`).
    beam_figures : callable (ScanView) -> dict, optional
        Computes the beam figures shown with the map, after each point.
    convert : callable (volts, dt_s, resolution_v) -> dict, optional
        Converts a waveform (the converter in use, ``TraceResult.flat()``); with it and a
        plan whose ``combine`` is ``mean-waveform``, the mean of each point's counted
        waveforms is converted once (:attr:`PointRecord.waveform`).
    """

    def __init__(self, plan: Plan, *, completed: Sequence[PointRecord] = (),
                 tolerance_mm: float = TOLERANCE_MM, max_rejected: int | None = None,
                 beam_figures: Callable[[ScanView], dict] | None = None,
                 convert: Callable[[np.ndarray, float, float], dict] | None = None):
        self.plan = plan
        self._convert = convert
        self._mean_waveform = (convert is not None
                               and str(getattr(plan, "combine", "")) == "mean-waveform")
        self.tolerance_mm = float(tolerance_mm)
        self._max_rejected = max_rejected
        self._lock = threading.Lock()
        self._open: _OpenPoint | None = None
        self._finished = threading.Condition(self._lock)
        self._beam_figures = beam_figures
        targets = [dict(p.position_mm) for p in plan.points]
        self.total = len(targets)
        axes = tuple(sorted({a for t in targets for a in t}))
        self._target_axes = axes
        self._targets = np.array([[t.get(a, np.nan) for a in axes] for t in targets],
                                 dtype=float).reshape(self.total, len(axes))
        self._grid = plan_grid(targets)
        # copy on write: a point completed replaces these arrays, so a view handed out
        # (a snapshot, in another thread or process) never changes under its reader
        self._values = {name: np.full(self.total, np.nan) for name in MAPPED_RESULTS}
        self._failed = np.zeros(self.total, dtype=bool)
        self._version = 0
        self._view: ScanView | None = None
        self._beam_version = -1
        self.completed: set[int] = set()
        self.current: int | None = None
        self.phase = "waiting"
        self.why = ""
        self._beam: dict = {}
        self._durations: list[float] = []
        self._last_done_mono: float | None = None
        for rec in completed:
            self._take(rec, copy=False)     # nothing handed out yet
        if completed:
            self.refresh_beam()

    # -- the runner's side ----------------------------------------------------------
    def max_rejected(self, needed: int) -> int:
        """Refused traces before a point of ``needed`` traces fails."""
        if self._max_rejected is not None:
            return int(self._max_rejected)
        return max(MIN_REJECTED, REJECTED_FACTOR * int(needed))

    def open_point(self, index: int, target_mm: dict[str, float], from_seq: int, *,
                   needed: int, resumed: bool) -> None:
        """Traces from ``from_seq`` on may count towards point ``index`` (``needed`` of
        them)."""
        with self._lock:
            self._open = _OpenPoint(index, dict(target_mm), int(from_seq), int(needed),
                                    resumed, [], [], [])
            self.phase = "acquiring"
            self._version += 1

    def wait_point(self, timeout_s: float = 0.2) -> bool:
        """Wait up to ``timeout_s`` for the open point to complete; True when it has."""
        with self._lock:
            if self._open is None or self._open.done:
                return True
            self._finished.wait(timeout_s)
            return self._open is None or self._open.done

    def close_point(self) -> None:
        """Stop counting traces (the point is abandoned: a pause, the end)."""
        with self._lock:
            self._open = None

    def set_phase(self, phase: str, why: str = "", current: int | None = None) -> None:
        self.phase, self.why = phase, why
        if current is not None:
            self.current = current
        self._version += 1

    def set_why(self, why: str) -> None:
        self.why = why
        self._version += 1

    def set_current(self, current: int | None) -> None:
        self.current = current
        self._version += 1

    # -- the processing thread's side -----------------------------------------------
    def on_trace(self, seq: int, flat: dict | None, flags: dict,
                 positions_mm: dict[str, float] | None, *,
                 volts: np.ndarray | None = None, dt_s: float = float("nan"),
                 resolution_v: float = 0.0
                 ) -> tuple[tuple[int, bool, str] | None, PointRecord | None]:
        """Judge one trace: its ``trace_points`` entry (None: not at a point) and the
        point it completed (None: none). ``volts`` (with ``dt_s`` and the code step
        ``resolution_v``) are summed for a mean-waveform plan."""
        with self._lock:
            op = self._open
            if op is None or op.done or seq < op.from_seq:
                return None, None
            why = self._why_not(flat, flags, positions_mm, op.target_mm)
            if why:
                op.rejected += 1
                if op.rejected >= self.max_rejected(op.needed):
                    rec = self._finish(op, PointStatus.FAILED,
                                       f"{op.rejected} traces refused, the last: {why}")
                    return (op.index, False, why), rec
                return (op.index, False, why), None
            if flat is not None:
                op.flats.append(flat)
            else:
                op.quiet += 1
            op.positions.append(dict(positions_mm or {}))
            op.seqs.append(seq)
            if self._mean_waveform and volts is not None:
                self._add_waveform(op, volts, dt_s, resolution_v)
            if len(op.seqs) >= op.needed:
                return (op.index, True, ""), self._finish(op, PointStatus.DONE, "")
            return (op.index, True, ""), None

    def _why_not(self, flat, flags, positions_mm, target_mm) -> str:
        if flat is None and not flags.get("no_pulse"):
            return "not converted"
        if flags.get("clipped"):
            return "clipped"
        if flags.get("drive_off"):
            return "drive off"
        if flags.get("stage_moving"):
            return "stage moving"
        if not positions_mm:
            return "no stage position"
        if not self.at(positions_mm, target_mm):
            return "off target"
        return ""

    def at(self, positions_mm: dict[str, float], target_mm: dict[str, float]) -> bool:
        """Every axis of ``target_mm`` read within :attr:`tolerance_mm` of it (an axis
        not read is not there)."""
        return all(abs(positions_mm.get(axis, math.inf) - want) <= self.tolerance_mm
                   for axis, want in target_mm.items())

    @staticmethod
    def _add_waveform(op: _OpenPoint, volts: np.ndarray, dt_s: float,
                      resolution_v: float) -> None:
        v = np.asarray(volts, dtype=float)
        if op.wave_sum is None and not op.wave_note:
            op.wave_sum, op.wave_dt = v.copy(), float(dt_s)
        elif op.wave_sum is not None and (v.shape != op.wave_sum.shape
                                          or not math.isclose(dt_s, op.wave_dt, rel_tol=1e-9)):
            op.wave_sum = None
            op.wave_note = "mean waveform not formed: the traces differ in length or time step"
            return
        elif op.wave_sum is not None:
            op.wave_sum += v
        op.wave_n += 1
        op.wave_resolution = max(op.wave_resolution, float(resolution_v))

    def _waveform_results(self, op: _OpenPoint) -> tuple[dict[str, float], str]:
        if op.wave_sum is None or op.wave_n == 0 or self._convert is None:
            return {}, op.wave_note
        try:
            flat = self._convert(op.wave_sum / op.wave_n, op.wave_dt, op.wave_resolution)
        except (TanksideError, ArithmeticError, ValueError) as err:
            return {}, f"mean waveform not converted: {type(err).__name__}: {err}"
        out = {}
        for name in COMBINED_RESULTS:
            v = flat.get(name)
            if isinstance(v, int | float) and not isinstance(v, bool) and math.isfinite(v):
                out[name] = float(v)
        return out, ""

    def _finish(self, op: _OpenPoint, status: PointStatus, note: str) -> PointRecord:
        results = combine_results(op.flats) if status == PointStatus.DONE else {}
        waveform: dict[str, float] = {}
        if status == PointStatus.DONE and op.quiet:
            note = (f"{op.quiet} of {len(op.seqs)} traces held no pulse above the noise "
                    "(not converted; below the noise floor here)")
        if status == PointStatus.DONE and self._mean_waveform:
            waveform, why = self._waveform_results(op)
            if why:
                note = f"{note}; {why}" if note else why
        if op.positions:
            axes = op.positions[0].keys()
            position = {a: float(np.mean([p[a] for p in op.positions if a in p]))
                        for a in axes}
        else:
            position = dict(op.target_mm)
        rec = PointRecord(index=op.index, status=status, time_s=time.time(),
                          target_mm=dict(op.target_mm), position_mm=position,
                          counted=len(op.seqs), rejected=op.rejected,
                          first_seq=op.seqs[0] if op.seqs else None,
                          last_seq=op.seqs[-1] if op.seqs else None, resumed=op.resumed,
                          results=results, note=note, waveform=waveform)
        op.done = True
        self._take(rec)
        now = time.monotonic()
        if self._last_done_mono is not None:
            self._durations.append(now - self._last_done_mono)
        self._last_done_mono = now
        self._finished.notify_all()
        return rec

    def _take(self, rec: PointRecord, *, copy: bool = True) -> None:
        if not 0 <= rec.index < self.total:
            return
        self.completed.add(rec.index)
        if rec.valid:
            values = {name: v.copy() if copy else v for name, v in self._values.items()}
            for name in values:
                values[name][rec.index] = rec.value(name)
            self._values = values
        elif rec.status == PointStatus.FAILED:
            failed = self._failed.copy() if copy else self._failed
            failed[rec.index] = True
            self._failed = failed
        # (a point done whose traces held no pulse above the noise has no values: blank)
        self._version += 1

    def refresh_beam(self) -> None:
        """Recompute the beam figures from the points so far, if any came since the last
        time. Called by the runner's thread after each point (never by the processing
        thread: on a large grid it takes tens of milliseconds)."""
        if self._beam_figures is None:
            return
        view = self.view(with_beam=False)
        if view.completed == self._beam_version:
            return
        try:
            beam = dict(self._beam_figures(view))
        except (ArithmeticError, ValueError, TanksideError) as err:
            beam = {"error": f"{type(err).__name__}: {err}"}
        self._beam, self._beam_version = beam, view.completed
        self._version += 1

    def mark_started(self) -> None:
        """The clock of the time-left estimate starts (the first move is asked)."""
        self._last_done_mono = time.monotonic()

    # -- the display's side ---------------------------------------------------------
    def time_left_s(self) -> float:
        left = self.total - len(self.completed)
        if left == 0:
            return 0.0
        if not self._durations:
            return float("nan")
        recent = self._durations[-20:]
        return float(np.mean(recent) * left)

    def view(self, *, with_beam: bool = True) -> ScanView:
        """The scan as a display shows it; the same object until something changes
        (its ``version``), its arrays never written after it is handed out."""
        cached = self._view
        if with_beam and cached is not None and cached.version == self._version:
            return cached
        version = self._version
        grid = self._grid
        view = ScanView(
            kind=str(self.plan.kind), total=self.total, completed=len(self.completed),
            current=self.current, phase=self.phase, why=self.why,
            targets_mm=self._targets, target_axes=self._target_axes,
            grid_axes=grid.axes if grid else (),
            grid_coords_mm=grid.coords_mm if grid else (),
            grid_index=grid.index if grid else np.zeros((self.total, 0), dtype=int),
            values=dict(self._values), failed=self._failed,
            time_left_s=self.time_left_s(), beam=dict(self._beam) if with_beam else {},
            version=version)
        if with_beam:
            self._view = view
        return view


@dataclass(frozen=True)
class PointTiming:
    """When (monotonic s) the runner asked the move to a point, saw the stage arrive,
    opened the point to traces (after settling) and saw it complete: what a benchmark
    of the scan loop's own overhead reads (tests/bench/bench_scan.py)."""

    index: int
    asked: float
    arrived: float
    opened: float
    done: float


class ScanRunner:
    """Walks a plan on a thread of its own (see the module docstring).

    Parameters
    ----------
    plan : Plan
    collector : ScanCollector
    stage : StageLike
    next_seq : callable () -> int
        The seq the next trace will get (the acquisition's counter).
    drive_on : callable () -> bool or None
        The generator output as last read back (None: unknown); ``needs_drive`` False
        (no generator on the bench) skips the wait for it.
    emit : callable (kind, detail, alert) -> None
        Records an event in order with the traces (and raises the alert, if any).
    finished : callable (why: str, complete: bool) -> None
        Called once when the scan ends (the session stops then).
    stop : threading.Event
        The session's stop.
    resumed : bool
        The scan continues an earlier one in the same file.
    passive : bool
        Never move the stage: another program moves it, and the points of the plan are
        measured as the stage comes to rest at them, in whatever order (also so when the
        stage's profile has no move command).
    """

    def __init__(self, *, plan: Plan, collector: ScanCollector, stage: StageLike,
                 next_seq: Callable[[], int], drive_on: Callable[[], bool | None],
                 needs_drive: bool, emit: Callable[[EventKind, dict, RaisedAlert | None], None],
                 finished: Callable[[str, bool], None], stop: threading.Event,
                 resumed: bool = False, poll_s: float = 0.05,
                 arrive_margin_s: float = ARRIVE_MARGIN_S, passive: bool = False):
        self.plan = plan
        self.collector = collector
        self._stage = stage
        self._next_seq = next_seq
        self._drive_on = drive_on
        self._needs_drive = bool(needs_drive)
        self._emit = emit
        self._finished_cb = finished
        self._stop = stop
        self._resumed = bool(resumed)
        self._poll_s = float(poll_s)
        self._margin_s = float(arrive_margin_s)
        self._halt = threading.Event()
        self._halt_why = ""
        self._thread: threading.Thread | None = None
        self.ended = False
        self.timings: list[PointTiming] = []     # of the points measured, in order
        # never move the stage: another program does (also when its profile is passive)
        self.passive = bool(passive)

    def start(self) -> None:
        self._thread = threading.Thread(target=self._main, name="tankside-scan", daemon=True)
        self._thread.start()

    def halt(self, why: str) -> None:
        """End the scan at once (a safe-off, the operator); the stage was stopped by the
        caller. Returns at once."""
        if not self._halt.is_set():
            self._halt_why = str(why)
            self._halt.set()

    def join(self, timeout_s: float | None = None) -> None:
        if self._thread is not None:
            self._thread.join(timeout_s)

    # -- the thread -----------------------------------------------------------------
    def _ended(self) -> bool:
        return self._stop.is_set() or self._halt.is_set()

    def _main(self) -> None:
        c = self.collector
        todo = [p for p in self.plan.points if p.index not in c.completed]
        first = todo[0].index if todo else None
        if not self._resumed:   # (a resumed scan's session recorded scan-resumed)
            self._emit(EventKind.SCAN_START, {"points": c.total, "kind": str(self.plan.kind),
                                              "first_point": first, "passive": self.passive
                                              or bool(getattr(self._stage, "passive", False))},
                       None)
        c.mark_started()
        why = "complete"
        try:
            if self.passive or getattr(self._stage, "passive", False):
                self.passive = True
                self._watch_passively(todo)
            for point in () if self.passive else todo:
                if self._ended():
                    break
                c.set_phase("moving", current=point.index)
                if not self._measure(point):
                    break
        except Exception as err:  # noqa: BLE001 - a bug here ends the scan, not acquisition
            why = f"scan thread: {type(err).__name__}: {err}"
            self._emit(EventKind.SCAN_END, {"completed": len(c.completed), "points": c.total,
                                            "why": why}, RaisedAlert(
                "scan-failed", "critical", f"the scan stopped on an internal error: {why}"))
            c.close_point()
            c.set_phase("ended", why)
            self.ended = True
            self._finished_cb(why, False)
            return
        c.close_point()
        complete = len(c.completed) == c.total
        if not complete:
            why = self._halt_why if self._halt.is_set() else "session stopped"
        c.set_phase("ended", "" if complete else why)
        c.set_current(None)
        c.refresh_beam()
        self._emit(EventKind.SCAN_END, {"completed": len(c.completed), "points": c.total,
                                        "why": why, "beam": c.view().beam}, None)
        self.ended = True
        self._finished_cb(why, complete)

    def _wait(self, seconds: float) -> bool:
        """Sleep ``seconds`` unless the scan ends; True when it did not."""
        end = time.monotonic() + seconds
        while not self._ended():
            left = end - time.monotonic()
            if left <= 0:
                return True
            self._halt.wait(min(left, self._poll_s))
        return False

    def _pause(self, point: int, why: str, alert: bool = True) -> float:
        self.collector.close_point()
        self.collector.set_phase("paused", why)
        self._emit(EventKind.SCAN_PAUSED, {"point": point, "why": why},
                   RaisedAlert("scan-paused", "warning", f"scan paused at point {point}: {why}")
                   if alert else None)
        return time.monotonic()

    def _go_on(self, point: int, since: float) -> None:
        self._emit(EventKind.SCAN_CONTINUED,
                   {"point": point, "after_s": round(time.monotonic() - since, 3)}, None)

    def _ready(self, point: int) -> bool:
        """Wait for the drive (when there is a generator) and the stage; False: ended."""
        paused_at: float | None = None
        while not self._ended():
            why = ""
            if not self._stage.connected:
                why = "stage lost (reconnecting)"
            elif self._needs_drive and self._drive_on() is not True:
                why = "drive off: the scan waits until the operator switches it on"
            if not why:
                if paused_at is not None:
                    self._go_on(point, paused_at)
                return True
            if paused_at is None:
                if why.startswith("drive off"):
                    self.collector.set_phase("waiting", why)
                    self._emit(EventKind.SCAN_PAUSED, {"point": point, "why": why}, None)
                    paused_at = time.monotonic()
                else:
                    paused_at = self._pause(point, why)
            else:
                self.collector.set_why(why)
            self._halt.wait(self._poll_s * 4)
        return False

    def _measure(self, point: Any) -> bool:
        """Move, settle and acquire one point; False when the scan ended meanwhile."""
        c = self.collector
        target = dict(point.position_mm)
        attempts = 0
        while not self._ended():
            if not self._ready(point.index):
                return False
            c.set_phase("moving", current=point.index)
            asked = time.monotonic()
            arrived = self._move(point.index, target, attempts)
            if arrived is None:
                return False
            if not arrived and not self._stage.connected:
                continue        # lost meanwhile: _ready pauses until it is back
            if not arrived:
                attempts += 1
                since = self._pause(point.index, self._not_arrived_why(target),
                                    alert=attempts == 1 or attempts % 5 == 0)
                self._stage.request_stop("scan: stage did not arrive")
                if not self._wait(min(5.0, 0.5 * attempts)):
                    return False
                self._go_on(point.index, since)
                continue
            at = time.monotonic()
            c.set_phase("settling")
            if not self._wait(float(point.settle_s)):
                return False
            # the next trace may have been armed while settling: the one after it is the
            # first wholly acquired at rest
            c.open_point(point.index, target, self._next_seq() + 1, needed=int(point.traces),
                         resumed=self._resumed)
            opened = time.monotonic()
            while not self._ended():
                if c.wait_point(0.1):
                    self.timings.append(PointTiming(point.index, asked, at, opened,
                                                    time.monotonic()))
                    c.refresh_beam()
                    return True
                lost = not self._stage.connected
                reading = self._stage.latest()
                off = reading is not None and (reading.moving
                                               or not c.at(reading.positions_mm, target))
                drive_off = self._needs_drive and self._drive_on() is False
                if lost or off or drive_off:
                    why = ("stage lost (reconnecting)" if lost else
                           "drive off" if drive_off else "stage left the point")
                    c.close_point()
                    if drive_off:
                        c.set_phase("waiting", why)
                    else:
                        self._pause(point.index, why)
                    break       # back to waiting, moving and settling at this point
            else:
                return False
        return False

    # -- passive: another program moves the stage --------------------------------------
    def _watch_passively(self, todo: list) -> None:
        """Measure the plan's points as another program brings the stage to them: a
        point is opened when the stage reads back at rest within the tolerance of a
        point not yet completed, for the settle time, and abandoned (to be measured when
        the stage comes back) if the stage leaves it first. Positions that are no point
        of the plan are recorded with their traces but not mapped."""
        c = self.collector
        left = {p.index: p for p in todo}
        while left and not self._ended():
            if not self._ready(next(iter(left))):
                return
            point = self._resting_at(left.values())
            if point is None:
                c.set_phase("waiting", "passive: the stage is moved by another program; "
                            "waiting for it to rest at a point of the plan not yet done")
                self._halt.wait(self._poll_s)
                continue
            c.set_phase("settling", current=point.index)
            if not self._wait(float(point.settle_s)):
                return
            if self._resting_at([point]) is None:
                continue                # it moved on while settling
            asked = arrived = time.monotonic()
            c.open_point(point.index, dict(point.position_mm), self._next_seq() + 1,
                         needed=int(point.traces), resumed=self._resumed)
            opened = time.monotonic()
            while not self._ended():
                if c.wait_point(0.1):
                    self.timings.append(PointTiming(point.index, asked, arrived, opened,
                                                    time.monotonic()))
                    del left[point.index]
                    c.refresh_beam()
                    break
                if self._resting_at([point]) is None:
                    c.close_point()     # it left before the point was complete
                    break

    def _resting_at(self, points) -> Any:
        """The first of ``points`` the stage rests at now (within the tolerance), or None."""
        reading = self._stage.latest()
        if reading is None or reading.moving:
            return None
        return next((p for p in points
                     if self.collector.at(reading.positions_mm, p.position_mm)), None)

    def _not_arrived_why(self, target: dict[str, float]) -> str:
        reading = self._stage.latest()
        where = ("no reading" if reading is None else ", ".join(
            f"{a} = {reading.positions_mm.get(a, float('nan')):.3f}" for a in target))
        want = ", ".join(f"{a} = {v:.3f}" for a, v in target.items())
        return f"stage did not arrive at {want} mm (reads {where})"

    def _move(self, index: int, target: dict[str, float], attempts: int) -> bool | None:
        """Ask the move and wait for the stage at rest at the target: True arrived,
        False did not in time (or the stage was lost meanwhile), None the scan ended."""
        start = self._stage.latest()
        distance = 0.0
        if start is not None:
            distance = math.sqrt(sum((start.positions_mm.get(a, v) - v) ** 2
                                     for a, v in target.items()))
        speed = self.plan.speed_mm_s or ASSUMED_SPEED_MM_S
        deadline = time.monotonic() + self._margin_s + distance / speed
        try:
            self._stage.request_move(target)
        except Exception as err:  # noqa: BLE001 - lost meanwhile (ConnectionLost); retried
            self.collector.set_why(str(err))
            return False
        asked = time.time()
        still_since: float | None = None
        while not self._ended():
            if time.monotonic() > deadline or not self._stage.connected:
                return False
            reading = self._stage.latest()
            if reading is not None and reading.time_s > asked and not reading.moving:
                if self.collector.at(reading.positions_mm, target):
                    return True
                # at rest off the target: a stall, or a move the stage did not take;
                # given STILL_OFF_TARGET_S (the move may not have started yet), not arrived
                if reading.time_s > asked + STILL_OFF_TARGET_S:
                    still_since = still_since if still_since is not None else reading.time_s
                    if reading.time_s - still_since >= STILL_OFF_TARGET_S:
                        return False
            else:
                still_since = None
            self._halt.wait(self._poll_s)
        return None
