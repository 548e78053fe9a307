"""The generator's own thread: output state, a safe-off that holds, the operator's drive.

The drive is the operator's. Nothing here switches the output on except a
:class:`DriveOn` command, which only an operator action creates (the dashboard's
confirmed key, ``--drive-on``, or the demo once its caution is acknowledged); each is
recorded as a ``drive-on`` event with its cause.

The generator has a thread and a link of its own, so a late, stalled or lost
generator never holds up the digitiser's acquisition, and an error in its I/O never
ends the session: it is recorded and raised as an alert.

Switching comes before the next trace: :meth:`GeneratorWorker.request` marks a
command pending, and the acquisition thread waits (:meth:`GeneratorWorker.hold`) for
its first attempt before it acquires the next trace, at most ``SAFE_OFF_HOLD_S``: a
prompt generator is off (or on) before trace N+1, a late one never holds the
digitiser longer.

Safe-off holds: a :class:`~tankside.monitor.live.actions.SafeOff` is retried (output
off, then read back; the link reopened when it fails) with a growing pause until the
output reads back off. Every failed attempt is recorded and raised as a critical
alert. When the output has not been confirmed off within ``safe_off_give_up_s``,
``on_unsafe(message)`` is called once: the session stops with the status that says
the drive may still be on.

About once a second (``poll_s``) the output state is asked, so that an operator
switching it at the instrument is noticed; each change is a ``drive-on`` /
``drive-off`` event (detail ``{"output_on", "cause", "before_seq"}``).
"""

from __future__ import annotations

import queue
import sys
import threading
import time
import traceback
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

from ...drivers.errors import InstrumentError
from ..record.schema import EventKind, FaultKind
from .actions import RaisedAlert, SafeOff

POLL_S = 1.0                          # output-state query interval
SAFE_OFF_HOLD_S = 0.5                 # acquisition waits at most this for a first attempt
SAFE_OFF_PAUSES_S = (0.05, 0.1, 0.2, 0.5, 1.0, 2.0)   # between safe-off attempts
DEFAULT_SAFE_OFF_GIVE_UP_S = 10.0


@dataclass(frozen=True)
class DriveOn:
    """Switch the output on: an operator's action, with who or what asked."""

    cause: str


@dataclass(frozen=True)
class DriveOff:
    """Switch the output off (an operator's action, or the end of the session)."""

    cause: str


GeneratorCommand = SafeOff | DriveOn | DriveOff


class GeneratorWorker:
    """Owns the generator link on a thread of its own.

    Parameters
    ----------
    open_generator : callable () -> OpenInstrument
        Connects and identifies the generator (applies no setting); called again to
        reopen a lost link.
    apply_settings : callable (device) -> None
        Applies the bench's generator settings (with the output off); run once, after
        the session file exists.
    emit : callable (kind: EventKind, detail, alert) -> None
        Records an event (in order with the traces) and, with ``alert``, raises it.
    current_seq : callable () -> int
        The sequence number the next trace will get (for ``before_seq``).
    on_unsafe : callable (message) -> None
        Called once when a safe-off could not be confirmed in time.
    safe_off_give_up_s : float
    poll_s : float
    """

    def __init__(self, *, open_generator: Callable[[], Any],
                 apply_settings: Callable[[Any], None],
                 emit: Callable[[EventKind, dict, RaisedAlert | None], None],
                 current_seq: Callable[[], int], on_unsafe: Callable[[str], None],
                 safe_off_give_up_s: float = DEFAULT_SAFE_OFF_GIVE_UP_S,
                 poll_s: float = POLL_S):
        self._open = open_generator
        self._apply_settings = apply_settings
        self._emit = emit
        self._current_seq = current_seq
        self._on_unsafe = on_unsafe
        self.safe_off_give_up_s = float(safe_off_give_up_s)
        self.poll_s = float(poll_s)
        self.commands: queue.Queue[GeneratorCommand] = queue.Queue()
        self.inst: Any = None
        self.identity = ""
        # Output state as last read back: True/False, None while unknown.
        self.drive_on: bool | None = None
        self.drive_cause = ""
        self._unsafe_reported = False   # on_unsafe is called once
        self._stop = threading.Event()
        self._thread: threading.Thread | None = None
        self._query_fault: str | None = None
        self._nothing_pending = threading.Event()
        self._nothing_pending.set()

    # -- from other threads -------------------------------------------------------------
    def request(self, cmd: GeneratorCommand) -> None:
        """Queue a command; :meth:`hold` waits for its first attempt."""
        self._nothing_pending.clear()
        self.commands.put(cmd)

    def hold(self, timeout_s: float = SAFE_OFF_HOLD_S) -> None:
        """Wait until pending commands have had a first attempt (at most ``timeout_s``)."""
        self._nothing_pending.wait(timeout_s)

    # -- from the starting thread ----------------------------------------------------
    def connect(self) -> None:
        """Open and identify the generator (nothing is set)."""
        self.inst = self._open()
        self.identity = self.inst.identity

    def apply_settings(self) -> None:
        """Apply the bench's settings with the output off, and read the state back."""
        self._apply_settings(self.inst.device)
        self._read_state("start")

    def start(self) -> None:
        self._thread = threading.Thread(target=self._main, name="tankside-generator",
                                        daemon=True)
        self._thread.start()

    def stop(self, *, leave_on: bool) -> None:
        """End the thread; then, unless ``leave_on``, switch the output off and confirm.

        Returns after the final state is recorded (or the attempt has given up).
        """
        self._stop.set()
        if self._thread is not None:
            self._thread.join()
        if self.inst is None:
            return
        if not leave_on:
            self._switch_off("end of session", give_up_s=min(self.safe_off_give_up_s, 5.0),
                             as_safe_off=False)
        self.close()

    def close(self) -> None:
        if self.inst is not None:
            self.inst.close()

    # -- the thread --------------------------------------------------------------------
    def _main(self) -> None:
        next_poll = time.monotonic() + self.poll_s
        while not self._stop.is_set():
            try:
                cmd = self.commands.get(timeout=max(0.0, min(0.1, next_poll - time.monotonic())))
            except queue.Empty:
                cmd = None
            try:
                if cmd is not None:
                    self._carry_out(cmd)
                if time.monotonic() >= next_poll:
                    next_poll = time.monotonic() + self.poll_s
                    self._read_state("generator")
            except Exception as err:  # noqa: BLE001 - a bug here must not end acquisition
                traceback.print_exc(file=sys.stderr)
                self._emit(EventKind.FAULT, {"kind": FaultKind.GENERATOR_THREAD,
                                             "message": repr(err),
                                             "at_seq": self._current_seq()},
                           RaisedAlert("instrument-fault", "critical",
                                       f"generator handling failed: {err!r}"))
        # a safe-off asked for at the very end still happens
        while True:
            try:
                cmd = self.commands.get_nowait()
            except queue.Empty:
                break
            if isinstance(cmd, SafeOff | DriveOff):
                self._carry_out(cmd)

    def _first_attempt_made(self) -> None:
        if self.commands.empty():
            self._nothing_pending.set()     # acquisition may go on

    def _carry_out(self, cmd: GeneratorCommand) -> None:
        if isinstance(cmd, SafeOff):
            self._switch_off("safe-off", give_up_s=self.safe_off_give_up_s, as_safe_off=True,
                             detail=cmd.cause.as_detail())
        elif isinstance(cmd, DriveOff):
            self._switch_off(cmd.cause, give_up_s=self.safe_off_give_up_s, as_safe_off=False)
        elif isinstance(cmd, DriveOn):
            self._switch_on(cmd.cause)
            self._first_attempt_made()

    # -- output state --------------------------------------------------------------------
    def _set_state(self, on: bool, cause: str) -> None:
        self._query_fault = None
        if on == self.drive_on:
            return
        self.drive_on = on
        self.drive_cause = cause
        self._emit(EventKind.DRIVE_ON if on else EventKind.DRIVE_OFF,
                   {"output_on": on, "cause": cause, "before_seq": self._current_seq()}, None)

    def _read_state(self, cause: str) -> None:
        try:
            on = bool(self.inst.device.output_is_on())
        except InstrumentError as err:
            self._resync_quietly()
            if self._query_fault is None:
                self._query_fault = str(err)
                self.drive_on = None
                self._emit(EventKind.FAULT, {"kind": FaultKind.GENERATOR_QUERY,
                                             "message": str(err),
                                             "at_seq": self._current_seq()},
                           RaisedAlert("instrument-fault", "warning",
                                       f"generator output state unknown: {err}"))
            return
        self._set_state(on, cause)

    def _resync_quietly(self) -> None:
        try:
            # a late reply must not be read as the answer to the next query
            self.inst.link.resync()
        except InstrumentError:
            pass  # the link is gone; the next switch-off reopens it

    def _switch_on(self, cause: str) -> None:
        try:
            self.inst.device.set_output(True)
            on = self.inst.device.output_is_on()
        except InstrumentError as err:
            self._resync_quietly()
            self._emit(EventKind.DRIVE_ON_FAILED, {"cause": cause, "error": str(err)},
                       RaisedAlert("drive-on-failed", "warning",
                                   f"generator output could not be switched on: {err}"))
            return
        if not on:
            self._emit(EventKind.DRIVE_ON_FAILED,
                       {"cause": cause, "error": "output still off"},
                       RaisedAlert("drive-on-failed", "warning",
                                   "generator reports output still off after switching on"))
            return
        self._set_state(True, cause)

    def _attempt_off(self) -> str | None:
        """One attempt: output off and read back. None when confirmed off, else why not."""
        try:
            self.inst.device.set_output(False)
            if not self.inst.device.output_is_on():
                return None
            return "output still on after switching off"
        except InstrumentError as err:
            first = str(err)
        try:
            self.close()
            self.inst = self._open()
            self.inst.device.set_output(False)
            if not self.inst.device.output_is_on():
                return None
            return f"{first}; after reopening: output still on"
        except InstrumentError as again:
            return f"{first}; reopening: {again}"

    def _switch_off(self, cause: str, *, give_up_s: float, as_safe_off: bool,
                    detail: dict | None = None) -> None:
        """Switch the output off and confirm it, retrying until ``give_up_s``."""
        detail = dict(detail or {})
        started = time.monotonic()
        attempt = 0
        kind = EventKind.SAFE_OFF if as_safe_off else EventKind.DRIVE_OFF_FAILED
        while True:
            attempt += 1
            why = self._attempt_off()
            self._first_attempt_made()
            if why is None:
                if as_safe_off:
                    self._emit(EventKind.SAFE_OFF, {"done": True, "attempts": attempt,
                                                    "before_seq": self._current_seq(),
                                                    **detail}, None)
                self._set_state(False, cause)
                return
            elapsed = time.monotonic() - started
            self._emit(kind, {"done": False, "attempt": attempt, "error": why, "cause": cause,
                              "after_s": round(elapsed, 3), **detail},
                       RaisedAlert("safe-off-failed" if as_safe_off else "drive-off-failed",
                                   "critical",
                                   f"generator output not confirmed off (attempt {attempt}, "
                                   f"{elapsed:.1f} s): {why}"))
            pause = SAFE_OFF_PAUSES_S[min(attempt - 1, len(SAFE_OFF_PAUSES_S) - 1)]
            if elapsed + pause > give_up_s:
                self.drive_on = None
                if not self._unsafe_reported:
                    self._unsafe_reported = True
                    self._on_unsafe(
                        f"THE DRIVE MAY STILL BE ON: the generator output could not be "
                        f"confirmed off within {give_up_s:g} s ({attempt} attempts; last: "
                        f"{why}). Switch it off at the instrument or the amplifier now.")
                return
            time.sleep(pause)
