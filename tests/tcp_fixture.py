"""A tiny line-based TCP server on 127.0.0.1 for transport tests of the drivers.

``handler(line: bytes) -> bytes | None | callable`` gives the reply for each received
line; a callable is called with the client socket (to stall, send partial data, or
close). It serves one client at a time, in a thread, and stops on ``close()``.
"""

from __future__ import annotations

import socket
import threading


class LineServer:
    def __init__(self, handler):
        self.handler = handler
        self.sock = socket.create_server(("127.0.0.1", 0))
        self.sock.settimeout(0.2)
        self.port = self.sock.getsockname()[1]
        self.resource = f"TCPIP0::127.0.0.1::{self.port}::SOCKET"
        self.received: list[bytes] = []
        self.connections = 0
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._serve, daemon=True)
        self._thread.start()

    def _serve(self):
        while not self._stop.is_set():
            try:
                conn, _ = self.sock.accept()
            except TimeoutError:
                continue
            except OSError:
                return
            self.connections += 1
            with conn:
                self._talk(conn)

    def _talk(self, conn):
        conn.settimeout(0.2)
        pending = b""
        while not self._stop.is_set():
            try:
                data = conn.recv(65536)
            except TimeoutError:
                continue
            except OSError:
                return
            if not data:
                return
            pending += data
            while b"\n" in pending:
                line, pending = pending.split(b"\n", 1)
                self.received.append(line)
                reply = self.handler(line)
                if callable(reply):
                    if reply(conn) == "closed":
                        return
                elif reply:
                    try:
                        conn.sendall(reply)
                    except OSError:
                        return

    def close(self):
        self._stop.set()
        self.sock.close()
        self._thread.join(timeout=2)

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()
