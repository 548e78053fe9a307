"""The acquisition thread: blocking digitiser I/O, range changes, reconnects.

It owns the digitiser. It never waits on the display, the disk or the generator (which
has a thread of its own, :mod:`tankside.monitor.live.generator`): each trace goes into
a bounded queue, and a full queue blocks it (throttling acquisition; nothing is
dropped). Before each acquisition it carries out the range change the processing stage
asked for, and when ``gate`` is set it first waits until the rules have seen the
previous trace, so that an action decided on trace N takes effect before trace N+1 is
acquired.
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
from .actions import RaisedAlert, SetRange

BACKOFF_S = (0.1, 0.2, 0.5, 1.0, 2.0, 5.0)


@dataclass
class OpenInstrument:
    """A connected instrument: the driver object, its link (resync, close) and identity."""

    device: Any
    link: Any
    identity: str = ""

    def close(self) -> None:
        """Close the link; a link already gone has nothing left to release."""
        self.link.close(quiet=True)


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
    out : queue.Queue
        Bounded queue of :class:`Acquired` and :class:`AcqEvent` items.
    stop : threading.Event
        Set to end the loop after the current acquisition.
    trigger_timeout_s : float
    give_up_s : float
        How long to keep trying to reconnect a lost digitiser.
    max_traces : int or None
    first_seq : int
    gate : bool
        Wait until the rules have seen the previous trace before acquiring the next.
    hold : callable () -> None, optional
        Called before each acquisition; waits (bounded) for a pending generator switch.
    """

    def __init__(self, *, open_digitiser: Callable[[], OpenInstrument], out: queue.Queue,
                 stop: threading.Event, trigger_timeout_s: float, give_up_s: float = 60.0,
                 max_traces: int | None = None, first_seq: int = 0, gate: bool = True,
                 clock: Callable[[], float] = time.time,
                 hold: Callable[[], None] | None = None):
        self.open_digitiser = open_digitiser
        self.out = out
        self.stop = stop
        self.trigger_timeout_s = trigger_timeout_s
        self.give_up_s = give_up_s
        self.max_traces = max_traces
        self.seq = first_seq
        self.gate = gate
        self.clock = clock
        self.digitiser: OpenInstrument | None = None
        self.commands: queue.Queue[SetRange] = queue.Queue()
        # Waits (bounded) for a pending generator switch's first attempt before each
        # acquisition (GeneratorWorker.hold).
        self.hold = hold
        # Set only when nothing downstream reads the queue any more (a fatal error there).
        self.abandon = threading.Event()
        self.connected = False
        self.ended = False
        self.reconnecting = False
        self.last_trigger_mono = time.monotonic()
        self.blocked_s = 0.0          # total time spent waiting on a full queue
        self.blocked_now = False
        self.gate_wait_s = 0.0        # total time spent waiting for the previous verdict
        self.fatal: str | None = None
        self._verdict = threading.Condition()
        self._verdict_seq = first_seq - 1
        self._next_flags: dict = {}
        self._configuration_warned: set[str] = set()

    # -- connection, called from the starting thread before run() --------------
    def connect(self) -> None:
        self.digitiser = self.open_digitiser()
        self.connected = True

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
                if self.hold is not None:
                    self.hold()
                if self.stop.is_set():
                    break
                self._acquire_one()
        except Fatal as err:
            self.fatal = str(err)
        finally:
            self.close_links()

    def close_links(self) -> None:
        _close(self.digitiser)
        self.connected = False
        # closed by the session (its end, or a start that failed), not lost, unless a
        # lost digitiser could not be reconnected (``fatal``)
        self.ended = self.fatal is None

    def event(self, kind: EventKind, detail: dict, alert: RaisedAlert | None = None,
              seq: int | None = None) -> None:
        """Queue an event in order with the traces (blocks while the queue is full).

        Safe to call from another thread (the generator's).
        """
        self._emit(AcqEvent(self.clock(), kind, detail, seq=seq, alert=alert))

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


    def _acquire_one(self) -> None:
        dev = self._digitiser().device
        try:
            raw = dev.acquire(self.seq, trigger_timeout_s=self.trigger_timeout_s)
        except NoTrigger as err:
            self.event(EventKind.NO_TRIGGER, {"message": str(err),
                                       "timeout_s": self.trigger_timeout_s})
            return
        except (ProtocolError, InstrumentTimeout) as err:
            kind = FaultKind.MALFORMED_REPLY if isinstance(err, ProtocolError) \
                else FaultKind.STALLED
            self.event(EventKind.FAULT, {"kind": kind, "message": str(err), "at_seq": self.seq},
                        alert=RaisedAlert("instrument-fault", "warning",
                                          f"digitiser {kind}: {err}"))
            self._recover(err)
            return
        except ConnectionLost as err:
            self.event(EventKind.FAULT, {"kind": FaultKind.CONNECTION_LOST,
                                          "message": str(err), "at_seq": self.seq},
                        alert=RaisedAlert("instrument-fault", "warning", f"digitiser lost: {err}"))
            self._reconnect(err)
            return
        except InstrumentError as err:
            self.event(EventKind.FAULT, {"kind": FaultKind.INSTRUMENT_ERROR,
                                          "message": str(err), "at_seq": self.seq},
                        alert=RaisedAlert("instrument-fault", "warning", f"digitiser: {err}"))
            return
        self.last_trigger_mono = time.monotonic()
        for message in dev.take_warnings():
            if message in self._configuration_warned:
                continue                    # once a session, across reconnects too
            self._configuration_warned.add(message)
            self.event(EventKind.FAULT, {"kind": FaultKind.CONFIGURATION, "message": message,
                                          "at_seq": self.seq},
                        alert=RaisedAlert("instrument-fault", "warning",
                                          f"digitiser configuration: {message}"))
        flags, self._next_flags = self._next_flags, {}
        self.seq += 1
        monitor_error = getattr(raw, "monitor_error", None)
        if monitor_error is not None:
            self._monitor_fault(monitor_error, raw.seq)
        self._emit(Acquired(raw, flags))
        if isinstance(monitor_error, ConnectionLost):
            self._reconnect(monitor_error)
        elif isinstance(monitor_error, ProtocolError | InstrumentTimeout):
            self._recover(monitor_error)
            if self.connected:
                self._drain_after_monitor(raw.seq)

    def _monitor_fault(self, err: Exception, seq: int) -> None:
        """A fault event for a trace whose monitor channel was not fetched (the trace is
        kept); the link is resynchronised or reconnected after the trace is queued."""
        cause = (FaultKind.CONNECTION_LOST if isinstance(err, ConnectionLost)
                 else FaultKind.MALFORMED_REPLY if isinstance(err, ProtocolError)
                 else FaultKind.STALLED if isinstance(err, InstrumentTimeout)
                 else FaultKind.INSTRUMENT_ERROR)
        self.event(EventKind.FAULT, {"kind": FaultKind.MONITOR_CHANNEL, "cause": cause,
                                      "message": str(err), "at_seq": seq},
                   alert=RaisedAlert("instrument-fault", "warning",
                                     f"digitiser monitor channel, trace {seq}: {err}"))

    def _drain_after_monitor(self, seq: int) -> None:
        """Empty the error queue after a monitor fetch that failed, so that an error the
        instrument queued for it (a channel it does not have, say) is recorded with the
        monitor's fault and does not fail the next hydrophone trace."""
        try:
            errors = self._digitiser().link.drain_errors()
        except InstrumentError:
            return      # the next acquisition meets the fault and recovers as usual
        if errors:
            text = "; ".join(f"{code}, {message!r}" for code, message in errors)
            self.event(EventKind.FAULT, {"kind": FaultKind.MONITOR_CHANNEL,
                                          "cause": FaultKind.INSTRUMENT_ERROR,
                                          "message": f"error queue after the monitor fetch: "
                                                     f"{text}", "at_seq": seq})

    def _recover(self, err: Exception) -> None:
        try:
            self._digitiser().link.resync()
        except InstrumentError:
            self._reconnect(err)
            return
        self.event(EventKind.RESYNC, {"after": type(err).__name__})

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
                self.event(EventKind.RECONNECT,
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
        pending: list[SetRange] = []
        while True:
            try:
                pending.append(self.commands.get_nowait())
            except queue.Empty:
                break
        if pending:     # only the newest range asked for counts
            self._set_range(pending[-1].range_v, pending[-1].cause.as_detail())

    def release_all(self) -> None:
        """Nothing downstream judges traces any more: never wait for a verdict again."""
        self.abandon.set()
        self.verdict(_NO_MORE_VERDICTS)

    def _set_range(self, new_v: float, cause: dict) -> None:
        old_v = self.current_range_v()
        if new_v == old_v:
            return
        try:
            self._digitiser().device.set_range(new_v)
        except InstrumentError as err:
            self.event(EventKind.RANGE_CHANGE, {"done": False, "from_v": old_v,
                                                 "to_v": new_v, "error": str(err), **cause},
                        alert=RaisedAlert("auto-range-failed", "warning",
                                          f"range change failed: {err}"))
            return
        self._next_flags = {"range_changed": True, "previous_range_v": old_v}
        new_v = self.current_range_v()      # the span read back, when the profile can
        self.event(EventKind.RANGE_CHANGE, {"done": True, "from_v": old_v, "to_v": new_v,
                                             "before_seq": self.seq, **cause})


def _close(inst: OpenInstrument | None) -> None:
    if inst is not None:
        inst.close()
