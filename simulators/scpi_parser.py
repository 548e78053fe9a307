"""A small SCPI command parser for the simulated instruments (pure).

The parser follows the SCPI 1999.0 standard, volume 1 (syntax and style) and IEEE
488.2-1992 (common commands, status byte and standard event status register) as far
as the simulated instruments need:

- a program message is one line; ``;`` separates commands (not inside quoted strings);
- a header is ``:``-separated mnemonics; each mnemonic has a long form whose upper-case
  letters are its short form (``ACQuire`` answers to ``ACQ`` and ``ACQUIRE``), matched
  case-insensitively; nodes written ``CHANnel#`` take an optional numeric suffix
  (default 1); nodes written ``[:NEXT]`` may be left out;
- after ``;`` a header with no leading ``:`` is tried first from the root and then
  relative to the previous command's path (SCPI 1999.0 vol. 1, 6.2.4);
- a header ending in ``?`` is a query; parameters follow after white space and are
  separated by ``,``;
- errors go into a bounded queue read with ``SYSTem:ERRor[:NEXT]?``; ``0,"No error"``
  when it is empty; on overflow the newest entry becomes ``-350,"Queue overflow"``.

The device base that uses it is :mod:`tankside.simulators.scpi_device`. No sockets,
clocks or threads here.
"""

from __future__ import annotations

import re
from collections import deque
from dataclasses import dataclass

# Standard SCPI error numbers and texts (SCPI 1999.0 vol. 2, chapter 21).
ERROR_TEXTS = {
    0: "No error",
    -100: "Command error",
    -102: "Syntax error",
    -104: "Data type error",
    -108: "Parameter not allowed",
    -109: "Missing parameter",
    -113: "Undefined header",
    -200: "Execution error",
    -221: "Settings conflict",
    -222: "Data out of range",
    -224: "Illegal parameter value",
    -230: "Data corrupt or stale",
    -350: "Queue overflow",
    -363: "Input buffer overrun",
    -410: "Query INTERRUPTED",
}

# Standard event status register bits (IEEE 488.2-1992, 11.5.1).
ESR_OPC = 1 << 0
ESR_QYE = 1 << 2
ESR_DDE = 1 << 3
ESR_EXE = 1 << 4
ESR_CME = 1 << 5

QUEUE_CAPACITY = 20

_HEADER_RE = re.compile(r"^:?(\*[A-Za-z]+\??|[A-Za-z][A-Za-z0-9_]*(:[A-Za-z][A-Za-z0-9_]*)*\??)$")
_NODE_RE = re.compile(r"^([A-Za-z_]+?)(\d*)$")


class ScpiError(Exception):
    """Raised by a handler to put an error into the queue.

    Parameters
    ----------
    code : int
        SCPI error number, e.g. -222.
    detail : str, optional
        Device-dependent text appended after ``;`` in the queue entry.
    """

    def __init__(self, code: int, detail: str = ""):
        self.code = code
        self.detail = detail
        super().__init__(f"{code}: {ERROR_TEXTS.get(code, 'Error')} {detail}".strip())


# ---------------------------------------------------------------- message splitting


def split_outside_quotes(text: str, separator: str) -> list[str]:
    """Split ``text`` on ``separator`` except inside single- or double-quoted strings.

    A doubled quote inside a string stands for the quote itself (IEEE 488.2, 7.7.5),
    which this scanning handles naturally. Raises ``ScpiError(-102)`` on an unclosed quote.
    """
    parts: list[str] = []
    current: list[str] = []
    quote = ""
    for ch in text:
        if quote:
            current.append(ch)
            if ch == quote:
                quote = ""
        elif ch in "\"'":
            quote = ch
            current.append(ch)
        elif ch == separator:
            parts.append("".join(current))
            current = []
        else:
            current.append(ch)
    if quote:
        raise ScpiError(-102, "unterminated string")
    parts.append("".join(current))
    return parts


def split_commands(line: str) -> list[str]:
    """Split one program message into its commands (``;``-separated), stripped, empties dropped."""
    return [part.strip() for part in split_outside_quotes(line, ";") if part.strip()]


@dataclass(frozen=True)
class Command:
    """One parsed command: header nodes as typed, query flag, parameter strings."""

    header: str
    nodes: tuple[str, ...]
    is_query: bool
    is_common: bool
    absolute: bool
    args: tuple[str, ...]


def parse_command(text: str) -> Command:
    """Parse one command (``HEADER[?] [arg[, arg ...]]``); raises ScpiError(-102) on bad syntax."""
    text = text.strip()
    header, _, rest = text.partition(" ")
    if "\t" in header:
        header, _, more = header.partition("\t")
        rest = more + " " + rest
    if not _HEADER_RE.match(header):
        raise ScpiError(-102, f"bad header {header!r}")
    absolute = header.startswith(":")
    body = header.lstrip(":")
    is_query = body.endswith("?")
    body = body.rstrip("?")
    is_common = body.startswith("*")
    nodes = (body.upper(),) if is_common else tuple(body.split(":"))
    rest = rest.strip()
    args: tuple[str, ...] = ()
    if rest:
        pieces = [p.strip() for p in split_outside_quotes(rest, ",")]
        if any(not p for p in pieces):
            raise ScpiError(-109, "empty parameter")
        args = tuple(pieces)
    return Command(header, nodes, is_query, is_common, absolute, args)


# ---------------------------------------------------------------- header patterns


@dataclass(frozen=True)
class Node:
    short: str
    long: str
    suffix: bool
    optional: bool

    def match(self, typed: str) -> int | None:
        """Return the numeric suffix (1 when absent) if ``typed`` names this node, else None."""
        m = _NODE_RE.match(typed)
        if not m:
            return None
        word, digits = m.group(1).upper(), m.group(2)
        if word not in (self.short, self.long):
            return None
        if digits and not self.suffix:
            return None
        return int(digits) if digits else 1


def short_form(mnemonic: str) -> str:
    """The short form of a long mnemonic: its upper-case letters (``ACQuire`` -> ``ACQ``).

    SCPI 1999.0 vol. 1, 6.2.1: the short form is the first four letters, or three when the
    fourth is a vowel; writing the long form in mixed case spells the short form out.
    """
    return "".join(ch for ch in mnemonic if ch.isupper() or ch.isdigit() or ch == "*")


def compile_pattern(pattern: str) -> tuple[Node, ...]:
    """Compile ``"SYSTem:ERRor[:NEXT]"`` or ``"CHANnel#:RANGe"`` into matchable nodes."""
    nodes = []
    for raw in re.findall(r"\[:?[^\]]+\]|[^:\[\]]+", pattern):
        optional = raw.startswith("[")
        word = raw.strip("[]:")
        suffix = word.endswith("#")
        word = word.rstrip("#")
        short = short_form(word) or word.upper()
        nodes.append(Node(short, word.upper(), suffix, optional))
    return tuple(nodes)


def match_nodes(pattern: tuple[Node, ...], typed: tuple[str, ...]) -> tuple[int, ...] | None:
    """Match typed header nodes against a compiled pattern; return the suffixes or None."""
    if not pattern:
        return () if not typed else None
    head, rest = pattern[0], pattern[1:]
    if typed:
        number = head.match(typed[0])
        if number is not None:
            tail = match_nodes(rest, typed[1:])
            if tail is not None:
                return ((number,) if head.suffix else ()) + tail
    if head.optional:
        tail = match_nodes(rest, typed)
        if tail is not None:
            return ((1,) if head.suffix else ()) + tail
    return None


# ---------------------------------------------------------------- parameter helpers


def parse_number(arg: str, *, minimum: float | None = None, maximum: float | None = None,
                 default: float | None = None) -> float:
    """Parse a numeric parameter (also ``MIN``, ``MAX``, ``DEF``); -104 if not a number.

    Range checks are left to the caller, which knows whether to raise -222 or round.
    """
    word = arg.strip().upper()
    keywords = {"MIN": minimum, "MINIMUM": minimum, "MAX": maximum, "MAXIMUM": maximum,
                "DEF": default, "DEFAULT": default}
    keyword_value = keywords.get(word)
    if keyword_value is not None:
        return float(keyword_value)
    try:
        value = float(word)
    except ValueError as err:
        raise ScpiError(-104, f"expected a number, got {arg!r}") from err
    if value != value or value in (float("inf"), float("-inf")):
        raise ScpiError(-104, f"expected a finite number, got {arg!r}")
    return value


def parse_bounded(arg: str, minimum: float, maximum: float, *, default: float | None = None,
                  what: str = "value") -> float:
    """Parse a number and raise -222 (data out of range) outside [minimum, maximum]."""
    value = parse_number(arg, minimum=minimum, maximum=maximum, default=default)
    if not minimum <= value <= maximum:
        raise ScpiError(-222, f"{what} {value:g} outside {minimum:g}..{maximum:g}")
    return value


def parse_integer(arg: str, minimum: int, maximum: int, *, what: str = "value") -> int:
    """Parse an integral number (``10000`` or ``1e4``); -224 if not integral, -222 if outside."""
    value = parse_bounded(arg, minimum, maximum, what=what)
    if value != int(value):
        raise ScpiError(-224, f"{what} must be a whole number, got {arg!r}")
    return int(value)


def parse_bool(arg: str) -> bool:
    """``ON``/``OFF``/``1``/``0`` (SCPI boolean); -224 otherwise."""
    word = arg.strip().upper()
    if word in ("ON", "1"):
        return True
    if word in ("OFF", "0"):
        return False
    try:
        return float(word) != 0.0
    except ValueError as err:
        raise ScpiError(-224, f"expected ON or OFF, got {arg!r}") from err


def parse_choice(arg: str, choices: dict[str, str]) -> str:
    """Match character data against mnemonics given in long form (``{"EXTernal": "EXT"}``).

    Returns the value of the matched key; -224 (illegal parameter value) otherwise.
    """
    typed = arg.strip().strip("\"'")
    for mnemonic, value in choices.items():
        node = compile_pattern(mnemonic)[0]
        m = _NODE_RE.match(typed)
        if m and m.group(1).upper() in (node.short, node.long):
            digits = m.group(2)
            if not digits and not node.suffix:
                return value
            if digits and node.suffix:
                return f"{value}{int(digits)}"
            if node.suffix:
                return f"{value}1"
    raise ScpiError(-224, f"{arg!r} is not one of {', '.join(choices)}")


def expect_args(args: tuple[str, ...], count: int) -> None:
    """-109 when parameters are missing, -108 when there are too many."""
    if len(args) < count:
        raise ScpiError(-109, f"expected {count} parameter(s)")
    if len(args) > count:
        raise ScpiError(-108, f"expected {count} parameter(s), got {len(args)}")


def format_float(value: float) -> str:
    """A float reply that round-trips exactly (``repr``)."""
    return repr(float(value))


def format_block(payload: bytes) -> bytes:
    """IEEE 488.2 definite-length arbitrary block: ``#<n><length><payload>`` (7.7.6)."""
    length = str(len(payload)).encode("ascii")
    if len(length) > 9:
        raise ValueError("block too long for a definite-length header")
    return b"#" + str(len(length)).encode("ascii") + length + payload


# ---------------------------------------------------------------- error queue


class ErrorQueue:
    """The SCPI error/event queue: first in, first out, bounded (SCPI 1999.0 vol. 2, 21.8)."""

    def __init__(self, capacity: int = QUEUE_CAPACITY):
        if capacity < 2:
            raise ValueError("an error queue holds at least two entries")
        self.capacity = capacity
        self._entries: deque[tuple[int, str]] = deque()

    def push(self, code: int, detail: str = "") -> None:
        text = ERROR_TEXTS.get(code, "Device-specific error" if code > 0 else "Error")
        if detail:
            text = f"{text};{detail}"
        if len(self._entries) >= self.capacity:
            self._entries[-1] = (-350, ERROR_TEXTS[-350])
            return
        self._entries.append((code, text))

    def pop(self) -> tuple[int, str]:
        return self._entries.popleft() if self._entries else (0, ERROR_TEXTS[0])

    def clear(self) -> None:
        self._entries.clear()

    def __len__(self) -> int:
        return len(self._entries)

    @staticmethod
    def format(entry: tuple[int, str]) -> str:
        code, text = entry
        text = text.replace(chr(34), chr(39)).encode("ascii", "backslashreplace").decode("ascii")
        return f'{code},"{text}"'
