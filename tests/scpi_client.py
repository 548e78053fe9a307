"""A plain SCPI client for tests: talk to a simulated instrument on a link of its own.

Tests read back what an instrument really did (its output state, its range) through
this, not through tankside's own drivers or flags.
"""

from __future__ import annotations

import socket


def scpi(port: int, *lines: str) -> str:
    """Send lines to the instrument on 127.0.0.1 ``port``; the last one's reply.

    The last line must be a query (the call waits for its reply line).
    """
    with socket.create_connection(("127.0.0.1", port), timeout=2.0) as conn:
        for line in lines:
            conn.sendall(line.encode("ascii") + b"\n")
        reply = b""
        while not reply.endswith(b"\n"):
            chunk = conn.recv(256)
            if not chunk:
                break
            reply += chunk
    return reply.decode("ascii").strip()
