"""The acquisition thread: blocking instrument I/O, instrument actions, reconnects.

It owns the digitiser and the generator. It never waits on the display or the disk:
each trace goes into a bounded queue, and a full queue blocks it (throttling
acquisition; nothing is dropped). Before each acquisition it carries out the actions
the processing stage asked for (safe-off first, then a range change), and when
``gate`` is set it first waits until the rules have seen the previous trace, so that a
safe-off decided on trace N takes effect before trace N+1 is acquired.

With a generator, it also knows the output state: off after a safe-off, and asked
of the generator about once a second (``DRIVE_POLL_S``, between acquisitions), so
that an operator switching the output on or off at the instrument is noticed. Each
change is an event (``drive-on`` / ``drive-off``, detail ``{"output_on", "cause",
"before_seq"}``, cause "start", "safe-off" or "generator"), in order with the traces.
"""

from __future__ import annotations

import queue
import threading
import time
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any

from ...drivers.errors import (
    ConnectionLost,
    InstrumentError,
    InstrumentTimeout,
    NoTrigger,
    ProtocolError,
)
from ..record.schema import EventKind, FaultKind
from .actions import InstrumentAction, RaisedAlert, SafeOff, SetRange

BACKOFF_S = (0.1, 0.2, 0.5, 1.0, 2.0, 5.0)
DRIVE_POLL_S = 1.0          # output-state query interval (cheap; not one per trace)
DRIVE_RETRY_S = 5.0         # after a failed query: do not stall acquisition every second


@dataclass
class OpenInstrument:
    """A connected instrument: the driver object and its SCPI session (resync, close)."""

    device: Any
    link: Any
    identity: str = ""


@dataclass
class Acquired:
    """One trace from the acquisition thread, with flags set there (e.g. range change)."""

    raw: Any
    flags: dict = field(default_factory=dict)


@dataclass
class AcqEvent:
    """Something that happened at the instruments, in order with the traces.

    ``alert`` is set when the event should also raise an alert.
    """

    time_s: float
    kind: EventKind
    detail: dict
    seq: int | None = None
    alert: RaisedAlert | None = None


# A verdict beyond any sequence number a session reaches: releases the gate for good.
_NO_MORE_VERDICTS = 1 << 62


class Fatal(Exception):
    """The acquisition cannot go on (instrument lost for good)."""


class AcquisitionLoop:
    """Runs in its own thread; see the module docstring.

    Parameters
    ----------
    open_digitiser : callable () -> OpenInstrument
        Opens, identifies and configures the digitiser (settings applied).
    open_generator : callable () -> OpenInstrument, or None
    out : queue.Queue
        Bounded queue of :class:`Acquired` and :class:`AcqEvent` items.
    stop : threading.Event
        Set to end the loop after the current acquisition.
    trigger_timeout_s : float
    give_up_s : float
        How long to keep trying to reconnect a lost instrument.
    max_traces : int or None
    first_seq : int
    """

    def __init__(self, *, open_digitiser: Callable[[], OpenInstrument],
                 open_generator: Callable[[], OpenInstrument] | None, out: queue.Queue,
                 stop: threading.Event, trigger_timeout_s: float, give_up_s: float = 60.0,
                 max_traces: int | None = None, first_seq: int = 0, gate: bool = True,
                 clock: Callable[[], float] = time.time):
        self.open_digitiser = open_digitiser
        self.open_generator = open_generator
        self.out = out
        self.stop = stop
        self.trigger_timeout_s = trigger_timeout_s
        self.give_up_s = give_up_s
        self.max_traces = max_traces
        self.seq = first_seq
        self.gate = gate
        self.clock = clock
        self.digitiser: OpenInstrument | None = None
        self.generator: OpenInstrument | None = None
        self.commands: queue.Queue[InstrumentAction] = queue.Queue()
        # Set only when nothing downstream reads the queue any more (a fatal error there).
        self.abandon = threading.Event()
        self.connected = False
        self.reconnecting = False
        self.last_trigger_mono = time.monotonic()
        self.blocked_s = 0.0          # total time spent waiting on a full queue
        self.blocked_now = False
        self.gate_wait_s = 0.0        # total time spent waiting for the previous verdict
        self.fatal: str | None = None
        self._verdict = threading.Condition()
        self._verdict_seq = first_seq - 1
        self._next_flags: dict = {}
        # Generator output: True/False, None while unknown; only this thread writes it.
        self.drive_on: bool | None = None
        self.drive_cause = ""
        self._next_drive_poll = 0.0
        self._drive_fault: str | None = None

    # -- connection, called from the starting thread before run() --------------
    def connect(self) -> None:
        self.digitiser = self.open_digitiser()
        self.connected = True
        if self.open_generator is not None:
            try:
                self.generator = self.open_generator()
            except BaseException:
                self.close_links()
                raise

    @property
    def ranges_v(self) -> tuple[float, ...]:
        return tuple(self.digitiser.device.ranges_v) if self.digitiser else ()

    def current_range_v(self) -> float:
        return float(self._digitiser().device.settings.range_v)

    def _digitiser(self) -> OpenInstrument:
        digitiser = self.digitiser
        if digitiser is None:  # pragma: no cover - every caller runs after connect()
            raise RuntimeError("acquisition: the digitiser is not connected")
        return digitiser

    # -- handshake with the processing stage -------------------------------------
    def verdict(self, seq: int) -> None:
        """The rules have seen trace ``seq`` and its actions are queued."""
        with self._verdict:
            if seq > self._verdict_seq:
                self._verdict_seq = seq
            self._verdict.notify_all()

    def _wait_verdict(self) -> None:
        with self._verdict:
            if self._verdict_seq >= self.seq - 1:
                return
            t0 = time.monotonic()
            while self._verdict_seq < self.seq - 1 and not self.stop.is_set():
                self._verdict.wait(0.1)
            self.gate_wait_s += time.monotonic() - t0

    # -- the loop ----------------------------------------------------------------
    def run(self) -> None:
        try:
            while not self.stop.is_set():
                if self.max_traces is not None and self.seq >= self.max_traces:
                    break
                if self.gate:
                    self._wait_verdict()
                self._apply_commands()
                self._poll_drive()
                if self.stop.is_set():
                    break
                self._acquire_one()
        except Fatal as err:
            self.fatal = str(err)
        finally:
            self._apply_commands()      # a safe-off asked for at the very end still happens
            self.close_links()

    def close_links(self) -> None:
        for link in (self.digitiser, self.generator):
            _close(link)
        self.connected = False

    def _emit(self, item) -> None:
        # Blocks while the queue is full: acquisition is throttled, never lossy.
        try:
            self.out.put_nowait(item)
            return
        except queue.Full:
            pass
        self.blocked_now = True
        t0 = time.monotonic()
        try:
            while True:
                try:
                    self.out.put(item, timeout=0.1)
                    return
                except queue.Full:
                    if self.abandon.is_set():
                        return
        finally:
            self.blocked_s += time.monotonic() - t0
            self.blocked_now = False

    def _event(self, kind: EventKind, detail: dict, alert: RaisedAlert | None = None,
               seq: int | None = None) -> None:
        self._emit(AcqEvent(self.clock(), kind, detail, seq=seq, alert=alert))

    def _acquire_one(self) -> None:
        dev = self._digitiser().device
        try:
            raw = dev.acquire(self.seq, trigger_timeout_s=self.trigger_timeout_s)
        except NoTrigger as err:
            self._event(EventKind.NO_TRIGGER, {"message": str(err),
                                       "timeout_s": self.trigger_timeout_s})
            return
        except (ProtocolError, InstrumentTimeout) as err:
            kind = FaultKind.MALFORMED_REPLY if isinstance(err, ProtocolError) \
                else FaultKind.STALLED
            self._event(EventKind.FAULT, {"kind": kind, "message": str(err), "at_seq": self.seq},
                        alert=RaisedAlert("instrument-fault", "warning",
                                          f"digitiser {kind}: {err}"))
            self._recover(err)
            return
        except ConnectionLost as err:
            self._event(EventKind.FAULT, {"kind": FaultKind.CONNECTION_LOST,
                                          "message": str(err), "at_seq": self.seq},
                        alert=RaisedAlert("instrument-fault", "warning", f"digitiser lost: {err}"))
            self._reconnect(err)
            return
        except InstrumentError as err:
            self._event(EventKind.FAULT, {"kind": FaultKind.INSTRUMENT_ERROR,
                                          "message": str(err), "at_seq": self.seq},
                        alert=RaisedAlert("instrument-fault", "warning", f"digitiser: {err}"))
            return
        self.last_trigger_mono = time.monotonic()
        flags, self._next_flags = self._next_flags, {}
        self.seq += 1
        self._emit(Acquired(raw, flags))

    def _recover(self, err: Exception) -> None:
        try:
            self._digitiser().link.resync()
        except InstrumentError:
            self._reconnect(err)
            return
        self._event(EventKind.RESYNC, {"after": type(err).__name__})

    def _reconnect(self, err: Exception) -> None:
        lost = self._digitiser()
        _close(lost)
        self.connected = False
        self.reconnecting = True
        settings = getattr(lost.device, "settings", None)
        started = time.monotonic()
        attempt = 0
        last_error = err
        try:
            while not self.stop.is_set():
                delay = BACKOFF_S[min(attempt, len(BACKOFF_S) - 1)]
                if time.monotonic() - started + delay > self.give_up_s:
                    raise Fatal(f"digitiser not reachable for {self.give_up_s:g} s: "
                                f"{last_error}")
                if self.stop.wait(delay):
                    return
                attempt += 1
                try:
                    link = self.open_digitiser()
                    if settings is not None:
                        # The instrument may have reset: put back the range in force.
                        link.device.configure(settings)
                except InstrumentError as again:
                    last_error = again
                    continue
                self.digitiser = link
                self.connected = True
                self._event(EventKind.RECONNECT,
                            {"attempts": attempt,
                             "after_s": round(time.monotonic() - started, 3),
                             "cause": str(err), "identity": link.identity,
                             "next_seq": self.seq},
                            alert=RaisedAlert("instrument-reconnected", "info",
                                   f"digitiser reconnected after {attempt} attempt(s)"))
                return
        finally:
            self.reconnecting = False

    # -- actions -----------------------------------------------------------------
    def _apply_commands(self) -> None:
        pending: list[InstrumentAction] = []
        while True:
            try:
                pending.append(self.commands.get_nowait())
            except queue.Empty:
                break
        if not pending:
            return
        # Safe-off before anything else, however the requests arrived.
        for cmd in pending:
            if isinstance(cmd, SafeOff):
                self._safe_off(cmd.cause.as_detail())
        ranges = [cmd for cmd in pending if isinstance(cmd, SetRange)]
        if ranges:
            self._set_range(ranges[-1].range_v, ranges[-1].cause.as_detail())

    def release_all(self) -> None:
        """Nothing downstream judges traces any more: never wait for a verdict again."""
        self.abandon.set()
        self.verdict(_NO_MORE_VERDICTS)

    def _open_generator(self) -> OpenInstrument:
        open_generator = self.open_generator
        if open_generator is None:  # pragma: no cover - no generator is open without it
            raise RuntimeError("acquisition: no generator is configured")
        return open_generator()

    def _safe_off(self, cause: dict) -> None:
        if self.generator is None:
            self._event(EventKind.SAFE_OFF,
                        {"done": False, "why": "no generator configured", **cause},
                        alert=RaisedAlert("safe-off-failed", "critical",
                               "safe-off asked for but no generator is configured"))
            return
        try:
            self.generator.device.set_output(False)
            still_on = self.generator.device.output_is_on()
        except InstrumentError as err:
            try:
                _close(self.generator)
                self.generator = self._open_generator()
                self.generator.device.set_output(False)
                still_on = self.generator.device.output_is_on()
            except InstrumentError as again:
                self._event(EventKind.SAFE_OFF, {"done": False, "error": str(again), **cause},
                            alert=RaisedAlert("safe-off-failed", "critical",
                                   f"generator output could not be switched off: {err}"))
                return
        if still_on:
            self._event(EventKind.SAFE_OFF,
                        {"done": False, "error": "output still on", **cause},
                        alert=RaisedAlert("safe-off-failed", "critical",
                               "generator reports output still on after safe-off"))
            return
        self._event(EventKind.SAFE_OFF, {"done": True, "before_seq": self.seq, **cause})
        self._set_drive(False, "safe-off")

    # -- generator output state ----------------------------------------------------
    def _set_drive(self, on: bool, cause: str) -> None:
        self._drive_fault = None
        if on == self.drive_on:
            return
        self.drive_on = on
        self.drive_cause = cause
        self._event(EventKind.DRIVE_ON if on else EventKind.DRIVE_OFF,
                    {"output_on": on, "cause": cause, "before_seq": self.seq})

    def _poll_drive(self) -> None:
        """Ask the generator for its output state when the poll interval is up."""
        if self.generator is None:
            return
        now = time.monotonic()
        if now < self._next_drive_poll:
            return
        try:
            on = bool(self.generator.device.output_is_on())
        except InstrumentError as err:
            self._next_drive_poll = now + DRIVE_RETRY_S
            try:
                # a late reply must not be read as the answer to the next query
                self.generator.link.resync()
            except InstrumentError:
                pass  # the link is gone; safe-off reopens it when it is needed
            if self._drive_fault is None:
                self._drive_fault = str(err)
                self.drive_on = None
                self._event(EventKind.FAULT, {"kind": FaultKind.GENERATOR_QUERY,
                                              "message": str(err), "at_seq": self.seq},
                            alert=RaisedAlert("instrument-fault", "warning",
                                   f"generator output state unknown: {err}"))
            return
        self._next_drive_poll = now + DRIVE_POLL_S
        self._set_drive(on, "start" if self.drive_cause == "" else "generator")

    def _set_range(self, new_v: float, cause: dict) -> None:
        old_v = self.current_range_v()
        if new_v == old_v:
            return
        try:
            self._digitiser().device.set_range(new_v)
        except InstrumentError as err:
            self._event(EventKind.RANGE_CHANGE, {"done": False, "from_v": old_v,
                                                 "to_v": new_v, "error": str(err), **cause},
                        alert=RaisedAlert("auto-range-failed", "warning",
                                          f"range change failed: {err}"))
            return
        self._next_flags = {"range_changed": True, "previous_range_v": old_v}
        self._event(EventKind.RANGE_CHANGE, {"done": True, "from_v": old_v, "to_v": new_v,
                                             "before_seq": self.seq, **cause})


def _close(inst: OpenInstrument | None) -> None:
    if inst is None:
        return
    try:
        inst.link.close()
    except InstrumentError:
        pass  # closing a transport that is already gone: nothing left to release
