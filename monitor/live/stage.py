"""The stage's own thread: position readings, moves within the soft limits, stop, reconnects.

The stage has a thread and a line of its own, so a slow, stalled or lost stage never holds
up the digitiser's acquisition, and a stage error never ends the session: it is recorded
as an event, raised as an alert, and the stage is told to stop.

- Moves (:meth:`StageWorker.request_move`) are checked against the bench file's soft
  limits (``[stage.limits]``) in the caller's thread, before anything is queued or sent:
  a target outside them, or on an axis without limits, is an
  :class:`~tankside.monitor.errors.OutsideLimitsError`.
- ``stop`` is sent when the session stops, on a safe-off (:meth:`request_stop`), and when
  the stage reports an error or stops answering. A stop goes before any move still
  queued, and those moves are dropped (recorded), so nothing restarts the motion.
- About five times a second (``poll_s``) the position of every axis and whether the stage
  moves are read, at once after a move or stop is sent, and every
  :data:`MOVING_POLL_S` while it moves; each trace is recorded with the latest reading
  (:meth:`latest`).
- A stage that stops answering (a timeout, a lost connection) is an ``instrument-lost``
  event and alert; the line is reopened with a growing pause (``BACKOFF_S``) for as long
  as the session runs, and its return is an ``instrument-back`` event. Meanwhile traces
  are recorded without a position.

A stop asked while the thread is in the middle of an exchange with the stage goes out when
that exchange ends: at most one line timeout later.
"""

from __future__ import annotations

import math
import queue
import threading
import time
from collections.abc import Callable
from dataclasses import dataclass

from ...drivers.errors import ConnectionLost, InstrumentError, InstrumentTimeout
from ..errors import ConfigError, OutsideLimitsError
from ..record.schema import EventKind, FaultKind
from .actions import RaisedAlert
from .serial_ports import (
    StagePort,
    close_quietly,
    reconnect_after_pause,
    report_back,
    report_lost,
    report_worker_bug,
)

POLL_S = 0.2
#: The reading interval while the stage moves (or was just told to), s: a scan waits for
#: the reading that says it arrived, so this is most of its wait beyond the move itself.
MOVING_POLL_S = 0.02
BACKOFF_S = (0.2, 0.5, 1.0, 2.0, 5.0)
INSTRUMENT = "stage"


@dataclass(frozen=True)
class StageReading:
    """The stage as last read: every axis's position (mm), when (s since the Unix
    epoch), and whether it was moving."""

    positions_mm: dict[str, float]
    time_s: float
    moving: bool


def check_target(target: dict[str, float],
                 limits: dict[str, tuple[float, float]]) -> dict[str, float]:
    """The target (axis -> mm) as floats, when every axis lies within its soft limits.

    Raises
    ------
    OutsideLimitsError
        An empty target, an axis without limits, a position that is not a finite
        number, or one outside ``[low, high]`` (inclusive).
    """
    if not target:
        raise OutsideLimitsError("stage move: no axis given")
    checked: dict[str, float] = {}
    for axis, value in target.items():
        if axis not in limits:
            raise OutsideLimitsError(f"stage move: axis {axis!r} has no soft limits in the "
                                     f"bench file ([stage.limits] has {', '.join(limits)})")
        if isinstance(value, bool) or not isinstance(value, int | float) \
                or not math.isfinite(value):
            raise OutsideLimitsError(f"stage move: {axis} = {value!r} is not a position in mm")
        low, high = limits[axis]
        if not low <= value <= high:
            raise OutsideLimitsError(f"stage move: {axis} = {value:g} mm is outside the soft "
                                     f"limits {low:g} to {high:g} mm ([stage.limits]); "
                                     "nothing was sent")
        checked[axis] = float(value)
    return checked


@dataclass(frozen=True)
class _Move:
    target_mm: dict[str, float]


class StageWorker:
    """Owns the stage's line on a thread of its own.

    Parameters
    ----------
    open_stage : callable () -> StagePort
        Opens the line and returns the stage; called again to reconnect.
    limits : dict
        Axis -> (low, high), mm: the bench file's ``[stage.limits]``. Every axis of the
        stage must have limits.
    emit : callable (kind: EventKind, detail, alert) -> None
        Records an event in order with the traces and, with ``alert``, raises it.
    current_seq : callable () -> int
        The sequence number the next trace will get.
    poll_s : float
        Interval of the position readings, s.
    backoff_s : tuple of float
        Pauses between reconnection attempts, s (the last one repeats).
    clock : callable () -> float
        Seconds since the Unix epoch (the readings' time).
    """

    def __init__(self, *, open_stage: Callable[[], StagePort],
                 limits: dict[str, tuple[float, float]],
                 emit: Callable[[EventKind, dict, RaisedAlert | None], None],
                 current_seq: Callable[[], int], poll_s: float = POLL_S,
                 backoff_s: tuple[float, ...] = BACKOFF_S,
                 clock: Callable[[], float] = time.time):
        self._open = open_stage
        self.limits = dict(limits)
        self._emit = emit
        self._current_seq = current_seq
        self.poll_s = float(poll_s)
        self.backoff_s = tuple(backoff_s)
        self._clock = clock
        self.port: StagePort | None = None
        self.identity = ""
        self.axes: tuple[str, ...] = ()
        self._latest: StageReading | None = None
        self._moves: queue.Queue[_Move] = queue.Queue()
        self._stops: queue.Queue[str] = queue.Queue()
        self._wake = threading.Event()
        self._stop = threading.Event()
        self._thread: threading.Thread | None = None
        self._in_error = False      # a stage error handled, no good reading since
        self.ended = False          # stopped by the session (its end)
        self.passive = False        # its profile cannot move it (known once connected)

    # -- from other threads ---------------------------------------------------------
    @property
    def connected(self) -> bool:
        return self.port is not None

    def latest(self) -> StageReading | None:
        """The latest reading; None while the stage is lost or before the first one."""
        return self._latest

    def request_move(self, target: dict[str, float]) -> dict[str, float]:
        """Queue an absolute move (axis -> mm) after checking the soft limits; returns the
        checked target. Raises :class:`OutsideLimitsError` (nothing queued or sent), or
        :class:`~tankside.drivers.errors.ConnectionLost` while the stage is lost."""
        checked = check_target(target, self.limits)
        if self.passive:
            raise ConfigError(f"{INSTRUMENT}: a passive stage (its profile has no move "
                              f"command): tankside does not move it; {checked} not sent")
        if self.port is None:
            raise ConnectionLost(f"{INSTRUMENT}: not connected (reconnecting); the move to "
                                 f"{checked} was not sent")
        self._moves.put(_Move(checked))
        self._wake.set()
        return checked

    def request_stop(self, cause: str) -> None:
        """Stop the stage before any queued move (which is dropped)."""
        self._stops.put(str(cause))
        self._wake.set()

    # -- from the starting thread ---------------------------------------------------
    def connect(self) -> None:
        """Open the stage, identify it and read its position.

        Raises
        ------
        InstrumentError
            The stage cannot be reached (the session does not start).
        ConfigError
            An axis of the stage has no soft limits in the bench file.
        """
        port = self._open()
        try:
            identity = port.identify()
            axes = tuple(port.axes)
            missing = [a for a in axes if a not in self.limits]
            if missing:
                raise ConfigError(f"[stage.limits]: the stage has the axis(es) "
                                  f"{', '.join(missing)} without soft limits; give every axis "
                                  f"its [low, high] in mm (the stage's axes: {', '.join(axes)})")
            self._latest = self._read(port)
        except BaseException:
            close_quietly(port)
            raise
        self.port, self.identity, self.axes = port, identity, axes
        self.passive = bool(getattr(port, "passive", False))

    def start(self) -> None:
        self._thread = threading.Thread(target=self._main, name="tankside-stage", daemon=True)
        self._thread.start()

    def stop(self, cause: str = "end of session") -> None:
        """End the thread, then tell the stage to stop and close its line."""
        self._stop.set()
        self._wake.set()
        if self._thread is not None:
            self._thread.join()
        if self.port is not None:
            self._send_stop(self.port, cause)
            # the traces still queued were acquired where the stage last was: they keep
            # that reading (a stage lost, by contrast, has no position)
            last = self._latest
            self.close()
            self._latest = last
        self.ended = True           # closed by the session, not lost

    def close(self) -> None:
        if self.port is not None:
            close_quietly(self.port)
            self.port = None
        self._latest = None

    # -- the thread -----------------------------------------------------------------
    def _main(self) -> None:
        next_poll = time.monotonic()
        attempt = 0
        lost_at = 0.0
        while not self._stop.is_set():
            port = self.port
            if port is None:
                next_attempt = reconnect_after_pause(self._stop, self.backoff_s, attempt,
                                                     lost_at, self._reopen)
                if next_attempt is None:
                    break
                attempt = next_attempt
                continue
            try:
                if self._carry_out(port):
                    next_poll = time.monotonic()        # read where it goes at once
                if time.monotonic() >= next_poll:
                    self._latest = self._read(port)
                    self._in_error = False
                    fast = self._latest.moving
                    next_poll = time.monotonic() + (min(self.poll_s, MOVING_POLL_S) if fast
                                                    else self.poll_s)
            except InstrumentError as err:
                lost_at = time.monotonic()
                self._failed(port, err)
                continue
            except Exception as err:  # noqa: BLE001 - a bug here must not end acquisition
                report_worker_bug(self._emit, self._current_seq(), "stage", err)
                self._stop.wait(1.0)
            self._wake.wait(max(0.0, next_poll - time.monotonic()))
            self._wake.clear()

    def _carry_out(self, port: StagePort) -> bool:
        """Stops first (dropping the moves queued before them), then one move; True when
        a move or a stop was sent."""
        stopped = False
        while True:
            try:
                cause = self._stops.get_nowait()
            except queue.Empty:
                break
            stopped = True
            self._send_stop(port, cause)
        if stopped:
            self._drop_moves("the stage was stopped")
            return True
        try:
            move = self._moves.get_nowait()
        except queue.Empty:
            return False
        try:
            port.move_to(move.target_mm)
        except InstrumentError as err:
            self._emit(EventKind.STAGE_MOVE, {"target_mm": move.target_mm, "done": False,
                                              "error": str(err)}, None)
            raise
        self._emit(EventKind.STAGE_MOVE, {"target_mm": move.target_mm, "done": True}, None)
        return True

    def _read(self, port: StagePort) -> StageReading:
        # whether it moves first: a stage found at rest is still at rest when its position
        # is read just after (the other order could pair a position read in the last
        # moment of a move with "not moving", and a scan would take it for the target)
        moving = bool(port.is_moving())
        positions = {str(axis): float(mm) for axis, mm in port.position().items()}
        return StageReading(positions, self._clock(), moving)

    def _send_stop(self, port: StagePort, cause: str) -> None:
        if self.passive:
            why = "a passive stage: no stop command; the program that moves it must stop it"
            self._emit(EventKind.STAGE_STOP, {"cause": cause, "done": False, "error": why},
                       RaisedAlert("stage-stop-failed", "critical",
                                   f"the stage could not be stopped ({cause}): {why}")
                       if cause == "safe-off" else None)
            return
        try:
            port.stop()
        except InstrumentError as err:
            self._emit(EventKind.STAGE_STOP, {"cause": cause, "done": False, "error": str(err)},
                       RaisedAlert("stage-stop-failed", "critical",
                                   f"the stage did not take the stop ({cause}): {err}"))
            return
        self._emit(EventKind.STAGE_STOP, {"cause": cause, "done": True}, None)

    def _drop_moves(self, why: str) -> None:
        while True:
            try:
                move = self._moves.get_nowait()
            except queue.Empty:
                return
            self._emit(EventKind.STAGE_MOVE, {"target_mm": move.target_mm, "done": False,
                                              "error": f"dropped: {why}"}, None)

    def _failed(self, port: StagePort, err: InstrumentError) -> None:
        """A stage error: stop it; one that stopped answering is closed and reopened.

        An error the stage reports again before a good reading is not recorded again."""
        lost = isinstance(err, InstrumentTimeout | ConnectionLost)
        if self._in_error and not lost:
            self._drop_moves(f"stage error: {err}")
            return
        self._in_error = not lost
        self._send_stop(port, "stage error")
        self._drop_moves(f"stage error: {err}")
        if lost:
            self.close()
            report_lost(self._emit, self._current_seq(), INSTRUMENT, err,
                        " without positions")
        else:
            self._emit(EventKind.FAULT, {"kind": FaultKind.STAGE_ERROR, "message": str(err),
                                         "at_seq": self._current_seq()},
                       RaisedAlert("stage-error", "warning",
                                   f"stage error ({err}); the stage was told to stop"))

    def _reopen(self, attempt: int, after_s: float) -> bool:
        try:
            port = self._open()
        except InstrumentError:
            return False
        try:
            identity = port.identify()
            reading = self._read(port)
        except InstrumentError:
            close_quietly(port)
            return False
        self.port, self.identity, self._latest = port, identity, reading
        report_back(self._emit, INSTRUMENT, attempt, after_s, identity)
        return True

