"""A line instrument on a pseudo-terminal: the simulators' serial port.

:class:`PtyLineDevice` opens a pty pair (``os.openpty``), puts it in raw mode, and serves
the controller side from a thread: each line received is handed to :meth:`handle`, and
its reply (if any) written back with the terminator. The user side is a real serial
device path (:attr:`device_path`, ``/dev/pts/N``) that pyserial opens like any port, so
tests go through the same driver code a bench does. Nothing here uses the network.

Faults, for tests: :meth:`go_silent` (commands are read and never answered),
:meth:`garble_next_reply` (the next reply is bytes that are no text), :meth:`disconnect`
(the controller side is closed: the user side's reads fail as an unplugged adapter's
do).
"""

from __future__ import annotations

import os
import select
import threading
import tty

__all__ = ["PtyLineDevice", "PtyUnavailable"]


class PtyUnavailable(OSError):
    """No pseudo-terminal could be opened for a simulated serial instrument."""


class PtyLineDevice:
    """Base class: subclasses define :meth:`handle` (a line in, a reply or None out) and
    may define :meth:`tick` (called about every ``tick_s`` while served)."""

    tick_s = 0.01

    def __init__(self, *, terminator: str = "\r", name: str = "device"):
        self.terminator = terminator.encode("ascii")
        self.name = name
        try:
            self._master, self._slave = os.openpty()
        except OSError as err:
            raise PtyUnavailable(err.errno, f"cannot open a pseudo-terminal for the "
                                 f"simulated {name}: {err.strerror}") from err
        tty.setraw(self._slave)
        tty.setraw(self._master)
        self.device_path = os.ttyname(self._slave)
        self._stop = threading.Event()
        self._lock = threading.RLock()
        self._silent = False
        self._garble = 0
        self.received: list[str] = []       # every command line, for tests
        self._thread = threading.Thread(target=self._serve, name=f"sim-{name}", daemon=True)
        self._thread.start()

    # ------------------------------------------------------------ to override
    def handle(self, line: str) -> str | None:
        raise NotImplementedError

    def tick(self) -> None:
        pass

    # ------------------------------------------------------------ faults
    def go_silent(self, silent: bool = True) -> None:
        """Read commands and answer none (``False`` answers again)."""
        self._silent = silent

    def garble_next_reply(self, count: int = 1) -> None:
        self._garble += count

    def disconnect(self) -> None:
        """Close the controller side: the user side's reads and writes fail."""
        self._stop.set()
        self._thread.join(2.0)
        self._close_fd("_master")

    # ------------------------------------------------------------ serving
    def send_line(self, text: str) -> None:
        """Write one line unprompted (a streaming instrument's reading)."""
        self._write(text.encode("ascii", "replace") + self.terminator)

    def _write(self, data: bytes) -> None:
        fd = self._master
        if fd < 0:
            return
        try:
            os.write(fd, data)
        except OSError:
            pass    # nobody reading, or closed: a device does not care

    def _serve(self) -> None:
        buffer = bytearray()
        while not self._stop.is_set():
            try:
                ready, _, _ = select.select([self._master], [], [], self.tick_s)
            except (OSError, ValueError):
                return
            if ready:
                try:
                    chunk = os.read(self._master, 4096)
                except OSError:
                    chunk = b""
                buffer += chunk
                while True:
                    # a line ends at the terminator; a stray CR or LF beside it is blank
                    end = -1
                    for term in (b"\r", b"\n"):
                        i = buffer.find(term)
                        if i >= 0 and (end < 0 or i < end):
                            end = i
                    if end < 0:
                        break
                    raw = bytes(buffer[:end])
                    del buffer[:end + 1]
                    line = raw.decode("ascii", "replace").strip()
                    if not line:
                        continue
                    self._answer(line)
            with self._lock:
                self.tick()

    def _answer(self, line: str) -> None:
        self.received.append(line)
        with self._lock:
            reply = self.handle(line)
        if reply is None or self._silent:
            return
        if self._garble:
            self._garble -= 1
            self._write(b"\xff\xfe\x80garbled" + self.terminator)
            return
        self._write(reply.encode("ascii") + self.terminator)

    def _close_fd(self, attr: str) -> None:
        fd = getattr(self, attr)
        if fd >= 0:
            try:
                os.close(fd)
            except OSError:
                pass
            setattr(self, attr, -1)

    def close(self) -> None:
        self._stop.set()
        if self._thread.is_alive() and self._thread is not threading.current_thread():
            self._thread.join(2.0)
        self._close_fd("_master")
        self._close_fd("_slave")

    def __enter__(self):
        return self

    def __exit__(self, *exc) -> None:
        self.close()
