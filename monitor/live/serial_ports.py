"""What the session needs of the serial instruments: the stage and the thermometer.

Small protocols matching ``drivers/stage.py`` (``Stage``) and ``drivers/thermometer.py``
(``Thermometer``); the session's workers (:mod:`.stage`, :mod:`.thermometer`) are written
against these, so that tests can hand them in-process fakes and the drivers stay below.
Every method may raise :class:`tankside.drivers.errors.InstrumentError` (a timeout, a lost
connection, a garbled reply, an error the instrument reports).
"""

from __future__ import annotations

from typing import Protocol


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
