"""A small SCPI link over a pyvisa message-based resource.

The link is given its resource (it does not open one unless built with
:meth:`ScpiLink.open`). Every pyvisa failure leaves as a
:mod:`tankside.drivers.errors` type, chained from the original.

Block replies are read as IEEE 488.2 definite-length blocks: the header first, then
exactly the announced byte count, then the trailing terminator. A termination-character
read over binary data stops at every 0x0A byte in the payload, which on pyvisa-py socket
resources is tens of times slower. On those resources the counted reads go straight to
the socket (:class:`~tankside.drivers.visa.DirectReader`); on any other VISA library
they go through VISA with the termination character switched off for the block.
"""

from __future__ import annotations

import contextlib
import time
from collections.abc import Callable

from pyvisa import constants

from . import ieee488
from .errors import (
    ConnectionLost,
    InstrumentError,
    InstrumentReportedError,
    InstrumentTimeout,
    ProtocolError,
)
from .pyvisa_py_internals import raise_recv_size
from .visa import (
    DirectReader,
    flush_input,
    open_resource,
    peer_closed,
    translate_error,
)

ERROR_POLICIES = ("raise", "record", "ignore")

#: Receive size asked of pyvisa-py per socket read during a block read, bytes. Its
#: default (4 KiB) costs one select() and one recv() per 4 KiB of payload.
BLOCK_RECV_SIZE = 1 << 20


class ScpiLink:
    """SCPI commands, queries and block reads on one instrument.

    Parameters
    ----------
    resource : pyvisa.resources.MessageBasedResource
        An open resource (or an object with the same methods, for tests).
    name : str, optional
        Label for messages; defaults to the resource string.
    error_policy : {"raise", "record", "ignore"}
        What :meth:`write_step` does when the instrument's error queue is not empty
        after a configuration step: raise :class:`InstrumentReportedError`, append it
        to :attr:`recorded_errors`, or drop it.
    reopen : callable, optional
        Returns a fresh resource for the same instrument; needed by :meth:`reopen`.
    error_query : str
        The error-queue query (SCPI-1999 ``SYSTem:ERRor?``).
    resync_timeout_s : float
        How long :meth:`resync` waits for its marker reply, s. It must exceed the
        longest reply the instrument may still have in flight.
    direct_block_reads : bool
        On pyvisa-py socket resources, read block replies straight from the socket
        into one buffer (the default, about twice as fast for 100,000-sample blocks:
        tests/bench/bench_fetch.py). False reads them through VISA as on any other
        library.
    """

    def __init__(self, resource, *, name: str | None = None, error_policy: str = "raise",
                 reopen: Callable[[], object] | None = None, error_query: str = "SYST:ERR?",
                 resync_timeout_s: float = 10.0, max_queued_errors: int = 64,
                 direct_block_reads: bool = True):
        if error_policy not in ERROR_POLICIES:
            raise ValueError(f"error_policy must be one of {ERROR_POLICIES}, got {error_policy!r}")
        self.resource = resource
        self.name = name or getattr(resource, "resource_name", None)
        self.error_policy = error_policy
        self.error_query = error_query
        self.resync_timeout_s = resync_timeout_s
        self.max_queued_errors = max_queued_errors
        self.direct_block_reads = direct_block_reads
        self.identity: str | None = None
        self.recorded_errors: list[InstrumentReportedError] = []
        #: True after a timeout or a garbled reply: the next reply may belong to an
        #: earlier query, so the next operation resynchronises first.
        self.needs_resync = False
        self.counts = {"timeouts": 0, "resyncs": 0, "reopens": 0}
        self._reopen = reopen
        self._reopen_hooks: list[Callable[[], None]] = []
        self._adopt(resource)

    @classmethod
    def open(cls, resource_name: str, *, visa_library: str = "@py", timeout_s: float = 5.0,
             read_termination: str = "\n", write_termination: str = "\n",
             **kwargs) -> ScpiLink:
        """Open ``resource_name`` and return a link that can reopen it the same way."""
        def factory():
            return open_resource(resource_name, visa_library=visa_library, timeout_s=timeout_s,
                                 read_termination=read_termination,
                                 write_termination=write_termination)
        kwargs.setdefault("name", resource_name)
        return cls(factory(), reopen=factory, **kwargs)

    def _adopt(self, resource) -> None:
        self.resource = resource
        self._rterm = (resource.read_termination or "").encode("ascii")
        self._wterm = (resource.write_termination or "").encode("ascii")
        raise_recv_size(resource, BLOCK_RECV_SIZE)
        self._direct = DirectReader.for_resource(resource) if self.direct_block_reads else None

    @property
    def reads_blocks_directly(self) -> bool:
        """True when block replies are read straight from the socket (see the class doc)."""
        return self._direct is not None

    # -- low level -------------------------------------------------------------

    @property
    def timeout_s(self) -> float:
        """The resource's I/O timeout, s."""
        return self.resource.timeout / 1000.0

    @timeout_s.setter
    def timeout_s(self, value: float) -> None:
        self.resource.timeout = max(1, round(value * 1000))

    def _fail(self, err: BaseException, doing: str) -> InstrumentError:
        typed = translate_error(err, resource=self.name, doing=doing)
        if isinstance(typed, InstrumentTimeout):
            self.counts["timeouts"] += 1
            self.needs_resync = True
            if peer_closed(self.resource):
                typed = ConnectionLost(f"connection closed by the instrument during {doing}",
                                       resource=self.name)
        return typed

    def _write(self, command: str) -> None:
        try:
            data = command.encode("ascii") + self._wterm
        except UnicodeEncodeError as err:
            raise ValueError(f"SCPI command must be ASCII: {command!r}") from err
        try:
            self.resource.write_raw(data)
        except Exception as err:  # noqa: BLE001 - translated and chained
            raise self._fail(err, f"write {command!r}") from err

    def _read_line(self, doing: str) -> str:
        try:
            raw = self.resource.read_raw()
        except Exception as err:  # noqa: BLE001 - translated and chained
            raise self._fail(err, doing) from err
        if self._rterm and raw.endswith(self._rterm):
            raw = raw[:-len(self._rterm)]
        try:
            return raw.decode("ascii")
        except UnicodeDecodeError as err:
            self.needs_resync = True
            raise ProtocolError(f"non-ASCII reply during {doing}: {raw[:24]!r}",
                                resource=self.name) from err

    def _read_exactly(self, count: int, doing: str, timeout_s: float) -> bytes | bytearray:
        try:
            if self._direct is not None:
                return self._direct.read_exactly(count, timeout_s)
            data = self.resource.read_bytes(count, chunk_size=count)
        except Exception as err:  # noqa: BLE001 - translated and chained
            raise self._fail(err, doing) from err
        if len(data) != count:
            self.needs_resync = True
            raise ProtocolError(f"{doing}: asked for {count} bytes, got {len(data)}",
                                resource=self.name)
        return bytes(data)

    def _termchar(self, enabled: bool) -> None:
        if not self._rterm or self._direct is not None:
            return  # direct reads never look for the termination character
        value = constants.VI_TRUE if enabled else constants.VI_FALSE
        try:
            self.resource.set_visa_attribute(constants.ResourceAttribute.termchar_enabled, value)
        except Exception as err:  # noqa: BLE001 - translated and chained
            raise self._fail(err, "set termination character") from err

    def _ensure_in_step(self) -> None:
        if self.needs_resync:
            self.resync()

    # -- public operations -------------------------------------------------------

    def write(self, command: str) -> None:
        """Send one command (the write terminator is added)."""
        self._ensure_in_step()
        self._write(command)

    def query(self, command: str) -> str:
        """Send a query and return its reply without the terminator."""
        self._ensure_in_step()
        self._write(command)
        return self._read_line(f"query {command!r}")

    def query_block(self, command: str) -> bytes | bytearray:
        """Send a query whose reply is a definite-length block; return the payload.

        Raises
        ------
        ProtocolError
            Malformed header (including the indefinite form ``#0``), or no terminator
            after the payload.
        InstrumentTimeout
            Fewer bytes than announced arrived within the timeout (a short block).
        """
        self._ensure_in_step()
        self._write(command)
        doing = f"block reply to {command!r}"
        timeout_s = self.timeout_s           # each of the four reads below may take it all
        self._termchar(False)
        try:
            n = ieee488.header_digit_count(self._read_exactly(2, doing, timeout_s))
            count = ieee488.payload_length(self._read_exactly(n, doing, timeout_s), n)
            payload = self._read_exactly(count, doing, timeout_s) if count else b""
            if self._rterm:
                tail = self._read_exactly(len(self._rterm), doing, timeout_s)
                if tail != self._rterm:
                    raise ProtocolError(f"{doing}: expected {self._rterm!r} after {count} "
                                        f"bytes, got {tail!r}")
        except ProtocolError as err:
            self.needs_resync = True
            if err.resource is None:
                raise ProtocolError(err.message, resource=self.name) from err
            raise
        finally:
            self._termchar(True)
        return payload

    def identify(self) -> str:
        """``*IDN?`` reply (IEEE 488.2 10.14); remembered as :attr:`identity`."""
        self.identity = self.query("*IDN?").strip()
        return self.identity

    def opc(self) -> None:
        """Wait for pending operations with ``*OPC?`` (IEEE 488.2 10.19)."""
        reply = self.query("*OPC?")
        if reply.strip() != "1":
            self.needs_resync = True
            raise ProtocolError(f"expected '1' from *OPC?, got {reply!r}", resource=self.name)

    def clear(self) -> None:
        """``*CLS``: clear the status registers and the error queue (IEEE 488.2 10.3)."""
        self.write("*CLS")

    def drain_errors(self) -> list[tuple[int, str]]:
        """Read the error queue until it reports 0; return the errors, oldest first."""
        errors: list[tuple[int, str]] = []
        for _ in range(self.max_queued_errors):
            reply = self.query(self.error_query)
            try:
                code, text = ieee488.parse_error_reply(reply)
            except ProtocolError as err:
                self.needs_resync = True
                raise ProtocolError(err.message, resource=self.name) from err
            if code == 0:
                return errors
            errors.append((code, text))
        raise ProtocolError(f"error queue did not empty after {self.max_queued_errors} reads",
                            resource=self.name)

    def check_errors(self, command: str | None = None) -> list[tuple[int, str]]:
        """Drain the error queue and apply :attr:`error_policy` to what it held."""
        errors = self.drain_errors()
        if errors and self.error_policy != "ignore":
            reported = [InstrumentReportedError(code, text, command=command, resource=self.name)
                        for code, text in errors]
            if self.error_policy == "raise":
                raise reported[0]
            self.recorded_errors.extend(reported)
        return errors

    def write_step(self, command: str) -> list[tuple[int, str]]:
        """A configuration step: send ``command``, then drain and check the error queue."""
        self.write(command)
        return self.check_errors(command)

    # -- recovery --------------------------------------------------------------

    def _flush_input(self) -> None:
        try:
            flush_input(self.resource)
        except ConnectionLost:
            raise
        except Exception as err:  # noqa: BLE001 - translated and chained
            raise self._fail(err, "device clear") from err

    def resync(self) -> None:
        """Bring replies back in step with queries after a timeout or garbled reply.

        Clears the device (pyvisa-py also discards buffered input), then sends
        ``*IDN?`` as a marker and discards replies until the marker's reply arrives.
        A reply that was late for an earlier query is thereby consumed here rather
        than mistaken for the answer to the next one.

        Raises
        ------
        InstrumentTimeout
            The marker reply did not arrive within :attr:`resync_timeout_s`.
        ConnectionLost
            The link is gone; :meth:`reopen` is the remedy.
        """
        self.counts["resyncs"] += 1
        self.needs_resync = True
        try:
            saved = self.resource.timeout
        except Exception as err:  # noqa: BLE001 - a closed resource: translated and chained
            raise ConnectionLost(f"link closed, cannot resynchronise: {err}",
                                 resource=self.name) from err
        deadline = time.monotonic() + self.resync_timeout_s
        try:
            self._flush_input()
            self._write("*IDN?")
            while True:
                left = deadline - time.monotonic()
                if left <= 0:
                    raise InstrumentTimeout("no marker reply while resynchronising",
                                            resource=self.name)
                self.timeout_s = left
                try:
                    line = self._read_line("resynchronise")
                except ProtocolError:
                    continue  # binary remains of a late block: discard
                line = line.strip()
                if self.identity is None and line.count(",") >= 3:
                    self.identity = line
                if line == self.identity:
                    break
        finally:
            with contextlib.suppress(Exception):   # a resource closed meanwhile: the
                self.resource.timeout = saved      # error that ended the loop is raised
        self.needs_resync = False

    def add_reopen_hook(self, hook: Callable[[], None]) -> None:
        """Call ``hook()`` after every :meth:`reopen` (e.g. to re-apply settings)."""
        self._reopen_hooks.append(hook)

    def reopen(self) -> None:
        """Last resort: close the link, open it again, and run the reopen hooks."""
        if self._reopen is None:
            raise ConnectionLost("cannot reopen: link was given a resource without a "
                                 "way to open it again", resource=self.name)
        self.counts["reopens"] += 1
        self._close_quietly()
        self._adopt(self._reopen())
        self.needs_resync = False
        for hook in self._reopen_hooks:
            hook()

    def recover(self) -> str:
        """Resynchronise, or if that fails, reopen. Returns ``"resync"`` or ``"reopen"``."""
        try:
            self.resync()
            return "resync"
        except (InstrumentTimeout, ConnectionLost, ProtocolError):
            self.reopen()
            return "reopen"

    def _close_quietly(self) -> None:
        try:
            self.resource.close()
        except Exception:  # noqa: BLE001, S110 - the link is being replaced; a close
            pass  # failure on a dead socket says nothing more than the error that led here

    def close(self, *, quiet: bool = False) -> None:
        """Close the resource; with ``quiet``, a failure to close a dead link is not raised."""
        if quiet:
            self._close_quietly()
            return
        try:
            self.resource.close()
        except Exception as err:  # noqa: BLE001 - translated and chained
            raise self._fail(err, "close") from err

    def __enter__(self) -> ScpiLink:
        return self

    def __exit__(self, *exc) -> None:
        self.close()
