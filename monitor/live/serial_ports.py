"""What the session needs of the serial instruments: the stage and the thermometer.

Small protocols matching ``drivers/stage.py`` (``Stage``) and ``drivers/thermometer.py``
(``Thermometer``); the session's workers (:mod:`.stage`, :mod:`.thermometer`) are written
against these, so that tests can hand them in-process fakes and the drivers stay below.
Every method may raise :class:`tankside.drivers.errors.InstrumentError` (a timeout, a lost
connection, a garbled reply, an error the instrument reports).
"""

from __future__ import annotations

import sys
import threading
import time
import traceback
from collections.abc import Callable
from typing import Any, Protocol

from ...drivers.errors import InstrumentError
from ..record.schema import EventKind, FaultKind
from .actions import RaisedAlert


class StagePort(Protocol):
    """A positioning stage; positions in mm, absolute."""

    axes: tuple[str, ...]

    def identify(self) -> str: ...

    def position(self) -> dict[str, float]:
        """Every axis's position, mm."""
        ...

    def move_to(self, target: dict[str, float]) -> None:
        """Start an absolute move of the axes given (mm); returns once it is sent."""
        ...

    def is_moving(self) -> bool: ...

    def stop(self) -> None:
        """Stop at once; never raises for a stage already still."""
        ...

    def close(self) -> None: ...


class ThermometerPort(Protocol):
    """A water thermometer."""

    def identify(self) -> str | None: ...

    def read_celsius(self) -> float:
        """The latest reading, degC."""
        ...

    def close(self) -> None: ...


# -- what the stage and thermometer workers share ---------------------------------------

def close_quietly(port: Any) -> None:
    """Close a serial instrument's line, ignoring a line already gone."""
    try:
        port.close()
    except InstrumentError:
        pass  # a line already gone has nothing left to release


def reconnect_after_pause(stop: threading.Event, backoff_s: tuple[float, ...], attempt: int,
                          lost_at: float, reopen: Callable[[int, float], bool]) -> int | None:
    """One reconnect attempt after the backoff pause for ``attempt``: ``reopen(attempt,
    seconds since lost_at)``; the next attempt's number (0 once the instrument is back),
    or None when the session stopped meanwhile."""
    if stop.wait(backoff_s[min(attempt, len(backoff_s) - 1)]):
        return None
    attempt += 1
    return 0 if reopen(attempt, time.monotonic() - lost_at) else attempt


def report_lost(emit: Callable[[EventKind, dict, RaisedAlert | None], None], seq: int,
                instrument: str, err: Exception, meanwhile: str) -> None:
    """The instrument stopped answering: an ``instrument-lost`` event and alert (what
    acquisition does ``meanwhile``), the worker then reconnects."""
    emit(EventKind.INSTRUMENT_LOST, {"instrument": instrument, "message": str(err),
                                     "at_seq": seq},
         RaisedAlert("instrument-lost", "warning",
                     f"{instrument} lost ({err}); acquisition goes on{meanwhile}, reconnecting"))


def report_back(emit: Callable[[EventKind, dict, RaisedAlert | None], None],
                instrument: str, attempt: int, after_s: float, identity: str) -> None:
    """The instrument answers again: an ``instrument-back`` event."""
    emit(EventKind.INSTRUMENT_BACK, {"instrument": instrument, "attempts": attempt,
                                     "after_s": round(after_s, 3), "identity": identity}, None)


def report_worker_bug(emit: Callable[[EventKind, dict, RaisedAlert | None], None],
                      seq: int, instrument: str, err: Exception) -> None:
    """A bug in a worker's own handling: printed, recorded as a fault and alerted; the
    worker (and acquisition) go on."""
    traceback.print_exc(file=sys.stderr)
    emit(EventKind.FAULT, {"kind": FaultKind.SERIAL_THREAD, "message": repr(err),
                           "at_seq": seq},
         RaisedAlert("instrument-fault", "critical", f"{instrument} handling failed: {err!r}"))
