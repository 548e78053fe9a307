"""What stage and thermometer profiles share: the ``[transport]`` table of a line
instrument, reply patterns, and opening a :class:`~tankside.drivers.line.LineSession`.

A line instrument is reached by a serial device path (``port``) or a raw TCP
``address`` (``host:port``); the bench file says which, the profile gives the serial
settings and terminators. Every problem in a profile is a
:class:`~tankside.drivers.errors.ProfileError` naming the file and the key.
"""

from __future__ import annotations

import re
import tomllib
from dataclasses import dataclass
from pathlib import Path

from .errors import ProfileError
from .line import PARITIES, LineSession, SerialTransport, TcpLineTransport
from .profile import check_keys, fail, number

__all__ = ["LineTransportSettings", "read_profile_toml", "parse_profile_toml",
           "parse_transport", "pattern", "open_line_session", "fail", "check_keys", "number",
           "table"]

_TERMINATORS = ("\n", "\r", "\r\n")


@dataclass(frozen=True)
class LineTransportSettings:
    """Serial settings, terminators and reply timeout of a line instrument."""

    baud_rate: int = 9600
    parity: str = "none"
    stop_bits: float = 1
    write_terminator: str = "\n"
    read_terminator: str = "\n"
    timeout_s: float = 1.0


def table(source: str, doc: dict, name: str, required: bool = True) -> dict:
    value = doc.get(name)
    if value is None:
        if required:
            raise fail(source, f"[{name}]", "missing table")
        return {}
    if not isinstance(value, dict):
        raise fail(source, f"[{name}]", "expected a table")
    return value


def read_profile_toml(path: str | Path, kind: str) -> tuple[dict, str]:
    """The TOML document of profile ``path`` and its source name, with ``[instrument]
    kind`` checked to be ``kind``."""
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as err:
        raise ProfileError(f"{path}: cannot read: {err}") from err
    return parse_profile_toml(text, str(path), kind), str(path)


def parse_profile_toml(text: str, source: str, kind: str) -> dict:
    try:
        doc = tomllib.loads(text)
    except tomllib.TOMLDecodeError as err:
        raise ProfileError(f"{source}: not valid TOML: {err}") from err
    instrument = table(source, doc, "instrument")
    check_keys(source, "instrument", instrument, ("kind", "description"))
    if instrument.get("kind") != kind:
        raise fail(source, "[instrument] kind", f"expected {kind!r}, got "
                   f"{instrument.get('kind')!r}")
    return doc


def parse_transport(source: str, doc: dict) -> LineTransportSettings:
    """The ``[transport]`` table (all keys optional)."""
    t = table(source, doc, "transport", required=False)
    check_keys(source, "transport", t, ("baud_rate", "parity", "stop_bits",
                                        "write_terminator", "read_terminator", "timeout_s"))
    defaults = LineTransportSettings()
    baud = t.get("baud_rate", defaults.baud_rate)
    if isinstance(baud, bool) or not isinstance(baud, int) or not 50 <= baud <= 10_000_000:
        raise fail(source, "[transport] baud_rate", f"expected a whole number of baud from "
                   f"50 to 10000000, got {baud!r}")
    parity = t.get("parity", defaults.parity)
    if parity not in PARITIES:
        raise fail(source, "[transport] parity", f"expected one of {', '.join(PARITIES)}, "
                   f"got {parity!r}")
    stop_bits = t.get("stop_bits", defaults.stop_bits)
    if stop_bits not in (1, 1.5, 2) or isinstance(stop_bits, bool):
        raise fail(source, "[transport] stop_bits", f"expected 1, 1.5 or 2, got {stop_bits!r}")
    terminators = {}
    for key in ("write_terminator", "read_terminator"):
        value = t.get(key, getattr(defaults, key))
        if value not in _TERMINATORS:
            raise fail(source, f"[transport] {key}",
                       f"expected one of \"\\n\", \"\\r\", \"\\r\\n\", got {value!r}")
        terminators[key] = value
    timeout = number(source, "[transport] timeout_s", t.get("timeout_s", defaults.timeout_s),
                     positive=True)
    if timeout > 60:
        raise fail(source, "[transport] timeout_s", f"expected at most 60 s, got {timeout:g}")
    return LineTransportSettings(baud_rate=baud, parity=parity, stop_bits=stop_bits,
                                 timeout_s=timeout, **terminators)


def pattern(source: str, key: str, value, groups: tuple[str, ...]) -> re.Pattern:
    """A reply pattern: a regular expression with the named ``groups``."""
    if not isinstance(value, str) or not value:
        raise fail(source, key, "expected a regular expression (a non-empty string)")
    try:
        compiled = re.compile(value)
    except re.error as err:
        raise fail(source, key, f"not a regular expression: {err}") from err
    missing = [g for g in groups if g not in compiled.groupindex]
    if missing:
        raise fail(source, key, f"pattern {value!r} has no named group "
                   f"{', '.join('(?P<' + g + '>...)' for g in missing)}")
    return compiled


def open_line_session(settings: LineTransportSettings, *, port: str | None = None,
                      address: str | None = None, baud_rate: int | None = None,
                      timeout_s: float | None = None) -> LineSession:
    """A session on the serial ``port`` or the TCP ``address`` (exactly one of them)."""
    if (port is None) == (address is None):
        raise ValueError("give exactly one of port (serial) and address (host:port)")
    transport: SerialTransport | TcpLineTransport
    if port is not None:
        transport = SerialTransport(port, baud_rate=baud_rate or settings.baud_rate,
                                    parity=settings.parity, stop_bits=settings.stop_bits)
    else:
        assert address is not None
        transport = TcpLineTransport.from_address(address)
    return LineSession(transport, write_terminator=settings.write_terminator,
                       read_terminator=settings.read_terminator,
                       timeout_s=settings.timeout_s if timeout_s is None else timeout_s)
