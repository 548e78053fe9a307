"""A stand-in pyvisa resource that enforces an exact transcript of bytes.

Each step is ``(bytes written, reply bytes or None)``. A write that differs from the
next expected write fails the test at once; reading when no reply is waiting raises
pyvisa's timeout error, as a silent instrument would; :meth:`FakeResource.verify`
fails on steps never reached and reply bytes never read. Use as a context manager so
that the check runs when the block ends.

Special steps: ``CLEAR`` (a device clear is expected here, and it discards unread
reply bytes as pyvisa-py does), and ``Late(reply)`` as a reply (held back until the
next write, as a reply arriving after its query timed out).
"""

from __future__ import annotations

from dataclasses import dataclass

from pyvisa import constants
from pyvisa.errors import VisaIOError

CLEAR = object()


@dataclass(frozen=True)
class Late:
    reply: bytes


class TranscriptError(BaseException):
    """A transcript mismatch; a BaseException (as pytest.fail is) so that no
    driver error handler can translate it into an instrument error."""

    pass


class FakeResource:
    def __init__(self, steps, *, read_termination="\n", write_termination="\n",
                 resource_name="FAKE0::INSTR", timeout_ms=1000):
        self.steps = list(steps)
        self.position = 0
        self.read_termination = read_termination
        self.write_termination = write_termination
        self.resource_name = resource_name
        self.timeout = timeout_ms
        self.termchar_enabled = bool(read_termination)
        self.buffer = bytearray()
        self.held: list[bytes] = []
        self.closed = False
        self.reads_with_termchar_over_binary = 0

    # -- transcript bookkeeping ------------------------------------------------

    def _next(self):
        if self.position >= len(self.steps):
            raise TranscriptError(f"unexpected operation after the transcript ended "
                                  f"(step {self.position})")
        step = self.steps[self.position]
        self.position += 1
        return step

    def verify(self) -> None:
        if self.position != len(self.steps):
            raise TranscriptError(f"transcript not used up: next expected step "
                                  f"{self.steps[self.position]!r}")
        if self.buffer or self.held:
            raise TranscriptError(f"reply bytes never read: {bytes(self.buffer)[:40]!r}")

    def __enter__(self):
        return self

    def __exit__(self, exc_type, exc, tb):
        if exc_type is None:
            self.verify()

    # -- the pyvisa resource methods the drivers use -----------------------------

    def write_raw(self, data: bytes) -> int:
        if self.closed:
            raise VisaIOError(constants.StatusCode.error_connection_lost)
        for late in self.held:
            self.buffer.extend(late)
        self.held.clear()
        step = self._next()
        if step is CLEAR:
            raise TranscriptError(f"expected a device clear, got write {data!r}")
        expected, reply = step
        if bytes(data) != expected:
            raise TranscriptError(f"step {self.position - 1}: expected write {expected!r}, "
                                  f"got {bytes(data)!r}")
        if isinstance(reply, Late):
            self.held.append(reply.reply)
        elif reply is not None:
            self.buffer.extend(reply)
        return len(data)

    def _timeout(self):
        return VisaIOError(constants.StatusCode.error_timeout)

    def read_raw(self, size=None) -> bytes:
        if not self.termchar_enabled:
            raise TranscriptError("read_raw with the termination character disabled")
        term = self.read_termination.encode()[-1:]
        idx = self.buffer.find(term)
        if idx < 0:
            self.buffer.clear()
            raise self._timeout()
        out = bytes(self.buffer[:idx + 1])
        del self.buffer[:idx + 1]
        return out

    def read_bytes(self, count, chunk_size=None, break_on_termchar=False) -> bytes:
        if self.termchar_enabled:
            raise TranscriptError("read_bytes with the termination character enabled: "
                                  "binary data would be split at every 0x0A byte")
        if len(self.buffer) < count:
            self.buffer.clear()
            raise self._timeout()
        out = bytes(self.buffer[:count])
        del self.buffer[:count]
        return out

    def set_visa_attribute(self, attribute, value):
        if attribute == constants.ResourceAttribute.termchar_enabled:
            self.termchar_enabled = bool(value)
        else:
            raise TranscriptError(f"unexpected attribute {attribute!r}")
        return constants.StatusCode.success

    def clear(self) -> None:
        step = self._next()
        if step is not CLEAR:
            raise TranscriptError(f"unexpected device clear; expected {step!r}")
        self.buffer.clear()

    def close(self) -> None:
        self.closed = True
