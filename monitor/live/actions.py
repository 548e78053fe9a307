"""What the processing stage asks of the instruments, and alerts raised at the instruments.

Alert actions that touch an instrument (``safe-off``, ``auto-range``) cross from the
processing thread to the acquisition thread as these small typed commands; the
acquisition thread carries them out before it acquires the next trace (safe-off
first, then the newest range change). :class:`RaisedAlert` travels the other way,
inside an acquisition event, when something at the instruments should also raise an
alert (a safe-off that failed, an instrument fault).
"""

from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True)
class Cause:
    """The firing that asked for an action: its rule and the trace it was judged on."""

    rule: str
    seq: int | None

    def as_detail(self) -> dict:
        """The cause as recorded in an event's detail (``{"rule": ..., "seq": ...}``)."""
        return {"rule": self.rule, "seq": self.seq}


@dataclass(frozen=True)
class SafeOff:
    """Switch the generator output off and read it back."""

    cause: Cause


@dataclass(frozen=True)
class SetRange:
    """Set the digitiser's vertical range to ``range_v`` (span, V)."""

    range_v: float
    cause: Cause


InstrumentAction = SafeOff | SetRange


@dataclass(frozen=True)
class RaisedAlert:
    """An alert raised at the instruments (recorded; it has no actions of its own)."""

    rule: str
    severity: str
    message: str
