"""Fault injection for the simulated instruments, armed from tests or the command line.

A :class:`FaultPlan` is shared by the servers of one bench. Each method arms a fault for
one device (``"digitiser"`` by default, or ``"generator"``); the server consumes it:

- ``drop_connection()``: the next command received closes the connection, unanswered;
- ``stall_next_reply(seconds)``: the next reply is sent ``seconds`` late;
- ``malformed_next_block(kind)``: the next block reply has a broken header
  (``"bad-digit"``: ``#`` followed by a letter; ``"bad-length"``: letters in the length);
- ``short_next_block(missing_bytes, close)``: the next block reply stops ``missing_bytes``
  short of its announced length (half the payload by default), then the connection is
  closed if ``close``;
- ``miss_triggers(count)``: the next acquisition misses ``count`` triggers (a trigger
  timeout on a bench whose wait is shorter than ``count`` burst periods);
- ``report_error(command, code)``: the next ``command`` (e.g. ``"ACQ:POIN"`` or
  ``"WAV:DATA?"``; any header form) puts ``code`` in the error queue and, unless
  ``execute``, is not carried out (a query then gets no reply).

``fired`` lists ``(device, kind)`` for each fault that took effect, for tests to check.
"""

from __future__ import annotations

import threading
from collections.abc import Callable
from dataclasses import dataclass

DEVICES = ("digitiser", "generator")


@dataclass
class _ErrorFault:
    command: str
    code: int
    detail: str
    execute: bool
    count: int


class FaultPlan:
    """Thread-safe set of armed faults, keyed by device name."""

    def __init__(self) -> None:
        self._lock = threading.Lock()
        self._drop: dict[str, int] = {}
        self._stall: dict[str, list[float]] = {}
        self._block: dict[str, list[tuple[str, int | None]]] = {}
        self._missed: dict[str, int] = {}
        self._errors: dict[str, list[_ErrorFault]] = {}
        self.fired: list[tuple[str, str]] = []

    @staticmethod
    def _check(device: str) -> None:
        if device not in DEVICES:
            raise ValueError(f"device must be one of {DEVICES}, got {device!r}")

    # ------------------------------------------------------------ arming
    def drop_connection(self, *, device: str = "digitiser", after_commands: int = 0) -> None:
        """Close the connection on the command after ``after_commands`` more commands."""
        self._check(device)
        with self._lock:
            self._drop[device] = int(after_commands)

    def stall_next_reply(self, seconds: float, *, device: str = "digitiser") -> None:
        self._check(device)
        if seconds < 0:
            raise ValueError("stall seconds must be >= 0")
        with self._lock:
            self._stall.setdefault(device, []).append(float(seconds))

    def malformed_next_block(self, kind: str = "bad-digit", *, device: str = "digitiser") -> None:
        self._check(device)
        if kind not in ("bad-digit", "bad-length"):
            raise ValueError("kind must be 'bad-digit' or 'bad-length'")
        with self._lock:
            self._block.setdefault(device, []).append((kind, None))

    def short_next_block(self, missing_bytes: int | None = None, *, close: bool = False,
                         device: str = "digitiser") -> None:
        self._check(device)
        with self._lock:
            self._block.setdefault(device, []).append(
                ("short-close" if close else "short", missing_bytes))

    def miss_triggers(self, count: int, *, device: str = "digitiser") -> None:
        self._check(device)
        with self._lock:
            self._missed[device] = self._missed.get(device, 0) + int(count)

    def report_error(self, command: str, code: int, *, detail: str = "injected fault",
                     execute: bool = False, count: int = 1, device: str = "digitiser") -> None:
        self._check(device)
        with self._lock:
            self._errors.setdefault(device, []).append(
                _ErrorFault(command.strip(), int(code), detail, execute, int(count)))

    def clear(self) -> None:
        """Disarm every fault (``fired`` is kept)."""
        with self._lock:
            for table in (self._drop, self._stall, self._block, self._missed, self._errors):
                table.clear()

    def pending(self) -> dict[str, list[str]]:
        """Armed faults per device, for display and tests."""
        with self._lock:
            out: dict[str, list[str]] = {d: [] for d in DEVICES}
            for d in self._drop:
                out[d].append("drop")
            for d, stalls in self._stall.items():
                out[d] += [f"stall:{s:g}" for s in stalls]
            for d, blocks in self._block.items():
                out[d] += [kind for kind, _ in blocks]
            for d, n in self._missed.items():
                if n:
                    out[d].append(f"miss:{n}")
            for d, errs in self._errors.items():
                out[d] += [f"error:{e.command}={e.code}" for e in errs]
            return out

    # ------------------------------------------------------------ consumed by the server
    def _fire(self, device: str, kind: str) -> None:
        self.fired.append((device, kind))

    def take_drop(self, device: str) -> bool:
        with self._lock:
            if device not in self._drop:
                return False
            if self._drop[device] > 0:
                self._drop[device] -= 1
                return False
            del self._drop[device]
            self._fire(device, "drop")
            return True

    def take_stall(self, device: str) -> float:
        with self._lock:
            stalls = self._stall.get(device)
            if not stalls:
                return 0.0
            self._fire(device, "stall")
            return stalls.pop(0)

    def take_block_fault(self, device: str) -> tuple[str, int | None] | None:
        with self._lock:
            blocks = self._block.get(device)
            if not blocks:
                return None
            kind, arg = blocks.pop(0)
            self._fire(device, kind)
            return kind, arg

    def take_missed_triggers(self, device: str = "digitiser") -> int:
        with self._lock:
            n = self._missed.pop(device, 0)
            if n:
                self._fire(device, "miss")
            return n

    def take_error(self, device: str, pattern: str, is_query: bool,
                   canonical: Callable[[str], str | None]) -> tuple[int, str, bool] | None:
        """For the device's interceptor: an armed error for this command, or None."""
        with self._lock:
            for fault in self._errors.get(device, []):
                wants_query = fault.command.endswith("?")
                if wants_query != is_query or canonical(fault.command) != pattern:
                    continue
                fault.count -= 1
                if fault.count <= 0:
                    self._errors[device].remove(fault)
                self._fire(device, "error")
                return fault.code, fault.detail, fault.execute
            return None


def apply_block_fault(reply: bytes, kind: str, arg: int | None) -> tuple[bytes, bool]:
    """Corrupt a block reply (``#<n><len><data>\\n``); return the bytes to send and whether
    to close.

    Pure, so the corruption itself is testable without a socket.
    """
    if kind == "bad-digit":
        return b"#Z" + reply[2:], False
    if kind == "bad-length":
        n = int(reply[1:2])
        return reply[:2] + b"X" * n + reply[2 + n:], False
    n = int(reply[1:2])
    header = 2 + n
    length = int(reply[2:header])
    missing = length // 2 if arg is None else min(int(arg), length)
    return reply[:header + length - missing], kind == "short-close"
