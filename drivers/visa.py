"""Opening instruments through pyvisa, and translating pyvisa's errors into ours.

The pure-Python pyvisa-py backend (``"@py"``) is the default; any other VISA
library string (a path to a vendor VISA, ``"@ivi"``, ...) is passed to
``pyvisa.ResourceManager`` unchanged.
"""

from __future__ import annotations

import math
import select
import socket
import time

import pyvisa
from pyvisa import constants

from .errors import ConnectionLost, InstrumentError, InstrumentTimeout
from .pyvisa_py_internals import backend_socket, buffered_socket, pending_buffer

# VISA status codes that mean the link itself is gone (VPP-4.3 status names).
_LINK_GONE = {
    constants.StatusCode.error_connection_lost,
    constants.StatusCode.error_closing_failed,
    constants.StatusCode.error_invalid_object,
    constants.StatusCode.error_resource_not_found,
    constants.StatusCode.error_io,
}


def translate_error(err: BaseException, *, resource: str | None, doing: str) -> InstrumentError:
    """The tankside error for an exception raised by pyvisa or its backend.

    Parameters
    ----------
    err : BaseException
        What pyvisa (or the socket under pyvisa-py) raised.
    resource : str or None
        The resource string, for the message.
    doing : str
        What was being done (``"query 'WAV:DATA?'"``), for the message.

    Returns
    -------
    InstrumentError
        ``InstrumentTimeout`` for a VISA timeout; ``ConnectionLost`` for a refused,
        reset or closed link and any other VISA I/O failure. The caller raises it
        ``from err`` so that the original stays attached.
    """
    if isinstance(err, InstrumentError):
        return err
    if isinstance(err, pyvisa.errors.VisaIOError):
        if err.error_code == constants.StatusCode.error_timeout:
            return InstrumentTimeout(f"timed out during {doing}", resource=resource)
        gone = "link lost" if err.error_code in _LINK_GONE else "VISA I/O failure"
        return ConnectionLost(f"{gone} during {doing}: {err.description}", resource=resource)
    if isinstance(err, TimeoutError | socket.timeout):
        return InstrumentTimeout(f"timed out during {doing}", resource=resource)
    if isinstance(err, OSError):
        return ConnectionLost(f"connection failed during {doing}: {err}", resource=resource)
    if isinstance(err, pyvisa.errors.Error | ValueError):
        return ConnectionLost(f"VISA failure during {doing}: {err}", resource=resource)
    return ConnectionLost(f"unexpected failure during {doing}: {err!r}", resource=resource)


class DirectReader:
    """Exact byte counts read straight from the socket under a pyvisa-py SOCKET resource.

    A block payload of a few hundred kilobytes read through pyvisa-py's ``read`` is
    copied five or six times on its way out (its receive buffer, a slice, ``bytes``,
    pyvisa's own accumulator, ...). Here it is received once, with ``recv_into``, into
    one buffer of the announced size. Bytes pyvisa-py has already received and buffered
    are taken first, so text and block reads can be mixed freely on one resource.
    Only :func:`DirectReader.for_resource` builds one, and only for the pyvisa-py
    backend; any other VISA library reads through VISA as usual.
    """

    def __init__(self, backend, sock: socket.socket):
        self._backend = backend
        self._sock = sock

    @classmethod
    def for_resource(cls, res) -> DirectReader | None:
        """A reader for ``res``, or None when it is not a pyvisa-py socket resource."""
        found = buffered_socket(res)
        if found is None or not hasattr(socket, "MSG_DONTWAIT"):   # not on Windows
            return None
        return cls(*found)

    def read_exactly(self, count: int, timeout_s: float | None) -> bytearray:
        """Exactly ``count`` bytes, waiting at most ``timeout_s`` s in all (None: no limit).

        Raises
        ------
        TimeoutError
            Fewer than ``count`` bytes arrived in time; those that did are consumed.
        ConnectionResetError
            The instrument closed the connection before ``count`` bytes arrived.
        """
        out = bytearray(count)
        with memoryview(out) as view:
            # pyvisa-py replaces its buffer object on every read: look it up each time
            pending = pending_buffer(self._backend)
            got = min(len(pending), count) if pending is not None else 0
            if pending is not None and got:
                view[:got] = pending[:got]
                del pending[:got]
            deadline = None
            if timeout_s is not None and math.isfinite(timeout_s):
                deadline = time.monotonic() + timeout_s
            sock = self._sock
            while got < count:
                try:
                    n = sock.recv_into(view[got:], count - got, socket.MSG_DONTWAIT)
                except (BlockingIOError, InterruptedError):
                    wait = None if deadline is None else max(0.0, deadline - time.monotonic())
                    if not select.select([sock], [], [], wait)[0]:
                        raise TimeoutError(f"{got} of {count} bytes arrived in time") from None
                    continue
                if n == 0:
                    raise ConnectionResetError(
                        f"connection closed by the instrument after {got} of {count} bytes")
                got += n
        return out


def peer_closed(res) -> bool:
    """True when the far end of a pyvisa-py socket has closed the connection.

    pyvisa-py reads an orderly close as "no data yet" and waits out the timeout, so
    a dropped link would otherwise look like a slow instrument.
    """
    sock = backend_socket(res)
    if sock is None:
        return False
    try:
        data = sock.recv(1, socket.MSG_PEEK | socket.MSG_DONTWAIT)
    except (BlockingIOError, InterruptedError):
        return False
    except OSError:
        return True
    return data == b""


def _check_socket_connected(res) -> None:
    """Fail now, not at the first write, when a pyvisa-py socket connect was refused.

    pyvisa-py opens TCPIP SOCKET resources with a non-blocking connect and reports
    success even when the peer refuses; the socket it keeps is reachable only through
    the backend's session table, so this check applies to that backend alone.
    """
    sock = backend_socket(res)
    if sock is not None:
        code = sock.getsockopt(socket.SOL_SOCKET, socket.SO_ERROR)
        if code:
            raise ConnectionRefusedError(code, "connection refused")
        sock.getpeername()


def open_resource(resource: str, *, visa_library: str = "@py", timeout_s: float = 5.0,
                  read_termination: str = "\n", write_termination: str = "\n"):
    """Open a message-based VISA resource.

    Parameters
    ----------
    resource : str
        VISA resource string, e.g. ``"TCPIP0::127.0.0.1::5025::SOCKET"``.
    visa_library : str
        Passed to ``pyvisa.ResourceManager``; ``"@py"`` selects pyvisa-py.
    timeout_s : float
        I/O timeout, s.
    read_termination, write_termination : str
        Message terminators.

    Returns
    -------
    pyvisa.resources.MessageBasedResource

    Raises
    ------
    ConnectionLost
        The library cannot be loaded, the resource string is bad, or the instrument
        does not answer the connection.
    """
    if timeout_s <= 0:
        raise ValueError(f"timeout_s must be positive, got {timeout_s}")
    try:
        manager = pyvisa.ResourceManager(visa_library)
    except (OSError, ValueError, pyvisa.errors.Error) as err:
        raise ConnectionLost(f"cannot load VISA library {visa_library!r}: {err}",
                             resource=resource) from err
    try:
        res = manager.open_resource(resource, timeout=round(timeout_s * 1000),
                                    open_timeout=round(timeout_s * 1000),
                                    read_termination=read_termination,
                                    write_termination=write_termination)
    except Exception as err:  # noqa: BLE001 - pyvisa-py raises bare Exception on connect
        raise translate_error(err, resource=resource, doing="open") from err
    try:
        _check_socket_connected(res)
        _disable_nagle(res)
    except OSError as err:
        res.close()
        raise translate_error(err, resource=resource, doing="open") from err
    return res


def _disable_nagle(res) -> None:
    """Send each command at once (TCP_NODELAY) on socket resources.

    With Nagle's algorithm a command that has no reply (``INIT``) holds back the next
    one until the instrument's delayed acknowledgement, about 40 ms on Linux, which
    caps a polled acquisition at some 20 traces/s. pyvisa-py 0.8 does not apply
    ``VI_ATTR_TCPIP_NODELAY`` ("unknown attribute"), so its socket is set directly.
    """
    sock = backend_socket(res)
    if sock is not None:
        sock.setsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY, 1)
        return
    if getattr(res, "interface_type", None) == constants.InterfaceType.tcpip:
        try:
            res.set_visa_attribute(constants.ResourceAttribute.tcpip_nodelay, constants.VI_TRUE)
        except pyvisa.errors.Error:
            pass  # not every VISA exposes the attribute; commands are then only slower


def flush_input(res, *, quiet_s: float = 0.05, limit_s: float = 2.0) -> None:
    """Discard input already received or arriving until the line is quiet for ``quiet_s``.

    On pyvisa-py sockets this is done here rather than with ``viClear``: that backend's
    clear loops without end on a socket the peer has closed (every select() says
    readable, every recv() returns nothing) and has no time limit on a flood. Other
    backends get the VISA device clear.

    Raises
    ------
    ConnectionLost
        The peer has closed the connection.
    """
    found = buffered_socket(res)
    if found is None:
        res.clear()
        return
    backend, sock = found
    pending = pending_buffer(backend)
    if pending is not None:
        pending.clear()
    deadline = time.monotonic() + limit_s
    while time.monotonic() < deadline:
        readable, _, _ = select.select([sock], [], [], quiet_s)
        if not readable:
            return
        if not sock.recv(1 << 20):
            raise ConnectionLost("connection closed by the instrument",
                                 resource=getattr(res, "resource_name", None))
