"""The base of a pure SCPI device model: ``handle(line) -> bytes | None``.

Device models subclass :class:`ScpiDevice` and register a handler per header;
``handle(line)`` takes one program message and returns the reply bytes (terminated by
``\\n``) or None when the message held no query. Parsing is
:mod:`tankside.simulators.scpi_parser`; no sockets, clocks or threads here.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

from .scpi_parser import (
    ESR_CME,
    ESR_DDE,
    ESR_EXE,
    ESR_OPC,
    ESR_QYE,
    Command,
    ErrorQueue,
    Node,
    ScpiError,
    compile_pattern,
    expect_args,
    format_float,
    match_nodes,
    parse_command,
    parse_integer,
    split_commands,
)

Handler = Callable[[tuple[str, ...], tuple[int, ...]], object]
Interceptor = Callable[[str, bool], "tuple[int, str, bool] | None"]


@dataclass
class _Entry:
    pattern: str
    nodes: tuple[Node, ...]
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
        """Register a header;
        ``write(args, suffixes)`` and/or ``query(args, suffixes) -> reply``."""
        self._table.append(_Entry(pattern, compile_pattern(pattern), write, query))

    def lookup(self, nodes: tuple[str, ...]) -> tuple[_Entry, tuple[int, ...]] | None:
        for entry in self._table:
            suffixes = match_nodes(entry.nodes, nodes)
            if suffixes is not None:
                return entry, suffixes
        return None

    def canonical(self, header: str) -> str | None:
        """The registered pattern a typed header resolves to (``"acq:poin?"`` ->
        ``"ACQuire:POINts"``)."""
        try:
            command = parse_command(header)
        except ScpiError:
            return None
        if command.is_common:
            return command.nodes[0]
        found = self.lookup(command.nodes)
        return found[0].pattern if found else None

    # --- query handlers of plain settings (the query takes no parameters)
    @staticmethod
    def text_reply(value_of: Callable[[tuple[int, ...]], object]) -> Handler:
        """A query handler replying ``str(value_of(suffixes))``."""
        def reply(args: tuple[str, ...], suffixes: tuple[int, ...]) -> str:
            expect_args(args, 0)
            return str(value_of(suffixes))
        return reply

    @staticmethod
    def number_reply(value_of: Callable[[tuple[int, ...]], float]) -> Handler:
        """A query handler replying ``value_of(suffixes)`` as an SCPI number."""
        def reply(args: tuple[str, ...], suffixes: tuple[int, ...]) -> str:
            expect_args(args, 0)
            return format_float(value_of(suffixes))
        return reply

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
