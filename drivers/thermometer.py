"""A water thermometer described by a TOML profile (``[instrument] kind =
"thermometer"``; template ``drivers/profiles/line/generic-line-thermometer.toml``).

Two kinds of instrument: one that answers a query (``[commands] query``), and one that
prints readings unprompted every so often (``[reading] streaming = true``), of which the
latest line is taken. The reply is parsed by a declared pattern with a named group
``value``; the unit (degC, K, degF) is the profile's, and tankside works in degC.

    thermometer = open_thermometer(load_thermometer_profile("probe.toml"), port="/dev/ttyUSB1")
    thermometer.read_celsius()       # 20.41
"""

from __future__ import annotations

import math
import re
import time
from dataclasses import dataclass
from pathlib import Path

from .errors import InstrumentTimeout, ProtocolError
from .line import LineSession
from .line_profile import (
    LineTransportSettings,
    open_line_session,
    parse_profile_toml,
    parse_transport,
    pattern,
    read_profile_toml,
    table,
)
from .profile import check_keys, command_text_problem, fail, number

__all__ = ["ThermometerProfile", "Thermometer", "load_thermometer_profile",
           "parse_thermometer_profile", "open_thermometer", "UNITS", "to_celsius"]

UNITS = ("degC", "K", "degF")
# Water in a measurement tank: readings outside this are not water temperatures (a
# wrong unit in the profile, a disconnected probe reading its rail) and are refused.
PLAUSIBLE_C = (-5.0, 105.0)


def to_celsius(value: float, unit: str) -> float:
    """``value`` in ``unit`` as degrees Celsius (ITS-90 relations: T/K = t/degC + 273.15;
    t/degF = 9/5 t/degC + 32)."""
    if unit == "degC":
        return value
    if unit == "K":
        return value - 273.15
    if unit == "degF":
        return (value - 32.0) * 5.0 / 9.0
    raise ValueError(f"unknown unit {unit!r}")


@dataclass(frozen=True)
class ThermometerProfile:
    source: str
    description: str
    transport: LineTransportSettings
    identify: str | None
    query: str | None
    reading: re.Pattern
    unit: str
    streaming: bool
    interval_s: float


def parse_thermometer_profile(text: str, source: str = "<text>") -> ThermometerProfile:
    return _from_doc(parse_profile_toml(text, source, "thermometer"), source)


def load_thermometer_profile(path: str | Path) -> ThermometerProfile:
    doc, source = read_profile_toml(path, "thermometer")
    return _from_doc(doc, source)


def _command(source: str, key: str, value) -> str:
    if not isinstance(value, str) or not value.strip():
        raise fail(source, f"[commands] {key}", "expected a non-empty string")
    problem = command_text_problem(value)
    if problem is not None:
        raise fail(source, f"[commands] {key}", f"{value!r} {problem}")
    return value


def _from_doc(doc: dict, source: str) -> ThermometerProfile:
    check_keys(source, "", doc, ("instrument", "transport", "commands", "reading"))
    transport = parse_transport(source, doc)
    commands = table(source, doc, "commands", required=False)
    check_keys(source, "commands", commands, ("identify", "query"))
    reading = table(source, doc, "reading")
    check_keys(source, "reading", reading, ("pattern", "unit", "streaming", "interval_s"))
    streaming = reading.get("streaming", False)
    if not isinstance(streaming, bool):
        raise fail(source, "[reading] streaming", f"expected true or false, got {streaming!r}")
    query = commands.get("query")
    if query is None and not streaming:
        raise fail(source, "[commands] query", "required unless [reading] streaming = true")
    if query is not None and streaming:
        raise fail(source, "[commands] query", "a streaming thermometer is not queried")
    unit = reading.get("unit", "degC")
    if unit not in UNITS:
        raise fail(source, "[reading] unit", f"expected one of {', '.join(UNITS)}, got {unit!r}")
    interval = number(source, "[reading] interval_s", reading.get("interval_s", 1.0),
                      positive=True)
    if "pattern" not in reading:
        raise fail(source, "[reading] pattern", "required")
    identify = commands.get("identify")
    return ThermometerProfile(
        source=source, description=str(doc["instrument"].get("description", "")),
        transport=transport,
        identify=None if identify is None else _command(source, "identify", identify),
        query=None if query is None else _command(source, "query", query),
        reading=pattern(source, "[reading] pattern", reading["pattern"], ("value",)),
        unit=unit, streaming=streaming, interval_s=interval)


class Thermometer:
    """Readings in degC from a thermometer driven through its profile."""

    def __init__(self, session: LineSession, profile: ThermometerProfile):
        self.session = session
        self.profile = profile
        self.resource = session.resource

    def identify(self) -> str | None:
        if self.profile.identify is None:
            return None
        return self.session.query(self.profile.identify)

    def _parse(self, line: str) -> float:
        match = self.profile.reading.match(line)
        if match is None:
            raise ProtocolError(f"reading {line!r} does not match [reading] pattern",
                                resource=self.resource)
        try:
            value = float(match.group("value"))
        except ValueError as err:
            raise ProtocolError(f"reading {match.group('value')!r} is not a number",
                                resource=self.resource) from err
        celsius = to_celsius(value, self.profile.unit) if math.isfinite(value) else value
        if not PLAUSIBLE_C[0] <= celsius <= PLAUSIBLE_C[1]:
            raise ProtocolError(f"reading {line!r} is {celsius:g} degC, not a water "
                                f"temperature (is [reading] unit {self.profile.unit!r} "
                                "right?)", resource=self.resource)
        return celsius

    def read_celsius(self) -> float:
        """The temperature now (queried), or the latest reading printed (streaming)."""
        if self.profile.query is not None:
            return self._parse(self.session.query(self.profile.query))
        # streaming: take every line already waiting, keep the last; wait for one if none
        wait = max(self.session.timeout_s, 2.0 * self.profile.interval_s)
        latest = None
        deadline = time.monotonic() + wait
        while True:
            try:
                # once one line is in, a short wait only lets a line in flight finish
                line = self.session.read_line(0.05 if latest is not None else
                                              max(deadline - time.monotonic(), 0.0))
            except InstrumentTimeout:
                if latest is not None:
                    break
                raise InstrumentTimeout(f"no reading within {wait:g} s",
                                        resource=self.resource) from None
            latest = line
        return self._parse(latest)

    def close(self) -> None:
        self.session.close()


def open_thermometer(profile: ThermometerProfile, *, port: str | None = None,
                     address: str | None = None, baud_rate: int | None = None,
                     timeout_s: float | None = None) -> Thermometer:
    session = open_line_session(profile.transport, port=port, address=address,
                                baud_rate=baud_rate, timeout_s=timeout_s)
    return Thermometer(session, profile)
