"""A line-oriented instrument session: one command per line, one reply per query.

Stages and thermometers mostly speak a plain line protocol over a serial port (or a raw
TCP socket, which many controllers offer beside it), not SCPI over VISA. This module is
that protocol's small session: :class:`LineSession` writes a command with its
terminator, reads a reply up to its terminator within a timeout, and turns every failure
into a typed error of :mod:`tankside.drivers.errors`. The transport is injected (a
:class:`LineTransport`), so transcript tests give it a scripted fake:

    session = LineSession(SerialTransport("/dev/ttyUSB0", baud_rate=115200),
                          write_terminator="\\r", read_terminator="\\r", timeout_s=0.5)
    session.query("ID?")

Command text is checked as for SCPI instruments (printable ASCII, no ``;``, no line
break: :func:`tankside.drivers.profile.command_text_problem`), so a value filled into a
template never sends a second command.
"""

from __future__ import annotations

import socket
import time
from typing import Protocol

from .errors import ConnectionLost, InstrumentTimeout, ProtocolError
from .profile import command_text_problem

__all__ = ["LineTransport", "SerialTransport", "TcpLineTransport", "LineSession",
           "PARITIES"]

#: Parity names a profile or bench file may use, and pyserial's letters for them.
PARITIES = {"none": "N", "even": "E", "odd": "O"}

_MAX_LINE = 4096        # a reply longer than this is no reply of a line instrument


class LineTransport(Protocol):
    """Bytes in and out; what :class:`LineSession` needs of a serial port or socket."""

    #: Where it is connected, for messages (a device path, ``host:port``).
    name: str

    def write(self, data: bytes) -> None: ...

    def read_until(self, terminator: bytes, timeout_s: float) -> bytes:
        """Bytes up to and including ``terminator``; fewer (without it) on timeout."""
        ...

    def reset_input(self) -> None:
        """Throw away whatever has arrived and not been read."""
        ...

    def close(self) -> None: ...


class SerialTransport:
    """A serial port through pyserial.

    Parameters
    ----------
    port : str
        The device path (``/dev/ttyUSB0``, a pty's ``/dev/pts/N``, ``COM3``).
    baud_rate : int
    parity : str
        ``none``, ``even`` or ``odd``.
    stop_bits : int or float
        1, 1.5 or 2.
    """

    def __init__(self, port: str, *, baud_rate: int = 9600, parity: str = "none",
                 stop_bits: float = 1):
        import serial  # pyserial: imported here so that SCPI-only use never needs it

        self.name = port
        self._serial_error = serial.SerialException
        if parity not in PARITIES:
            raise ValueError(f"parity must be one of {', '.join(PARITIES)}, got {parity!r}")
        try:
            self._port = serial.Serial(port, baudrate=int(baud_rate),
                                       parity=PARITIES[parity], stopbits=stop_bits,
                                       timeout=1.0, write_timeout=2.0)
        except (serial.SerialException, OSError, ValueError) as err:
            raise ConnectionLost(f"cannot open serial port {port}: {err}",
                                 resource=port) from err

    def write(self, data: bytes) -> None:
        try:
            self._port.write(data)
            self._port.flush()
        except (self._serial_error, OSError) as err:
            raise ConnectionLost(f"write failed: {err}", resource=self.name) from err

    def read_until(self, terminator: bytes, timeout_s: float) -> bytes:
        try:
            self._port.timeout = max(timeout_s, 0.0)
            return bytes(self._port.read_until(terminator, _MAX_LINE))
        except (self._serial_error, OSError) as err:
            raise ConnectionLost(f"read failed: {err}", resource=self.name) from err

    def reset_input(self) -> None:
        try:
            self._port.reset_input_buffer()
        except (self._serial_error, OSError) as err:
            raise ConnectionLost(f"reset failed: {err}", resource=self.name) from err

    def close(self) -> None:
        try:
            self._port.close()
        except (self._serial_error, OSError):
            pass   # a port that is gone is closed


class TcpLineTransport:
    """A raw TCP socket (a controller's network port), ``host:port``."""

    def __init__(self, host: str, port: int, *, connect_timeout_s: float = 3.0):
        self.name = f"{host}:{port}"
        self._buffer = bytearray()
        try:
            self._sock = socket.create_connection((host, int(port)), timeout=connect_timeout_s)
        except OSError as err:
            raise ConnectionLost(f"cannot connect: {err}", resource=self.name) from err
        self._sock.setsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY, 1)

    @classmethod
    def from_address(cls, address: str, **kw) -> TcpLineTransport:
        """From ``"host:port"``."""
        host, sep, port = address.rpartition(":")
        if not sep or not host or not port.isdigit() or not 0 < int(port) < 65536:
            raise ValueError(f"expected host:port, got {address!r}")
        return cls(host, int(port), **kw)

    def write(self, data: bytes) -> None:
        try:
            self._sock.sendall(data)
        except OSError as err:
            raise ConnectionLost(f"write failed: {err}", resource=self.name) from err

    def read_until(self, terminator: bytes, timeout_s: float) -> bytes:
        deadline = time.monotonic() + max(timeout_s, 0.0)
        while True:
            end = self._buffer.find(terminator)
            if end >= 0:
                end += len(terminator)
                line = bytes(self._buffer[:end])
                del self._buffer[:end]
                return line
            left = deadline - time.monotonic()
            if left <= 0 or len(self._buffer) >= _MAX_LINE:
                line = bytes(self._buffer)
                self._buffer.clear()
                return line
            try:
                self._sock.settimeout(left)
                chunk = self._sock.recv(4096)
            except TimeoutError:
                continue
            except OSError as err:
                raise ConnectionLost(f"read failed: {err}", resource=self.name) from err
            if not chunk:
                raise ConnectionLost("the instrument closed the connection",
                                     resource=self.name)
            self._buffer += chunk

    def reset_input(self) -> None:
        self._buffer.clear()
        try:
            self._sock.setblocking(False)
            while True:
                if not self._sock.recv(4096):
                    break
        except (BlockingIOError, InterruptedError):
            pass
        except OSError as err:
            raise ConnectionLost(f"reset failed: {err}", resource=self.name) from err
        finally:
            try:
                self._sock.setblocking(True)
            except OSError:
                pass

    def close(self) -> None:
        try:
            self._sock.close()
        except OSError:
            pass


class LineSession:
    """Commands and replies, one line each, over a :class:`LineTransport`.

    Parameters
    ----------
    transport : LineTransport
    write_terminator, read_terminator : str
        What ends a command, and a reply (``"\\r"``, ``"\\n"``, ``"\\r\\n"``).
    timeout_s : float
        How long a reply may take.
    """

    def __init__(self, transport: LineTransport, *, write_terminator: str = "\n",
                 read_terminator: str = "\n", timeout_s: float = 1.0):
        if not read_terminator or not write_terminator:
            raise ValueError("terminators must not be empty")
        self.transport = transport
        self.resource = transport.name
        self._wterm = write_terminator.encode("ascii")
        self._rterm = read_terminator.encode("ascii")
        self.timeout_s = float(timeout_s)
        self.closed = False

    def write(self, line: str) -> None:
        """Send one command line."""
        problem = command_text_problem(line)
        if problem is not None:
            raise ProtocolError(f"command {line!r} {problem}; not sent", resource=self.resource)
        if self.closed:
            raise ConnectionLost("the session is closed", resource=self.resource)
        self.transport.write(line.encode("ascii") + self._wterm)

    def read_line(self, timeout_s: float | None = None, *, command: str | None = None) -> str:
        """One reply line without its terminator, stripped of surrounding blanks."""
        timeout = self.timeout_s if timeout_s is None else timeout_s
        raw = self.transport.read_until(self._rterm, timeout)
        after = f" to {command!r}" if command else ""
        if not raw.endswith(self._rterm):
            if raw:
                raise InstrumentTimeout(f"incomplete reply{after} within {timeout:g} s: "
                                        f"{raw[:80]!r}", resource=self.resource)
            raise InstrumentTimeout(f"no reply{after} within {timeout:g} s",
                                    resource=self.resource)
        try:
            text = raw[:-len(self._rterm)].decode("ascii")
        except UnicodeDecodeError as err:
            raise ProtocolError(f"garbled reply{after}: {raw[:80]!r}",
                                resource=self.resource) from err
        text = text.strip()
        if not text.isprintable():
            raise ProtocolError(f"garbled reply{after}: {raw[:80]!r}", resource=self.resource)
        return text

    def query(self, line: str, timeout_s: float | None = None) -> str:
        """Send ``line`` and return its reply."""
        self.write(line)
        return self.read_line(timeout_s, command=line)

    def resync(self) -> None:
        """Bring replies back in step after a timeout: wait a moment for a late reply and
        throw away whatever arrived."""
        time.sleep(min(0.05, self.timeout_s))
        self.transport.reset_input()

    def close(self) -> None:
        if not self.closed:
            self.closed = True
            self.transport.close()
