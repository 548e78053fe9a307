"""The one module that touches private parts of the pyvisa-py backend.

Written against pyvisa-py 0.7 and 0.8 (checked with 0.8.1, under pyvisa 1.16). pyvisa
gives no public way to the socket under a TCPIP SOCKET resource, and pyvisa-py needs
that socket for four things tankside does:

- switch Nagle's algorithm off (pyvisa-py 0.8 ignores ``VI_ATTR_TCPIP_NODELAY``), which
  otherwise caps a polled acquisition at some 20 traces/s;
- find a refused connection at open time (pyvisa-py connects without blocking and
  reports success) and a peer that has closed (pyvisa-py reads it as "no data yet");
- read a block payload straight into one buffer, taking first what pyvisa-py has
  already received and buffered (its own path copies a large block five or six times);
- clear pending input with a time limit (pyvisa-py's ``viClear`` loops without end on
  a socket the peer has closed).

What is used, and nothing else:

``resource.visalib.sessions``
    pyvisa-py's table from a session handle (``resource.session``) to its session
    object.
``session.interface``
    The connected ``socket.socket`` of a TCPIP SOCKET session.
``session._pending_buffer``
    The ``bytearray`` of bytes received but not yet returned; pyvisa-py replaces the
    object on every read, so it is looked up each time.
``session.max_recv_size``
    The most a single ``recv`` asks for (``int``); raised for large blocks.

Every function answers None (or does nothing) for a resource of another VISA library
or a pyvisa-py without the attribute, so tankside still works through plain VISA
calls, only slower and with weaker link checks. ``tests/test_pyvisa_py_internals.py``
fails, naming the attribute and the installed version, when pyvisa-py no longer has
one of them; pyproject.toml caps pyvisa-py below the next minor release for that
reason.
"""

from __future__ import annotations

import socket
from importlib import metadata
from typing import Any


def installed_version() -> str:
    """The installed pyvisa-py's version, or "not installed"."""
    try:
        return metadata.version("pyvisa-py")
    except metadata.PackageNotFoundError:
        return "not installed"


def backend_session(res: Any) -> Any | None:
    """pyvisa-py's session object for the resource ``res``, or None for other backends."""
    sessions = getattr(getattr(res, "visalib", None), "sessions", None)
    if not isinstance(sessions, dict):
        return None
    return sessions.get(getattr(res, "session", None))


def backend_socket(res: Any) -> socket.socket | None:
    """The socket under a pyvisa-py TCPIP SOCKET resource, or None for other backends."""
    sock = getattr(backend_session(res), "interface", None)
    return sock if isinstance(sock, socket.socket) else None


def pending_buffer(session: Any) -> bytearray | None:
    """The bytes pyvisa-py has received for ``session`` and not yet returned, or None.

    This is pyvisa-py's own object: what is deleted from it is taken from pyvisa-py.
    Look it up again after any read through VISA, which replaces it.
    """
    buffer = getattr(session, "_pending_buffer", None)
    return buffer if isinstance(buffer, bytearray) else None


def buffered_socket(res: Any) -> tuple[Any, socket.socket] | None:
    """``(session, socket)`` of a pyvisa-py SOCKET resource that keeps its own receive
    buffer (see :func:`pending_buffer`), or None for anything else."""
    session = backend_session(res)
    sock = backend_socket(res)
    if sock is None or pending_buffer(session) is None:
        return None
    return session, sock


def raise_recv_size(res: Any, at_least: int) -> None:
    """Make pyvisa-py's reads on ``res`` ask for at least ``at_least`` bytes at a time.

    Nothing happens on other backends.
    """
    session = backend_session(res)
    size = getattr(session, "max_recv_size", None)
    if session is not None and isinstance(size, int):
        session.max_recv_size = max(size, at_least)


def missing(res: Any) -> list[str]:
    """What of the above an open pyvisa-py TCPIP SOCKET resource ``res`` lacks.

    One line per attribute, naming it and what was found instead; empty when all is
    there. For the test that guards this module, not for use at run time.
    """
    problems = []
    sessions = getattr(getattr(res, "visalib", None), "sessions", None)
    if not isinstance(sessions, dict):
        problems.append(f"resource.visalib.sessions: expected dict, found "
                        f"{type(sessions).__name__}")
        return problems
    session = sessions.get(getattr(res, "session", None))
    if session is None:
        problems.append("resource.visalib.sessions has no entry for resource.session")
        return problems
    kind = type(session).__name__
    checks = (("interface", socket.socket), ("_pending_buffer", bytearray),
              ("max_recv_size", int))
    for name, wanted in checks:
        value = getattr(session, name, None)
        if not isinstance(value, wanted):
            problems.append(f"{kind}.{name}: expected {wanted.__name__}, found "
                            f"{type(value).__name__}")
    return problems
