"""What works on a stage or a thermometer, tried through its profile (``tankside probe
--stage`` / ``--thermometer``); the rows are those of :mod:`tankside.drivers.probe`.

A stage is only moved when asked (``move_mm``): one axis by a small step and back, and
it is told to stop whatever happens.
"""

from __future__ import annotations

from .errors import InstrumentError
from .probe import Outcome, Row
from .stage import Stage
from .thermometer import Thermometer

__all__ = ["probe_stage", "probe_thermometer", "LARGEST_PROBE_MOVE_MM"]

#: The largest step `probe --move` makes (mm): enough to see an axis respond.
LARGEST_PROBE_MOVE_MM = 1.0


def _try(rows: list[Row], operation: str, command: str, action) -> object:
    try:
        value = action()
    except InstrumentError as err:
        rows.append(Row(operation, command, Outcome.FAILED, str(err.message)))
        return None
    rows.append(Row(operation, command, Outcome.OK, "" if value is None else str(value)))
    return value


def _position_text(position: dict[str, float]) -> str:
    return ", ".join(f"{axis} {mm:.4f} mm" for axis, mm in position.items())


def probe_stage(stage: Stage, *, move_mm: float | None = None,
                settle_timeout_s: float = 30.0) -> list[Row]:
    """Identify, read the position and the moving state; with ``move_mm``, move the
    first axis by it and back (within the stage's soft limits), then stop."""
    rows: list[Row] = []
    commands = stage.profile.commands
    first = stage.profile.axes[0]
    if "identify" in commands:
        _try(rows, "identify", commands["identify"], stage.identify)
    else:
        rows.append(Row("identify", "", Outcome.NOT_TRIED, "the profile has no identify"))
    start = _try(rows, "query_position",
                 commands["query_position"].format(axis=first.address),
                 lambda: _position_text(stage.position()))
    _try(rows, "query_moving", commands["query_moving"].format(axis=first.address),
         lambda: "moving" if stage.is_moving() else "still")
    if move_mm is None:
        rows.append(Row("move_absolute", commands["move_absolute"], Outcome.NOT_TRIED,
                        "moves only with --move"))
    elif start is not None:
        if not 0 < abs(move_mm) <= LARGEST_PROBE_MOVE_MM:
            raise ValueError(f"a probe move is at most {LARGEST_PROBE_MOVE_MM:g} mm, "
                             f"got {move_mm:g}")
        try:
            here = stage.position()[first.name]
            sent = commands["move_absolute"].format(
                axis=first.address, counts=round((here + move_mm) * first.counts_per_mm))
            moved = _try(rows, "move_absolute", sent, lambda: _position_text(
                _move_and_wait(stage, {first.name: here + move_mm}, settle_timeout_s)))
            if moved is not None:
                _try(rows, "move back", commands["move_absolute"].format(
                    axis=first.address, counts=round(here * first.counts_per_mm)),
                    lambda: _position_text(_move_and_wait(stage, {first.name: here},
                                                          settle_timeout_s)))
        finally:
            _try(rows, "stop", commands["stop"].format(axis=first.address), stage.stop)
    if "stop" not in [r.operation for r in rows]:
        _try(rows, "stop", commands["stop"].format(axis=first.address), stage.stop)
    return rows


def _move_and_wait(stage: Stage, target: dict[str, float],
                   timeout_s: float) -> dict[str, float]:
    stage.move_to(target)
    return stage.wait_until_still(timeout_s)


def probe_thermometer(thermometer: Thermometer, *, readings: int = 3) -> list[Row]:
    """Identify, then take a few readings."""
    rows: list[Row] = []
    profile = thermometer.profile
    if profile.identify is not None:
        _try(rows, "identify", profile.identify, thermometer.identify)
    for k in range(readings):
        _try(rows, f"reading {k + 1}", profile.query or "(streaming)",
             lambda: f"{thermometer.read_celsius():.3f} degC")
    return rows
