"""A small SCPI command parser and device base class for the simulated instruments (pure).

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

Device models subclass :class:`ScpiDevice` and register handlers; ``handle(line)`` takes
one program message and returns the reply bytes (terminated by ``\\n``) or None when
the message held no query. No sockets, clocks or threads here.
"""

from __future__ import annotations

import re
from collections import deque
from collections.abc import Callable
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
class _Node:
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


def compile_pattern(pattern: str) -> tuple[_Node, ...]:
    """Compile ``"SYSTem:ERRor[:NEXT]"`` or ``"CHANnel#:RANGe"`` into matchable nodes."""
    nodes = []
    for raw in re.findall(r"\[:?[^\]]+\]|[^:\[\]]+", pattern):
        optional = raw.startswith("[")
        word = raw.strip("[]:")
        suffix = word.endswith("#")
        word = word.rstrip("#")
        short = short_form(word) or word.upper()
        nodes.append(_Node(short, word.upper(), suffix, optional))
    return tuple(nodes)


def match_nodes(pattern: tuple[_Node, ...], typed: tuple[str, ...]) -> tuple[int, ...] | None:
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


# ---------------------------------------------------------------- device base

Handler = Callable[[tuple[str, ...], tuple[int, ...]], object]
Interceptor = Callable[[str, bool], "tuple[int, str, bool] | None"]


@dataclass
class _Entry:
    pattern: str
    nodes: tuple[_Node, ...]
    write: Handler | None
    query: Handler | None


class ScpiDevice:
    """Base class of a pure SCPI device model: ``handle(line) -> bytes | None``.

    Subclasses call :meth:`add` for each header and override :meth:`identity`,
    :meth:`reset` and, if operations take time, :meth:`wait_pending`.

    ``interceptor`` (optional) is called before each command with the canonical
    pattern and the query flag; it returns None or ``(code, detail, execute)`` to put
    an error in the queue and, if ``execute`` is False, skip the command. Fault
    injection uses it; the device knows nothing else about faults.
    """

    def __init__(self) -> None:
        self.errors = ErrorQueue()
        self.esr = 0
        self.ese = 0
        self.sre = 0
        self.interceptor: Interceptor | None = None
        self._table: list[_Entry] = []
        self.add("SYSTem:ERRor[:NEXT]", query=lambda a, s: self._error_next(a))
        self.add("SYSTem:ERRor:COUNt", query=lambda a, s: str(len(self.errors)))
        self.add("SYSTem:VERSion", query=lambda a, s: "1999.0")

    # --- registration and lookup
    def add(self, pattern: str, *, write: Handler | None = None,
            query: Handler | None = None) -> None:
        """Register a header; ``write(args, suffixes)`` and/or
        ``query(args, suffixes) -> reply``."""
        self._table.append(_Entry(pattern, compile_pattern(pattern), write, query))

    def lookup(self, nodes: tuple[str, ...]) -> tuple[_Entry, tuple[int, ...]] | None:
        for entry in self._table:
            suffixes = match_nodes(entry.nodes, nodes)
            if suffixes is not None:
                return entry, suffixes
        return None

    def canonical(self, header: str) -> str | None:
        """The registered pattern a typed header resolves to
        (``"acq:poin?"`` -> ``"ACQuire:POINts"``)."""
        try:
            command = parse_command(header)
        except ScpiError:
            return None
        if command.is_common:
            return command.nodes[0]
        found = self.lookup(command.nodes)
        return found[0].pattern if found else None

    # --- replies of plain setting queries (no parameters allowed)
    @staticmethod
    def _q(args: tuple[str, ...], value) -> str:
        expect_args(args, 0)
        return str(value)

    @staticmethod
    def _qf(args: tuple[str, ...], value: float) -> str:
        expect_args(args, 0)
        return format_float(value)

    # --- to override
    def identity(self) -> str:
        return "TANKSIDE,SIMULATED,0,0"

    def reset(self) -> None:
        """``*RST``: settings to their defaults (the error queue is kept, IEEE 488.2 10.32)."""

    def wait_pending(self) -> bool:
        """Block until pending operations are complete (``*WAI``, ``*OPC?``).

        Returns False when the wait was given up (the device is shutting down, or the
        operation can never finish); ``*OPC?`` then sends no reply, as a real
        instrument whose operation never completes would not.
        """
        return True

    # --- errors
    def push_error(self, code: int, detail: str = "") -> None:
        self.errors.push(code, detail)
        if -199 <= code <= -100:
            self.esr |= ESR_CME
        elif -299 <= code <= -200:
            self.esr |= ESR_EXE
        elif -399 <= code <= -300:
            self.esr |= ESR_DDE
        elif -499 <= code <= -400:
            self.esr |= ESR_QYE

    def _error_next(self, args: tuple[str, ...]) -> str:
        expect_args(args, 0)
        return ErrorQueue.format(self.errors.pop())

    def status_byte(self) -> int:
        """IEEE 488.2 status byte: bit 2 error queue not empty (SCPI), bit 5 ESB."""
        stb = 0
        if len(self.errors):
            stb |= 1 << 2
        if self.esr & self.ese:
            stb |= 1 << 5
        return stb

    # --- common commands (IEEE 488.2-1992, chapter 10)
    def _common(self, command: Command) -> object:
        name, q, args = command.nodes[0], command.is_query, command.args
        if name == "*IDN" and q:
            expect_args(args, 0)
            return self.identity()
        if name == "*RST" and not q:
            expect_args(args, 0)
            self.reset()
            return None
        if name == "*CLS" and not q:
            expect_args(args, 0)
            self.errors.clear()
            self.esr = 0
            return None
        if name == "*OPC":
            expect_args(args, 0)
            if not self.wait_pending():
                return None
            if q:
                return "1"
            self.esr |= ESR_OPC
            return None
        if name == "*WAI" and not q:
            expect_args(args, 0)
            self.wait_pending()
            return None
        if name == "*ESR" and q:
            expect_args(args, 0)
            value, self.esr = self.esr, 0
            return str(value)
        if name == "*STB" and q:
            expect_args(args, 0)
            return str(self.status_byte())
        if name in ("*ESE", "*SRE"):
            attr = name[1:].lower()
            if q:
                expect_args(args, 0)
                return str(getattr(self, attr))
            expect_args(args, 1)
            setattr(self, attr, parse_integer(args[0], 0, 255, what=name))
            return None
        raise ScpiError(-113, command.header)

    # --- the entry point
    def handle(self, line: str | bytes) -> bytes | None:
        """Execute one program message; return the reply line (bytes, ``\\n``-ended) or None."""
        if isinstance(line, bytes):
            line = line.decode("latin-1")
        if not line.isascii():
            # A program message is 7-bit ASCII (IEEE 488.2, 7.4); no sense can be made of it.
            self.push_error(-100, "non-ASCII byte in the message")
            return None
        line = line.strip("\r\n")
        replies: list[bytes] = []
        try:
            commands = split_commands(line)
        except ScpiError as err:
            self.push_error(err.code, err.detail)
            return None
        path: tuple[str, ...] = ()
        for text in commands:
            try:
                command = parse_command(text)
                reply, path = self._execute(command, path)
            except ScpiError as err:
                self.push_error(err.code, err.detail)
                if -199 <= err.code <= -100:
                    # A command error leaves the parser unsure of the rest of the message.
                    break
                continue
            if reply is not None:
                replies.append(reply if isinstance(reply, bytes) else str(reply).encode("ascii"))
        if not replies:
            return None
        return b";".join(replies) + b"\n"

    def _execute(self, command: Command, path: tuple[str, ...]) -> tuple[object, tuple[str, ...]]:
        if command.is_common:
            canonical = command.nodes[0]
            hit = self._check_interceptor(canonical, command.is_query)
            if hit is False:
                return None, path
            return self._common(command), path
        found = self.lookup(command.nodes)
        nodes = command.nodes
        if found is None and path and not command.absolute:
            nodes = path + command.nodes
            found = self.lookup(nodes)
        if found is None:
            raise ScpiError(-113, command.header)
        entry, suffixes = found
        new_path = nodes[:-1]
        if self._check_interceptor(entry.pattern, command.is_query) is False:
            return None, new_path
        handler = entry.query if command.is_query else entry.write
        if handler is None:
            # The header exists but not in this form (a query-only header written, or v.v.).
            raise ScpiError(-113, f"{command.header} {'query' if command.is_query else 'command'}"
                                  " form not supported")
        return handler(command.args, suffixes), new_path

    def _check_interceptor(self, canonical: str, is_query: bool) -> bool:
        if self.interceptor is None:
            return True
        hit = self.interceptor(canonical, is_query)
        if hit is None:
            return True
        code, detail, execute = hit
        self.push_error(code, detail)
        return bool(execute)
