"""Serve pure SCPI device models over TCP on 127.0.0.1 (raw socket, one command per line).

Each :class:`InstrumentServer` listens on one port (0 picks a free one) and runs one thread
per connection; a lock makes the device see one program message at a time. Replies are
the device's bytes (``\\n``-terminated; blocks as ``#<n><len><bytes>\\n``). Faults armed in
a :class:`~tankside.simulators.faults.FaultPlan` are applied here, on the wire.

Only 127.0.0.1 is accepted as the host: the simulators must never be reachable from
another machine.
"""

from __future__ import annotations

import socket
import threading
from collections.abc import Callable, Iterable
from typing import Protocol, runtime_checkable

from .faults import FaultPlan, apply_block_fault
from .scpi_device import ScpiDevice

LOOPBACK = "127.0.0.1"
MAX_LINE_BYTES = 1 << 20


@runtime_checkable
class _WaitingDevice(Protocol):
    """A device model that waits (for a trigger) through its own ``sleep``."""

    sleep: Callable[[float], object]


class InstrumentServer:
    """A threaded TCP server for one device model.

    Parameters
    ----------
    device : ScpiDevice
        The pure model; its ``interceptor`` is set here when ``faults`` is given.
    name : str
        Device name used by the fault plan (``"digitiser"`` or ``"generator"``).
    host : str
        Must be ``"127.0.0.1"``; anything else raises ValueError.
    port : int
        TCP port; 0 picks a free one (see :attr:`port` after :meth:`start`).
    faults : FaultPlan, optional
    stop_event : threading.Event, optional
        Set on :meth:`close`; shared with device waits so shutdown never hangs.
    """

    def __init__(self, device: ScpiDevice, *, name: str, host: str = LOOPBACK, port: int = 0,
                 faults: FaultPlan | None = None, stop_event: threading.Event | None = None):
        if host != LOOPBACK:
            raise ValueError(f"simulated instruments bind to {LOOPBACK} only, not {host!r}")
        if not 0 <= int(port) <= 65535:
            raise ValueError(f"port must be 0..65535, got {port}")
        self.device = device
        self.name = name
        self.host = host
        self.requested_port = int(port)
        self.faults = faults
        self.stop_event = stop_event or threading.Event()
        self._device_lock = threading.Lock()
        self._lock_owner: int | None = None
        self._conns: set[socket.socket] = set()
        self._conns_lock = threading.Lock()
        self._threads: list[threading.Thread] = []
        self._listener: socket.socket | None = None
        self._accept_thread: threading.Thread | None = None
        self.connections_accepted = 0
        if faults is not None:
            device.interceptor = lambda pattern, q: faults.take_error(
                name, pattern, q, device.canonical)
        inner_sleep = getattr(device, "sleep", None)
        if callable(inner_sleep) and isinstance(device, _WaitingDevice):
            device.sleep = lambda seconds: self._sleep_unlocked(inner_sleep, seconds)

    def _sleep_unlocked(self, inner, seconds: float):
        # A device waiting for a trigger (*OPC?, *WAI) lets other connections in
        # meanwhile, so a client that gave up and reconnected is not locked out.
        if self._lock_owner != threading.get_ident():
            return inner(seconds)  # called outside the server (a test driving the model)
        self._lock_owner = None
        self._device_lock.release()
        try:
            return inner(seconds) or self.stop_event.is_set()
        finally:
            self._device_lock.acquire()
            self._lock_owner = threading.get_ident()

    # ------------------------------------------------------------ lifecycle
    def start(self) -> InstrumentServer:
        listener = socket.socket(socket.AF_INET, socket.SOCK_STREAM)
        listener.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
        try:
            listener.bind((self.host, self.requested_port))
        except OSError:
            listener.close()
            raise
        listener.listen(16)
        listener.settimeout(0.1)
        self._listener = listener
        self._accept_thread = threading.Thread(target=self._accept_loop, name=f"sim-{self.name}",
                                               daemon=True)
        self._accept_thread.start()
        return self

    @property
    def port(self) -> int:
        if self._listener is None:
            raise RuntimeError("server not started")
        return self._listener.getsockname()[1]

    @property
    def address(self) -> tuple[str, int]:
        return self._listener.getsockname() if self._listener else (self.host, 0)

    @property
    def resource(self) -> str:
        """The VISA resource string of this instrument."""
        return f"TCPIP0::{self.host}::{self.port}::SOCKET"

    def close(self) -> None:
        """Stop accepting, close every connection and join the threads."""
        self.stop_event.set()
        if self._accept_thread is not None:
            self._accept_thread.join(timeout=2.0)
        if self._listener is not None:
            self._listener.close()
        with self._conns_lock:
            conns = list(self._conns)
        for conn in conns:
            _shutdown(conn)
        for t in self._threads:
            t.join(timeout=2.0)
        self._threads.clear()

    def __enter__(self) -> InstrumentServer:
        return self.start()

    def __exit__(self, *exc) -> None:
        self.close()

    # ------------------------------------------------------------ threads
    def _accept_loop(self) -> None:
        assert self._listener is not None
        while not self.stop_event.is_set():
            try:
                conn, _ = self._listener.accept()
            except TimeoutError:
                continue
            except OSError:
                return
            conn.settimeout(None)
            conn.setsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY, 1)
            with self._conns_lock:
                self._conns.add(conn)
            self.connections_accepted += 1
            t = threading.Thread(target=self._serve, args=(conn,), daemon=True,
                                 name=f"sim-{self.name}-conn")
            self._threads = [x for x in self._threads if x.is_alive()] + [t]
            t.start()

    def _serve(self, conn: socket.socket) -> None:
        try:
            self._serve_lines(conn)
        except OSError:
            pass  # the peer went away (or we shut the socket down on close): end this thread
        finally:
            with self._conns_lock:
                self._conns.discard(conn)
            _shutdown(conn)

    def _serve_lines(self, conn: socket.socket) -> None:
        buf = b""
        faults = self.faults
        while not self.stop_event.is_set():
            data = conn.recv(65536)
            if not data:
                return
            buf += data
            if len(buf) > MAX_LINE_BYTES and b"\n" not in buf:
                with self._device_lock:
                    self.device.push_error(-363, "line longer than 1 MiB")
                buf = b""
                continue
            while b"\n" in buf:
                line, buf = buf.split(b"\n", 1)
                if faults is not None and faults.take_drop(self.name):
                    return
                with self._device_lock:
                    self._lock_owner = threading.get_ident()
                    try:
                        reply = self.device.handle(line)
                    finally:
                        self._lock_owner = None
                if reply is None:
                    continue
                if faults is not None and not self._send_with_faults(conn, reply, faults):
                    return
                if faults is None:
                    conn.sendall(reply)

    def _send_with_faults(self, conn: socket.socket, reply: bytes, faults: FaultPlan) -> bool:
        """Send ``reply`` with any armed stall or block fault; False to close the connection."""
        stall = faults.take_stall(self.name)
        if stall and self.stop_event.wait(stall):
            return False
        close = False
        if reply.startswith(b"#"):
            hit = faults.take_block_fault(self.name)
            if hit is not None:
                reply, close = apply_block_fault(reply, *hit)
        conn.sendall(reply)
        return not close


def _shutdown(conn: socket.socket) -> None:
    try:
        conn.shutdown(socket.SHUT_RDWR)
    except OSError:
        pass  # already closed by the peer
    conn.close()


class ServerGroup:
    """Several instrument servers started and stopped together (one port each)."""

    def __init__(self, servers: Iterable[InstrumentServer]):
        self.servers = list(servers)

    def start(self) -> ServerGroup:
        started = []
        try:
            for s in self.servers:
                started.append(s.start())
        except OSError:
            for s in started:
                s.close()
            raise
        return self

    def close(self) -> None:
        for s in self.servers:
            s.close()

    def __enter__(self) -> ServerGroup:
        return self.start()

    def __exit__(self, *exc) -> None:
        self.close()
