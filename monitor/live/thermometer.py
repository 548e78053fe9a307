"""The thermometer's own thread, and which water temperature each trace's conversion uses.

The thermometer has a thread and a line of its own: about once a second (``poll_s``) it
is read, and the latest reading is kept with its time. Each trace's conversion uses that
reading when it is no older than ``[thermometer] max_age_s`` (default 30 s) at the trace's
acquisition (:func:`water_for_trace`); otherwise, or when the reading lies outside the
range of the water formulas, it uses the bench file's ``[water] temperature_c`` and the
session says so (a ``water-source`` event and a ``water-reading-old`` alert, once per
change of source).

A thermometer that stops answering (a timeout, a lost connection) is an
``instrument-lost`` event and alert; the line is reopened with a growing pause for as long
as the session runs (``instrument-back`` when it answers again). A garbled reply is a
fault, recorded once until the next good reading. Neither stops acquisition.
"""

from __future__ import annotations

import math
import threading
import time
from collections.abc import Callable
from dataclasses import dataclass

from ...drivers.errors import ConnectionLost, InstrumentError, InstrumentTimeout
from ..acoustics.water import TEMPERATURE_RANGE_C
from ..record.schema import EventKind, FaultKind, WaterSource
from .actions import RaisedAlert
from .serial_ports import (
    ThermometerPort,
    close_quietly,
    reconnect_after_pause,
    report_back,
    report_lost,
    report_worker_bug,
)

POLL_S = 1.0
BACKOFF_S = (0.2, 0.5, 1.0, 2.0, 5.0)
INSTRUMENT = "thermometer"


@dataclass(frozen=True)
class ThermometerReading:
    """One reading: degC, and when it was taken (s since the Unix epoch)."""

    temperature_c: float
    time_s: float


@dataclass(frozen=True)
class WaterChoice:
    """The water temperature a trace's conversion uses, and why.

    ``temperature_c`` is the one used (degC); ``reading_c`` and ``age_s`` the latest
    reading and its age at the trace (None when there is none); ``source`` says which.
    """

    temperature_c: float
    source: WaterSource
    reading_c: float | None
    age_s: float | None
    why: str = ""


def water_for_trace(reading: ThermometerReading | None, at_s: float, *, max_age_s: float,
                    bench_c: float) -> WaterChoice:
    """The temperature for a trace acquired at ``at_s`` (s since the Unix epoch).

    The reading when it is at most ``max_age_s`` old and within the range of the water
    formulas (:data:`~tankside.monitor.acoustics.water.TEMPERATURE_RANGE_C`); else the
    bench temperature ``bench_c``, with ``why``. A reading taken after the trace (by
    the few milliseconds processing follows acquisition) counts as 0 s old.
    """
    if reading is None:
        return WaterChoice(bench_c, WaterSource.BENCH, None, None, "no thermometer reading")
    age_s = max(0.0, float(at_s) - reading.time_s)
    low, high = TEMPERATURE_RANGE_C
    value = reading.temperature_c
    if not (math.isfinite(value) and low <= value <= high):
        return WaterChoice(bench_c, WaterSource.BENCH, value, age_s,
                           f"reading {value!r} degC outside {low:g} to {high:g} degC")
    if age_s > max_age_s:
        return WaterChoice(bench_c, WaterSource.BENCH, value, age_s,
                           f"reading {age_s:.0f} s old (max_age_s {max_age_s:g} s)")
    return WaterChoice(value, WaterSource.THERMOMETER, value, age_s)


class ThermometerWorker:
    """Owns the thermometer's line on a thread of its own.

    Parameters
    ----------
    open_thermometer : callable () -> ThermometerPort
        Opens the line; called again to reconnect.
    emit : callable (kind: EventKind, detail, alert) -> None
    current_seq : callable () -> int
    poll_s : float
        Reading interval, s.
    backoff_s : tuple of float
        Pauses between reconnection attempts, s (the last one repeats).
    clock : callable () -> float
        Seconds since the Unix epoch (the readings' time).
    """

    def __init__(self, *, open_thermometer: Callable[[], ThermometerPort],
                 emit: Callable[[EventKind, dict, RaisedAlert | None], None],
                 current_seq: Callable[[], int], poll_s: float = POLL_S,
                 backoff_s: tuple[float, ...] = BACKOFF_S,
                 clock: Callable[[], float] = time.time):
        self._open = open_thermometer
        self._emit = emit
        self._current_seq = current_seq
        self.poll_s = float(poll_s)
        self.backoff_s = tuple(backoff_s)
        self._clock = clock
        self.port: ThermometerPort | None = None
        self.identity = ""
        self._latest: ThermometerReading | None = None
        self._garbled = False          # a garbled reply recorded, no good one since
        self._stop = threading.Event()
        self._thread: threading.Thread | None = None
        self.ended = False          # stopped by the session (its end)

    @property
    def connected(self) -> bool:
        return self.port is not None

    def latest(self) -> ThermometerReading | None:
        """The latest good reading (kept while the thermometer is lost: it ages)."""
        return self._latest

    def connect(self) -> None:
        """Open the thermometer, identify it and try a first reading (a thermometer with
        nothing to say yet is no error: the traces use the bench temperature until it has).

        Raises InstrumentError when it cannot be opened (the session does not start).
        """
        port = self._open()
        try:
            self.identity = port.identify() or ""
        except BaseException:
            close_quietly(port)
            raise
        self.port = port
        try:
            self._read(port)
        except InstrumentError:
            pass  # no reading yet; the thread goes on asking

    def start(self) -> None:
        self._thread = threading.Thread(target=self._main, name="tankside-thermometer",
                                        daemon=True)
        self._thread.start()

    def stop(self) -> None:
        self._stop.set()
        if self._thread is not None:
            self._thread.join()
        self.close()
        self.ended = True           # closed by the session, not lost

    def close(self) -> None:
        if self.port is not None:
            close_quietly(self.port)
            self.port = None

    def _read(self, port: ThermometerPort) -> None:
        value = float(port.read_celsius())
        self._latest = ThermometerReading(value, self._clock())
        self._garbled = False

    def _main(self) -> None:
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
                self._read(port)
            except (InstrumentTimeout, ConnectionLost) as err:
                lost_at = time.monotonic()
                self.close()
                report_lost(self._emit, self._current_seq(), INSTRUMENT, err, "")
                continue
            except InstrumentError as err:
                if not self._garbled:
                    self._garbled = True
                    self._emit(EventKind.FAULT, {"kind": FaultKind.THERMOMETER_REPLY,
                                                 "message": str(err),
                                                 "at_seq": self._current_seq()},
                               RaisedAlert("instrument-fault", "warning",
                                           f"thermometer reply not understood: {err}"))
            except Exception as err:  # noqa: BLE001 - a bug here must not end acquisition
                report_worker_bug(self._emit, self._current_seq(), "thermometer", err)
            self._stop.wait(self.poll_s)

    def _reopen(self, attempt: int, after_s: float) -> bool:
        try:
            port = self._open()
        except InstrumentError:
            return False
        try:
            identity = port.identify() or ""
        except InstrumentError:
            close_quietly(port)
            return False
        self.port, self.identity = port, identity
        report_back(self._emit, INSTRUMENT, attempt, after_s, identity)
        return True

