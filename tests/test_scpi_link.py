"""ScpiLink: exact bytes, error policies, error translation and recovery.

The IEEE 488.2 common commands used (*IDN?, *OPC?, *CLS) are from IEEE Std 488.2-1992,
clause 10; the error queue query SYST:ERR? and its '0,"No error"' end marker from
SCPI-1999 Vol. 1, 21.8.
"""

import time

import numpy as np
import pytest
from pyvisa.errors import VisaIOError
from tcp_fixture import LineServer
from transcript import CLEAR, FakeResource, Late

from tankside.drivers import ieee488
from tankside.drivers.errors import (
    ConnectionLost,
    InstrumentReportedError,
    InstrumentTimeout,
    ProtocolError,
)
from tankside.drivers.pyvisa_py_internals import backend_session, pending_buffer
from tankside.drivers.scpi import ScpiLink
from tankside.drivers.visa import open_resource

IDN = b"Tankside Labs,Bench Digitiser,0001,1.0\n"
NO_ERROR = (b"SYST:ERR?\n", b'0,"No error"\n')


class TestTranscript:
    def test_write_query_identify(self):
        with FakeResource([(b"*RST\n", None), (b"VOLT?\n", b"1.5\n"), (b"*IDN?\n", IDN)]) as fake:
            s = ScpiLink(fake)
            s.write("*RST")
            assert s.query("VOLT?") == "1.5"
            assert s.identify() == IDN.decode().strip()
            assert s.identity == s.identify.__self__.identity

    def test_opc_and_clear(self):
        with FakeResource([(b"*OPC?\n", b"1\n"), (b"*CLS\n", None)]) as fake:
            s = ScpiLink(fake)
            s.opc()
            s.clear()

    def test_opc_wrong_reply(self):
        with FakeResource([(b"*OPC?\n", b"0\n")]) as fake, pytest.raises(ProtocolError):
            ScpiLink(fake).opc()

    def test_drain_errors_reads_until_zero(self):
        steps = [(b"SYST:ERR?\n", b'-113,"Undefined header"\n'),
                 (b"SYST:ERR?\n", b'-222,"Data out of range"\n'), NO_ERROR]
        with FakeResource(steps) as fake:
            assert ScpiLink(fake).drain_errors() == [(-113, "Undefined header"),
                                                        (-222, "Data out of range")]

    def test_policy_raise(self):
        steps = [(b"RANG 9\n", None), (b"SYST:ERR?\n", b'-222,"Data out of range"\n'), NO_ERROR]
        with FakeResource(steps) as fake:
            with pytest.raises(InstrumentReportedError) as info:
                ScpiLink(fake).write_step("RANG 9")
        assert (info.value.code, info.value.description, info.value.command) == (
            -222, "Data out of range", "RANG 9")

    def test_policy_record(self):
        steps = [(b"RANG 9\n", None), (b"SYST:ERR?\n", b'-222,"Data out of range"\n'), NO_ERROR]
        with FakeResource(steps) as fake:
            s = ScpiLink(fake, error_policy="record")
            assert s.write_step("RANG 9") == [(-222, "Data out of range")]
        assert [e.code for e in s.recorded_errors] == [-222]

    def test_policy_ignore(self):
        steps = [(b"RANG 9\n", None), (b"SYST:ERR?\n", b'-222,"Data out of range"\n'), NO_ERROR]
        with FakeResource(steps) as fake:
            s = ScpiLink(fake, error_policy="ignore")
            s.write_step("RANG 9")
        assert s.recorded_errors == []

    def test_bad_policy(self):
        with pytest.raises(ValueError):
            ScpiLink(FakeResource([]), error_policy="log")

    def test_block_with_many_newlines(self):
        payload = np.full(1000, 0x0A0A, dtype="<i2").tobytes()
        with FakeResource([(b"WAV?\n", ieee488.encode_block(payload) + b"\n")]) as fake:
            assert ScpiLink(fake).query_block("WAV?") == payload
            assert fake.termchar_enabled  # switched back on after the block

    def test_timeout_is_typed_and_chained(self):
        with FakeResource([(b"VOLT?\n", None)]) as fake:
            s = ScpiLink(fake)
            with pytest.raises(InstrumentTimeout) as info:
                s.query("VOLT?")
        assert isinstance(info.value.__cause__, VisaIOError)
        assert s.needs_resync and s.counts["timeouts"] == 1

    def test_late_reply_is_discarded_by_resync(self):
        # The reply to VOLT? arrives after its timeout; the next query must not take it.
        steps = [(b"*IDN?\n", IDN), (b"VOLT?\n", Late(b"1.5\n")), CLEAR, (b"*IDN?\n", IDN),
                 (b"FREQ?\n", b"2000000\n")]
        with FakeResource(steps) as fake:
            s = ScpiLink(fake)
            s.identify()
            with pytest.raises(InstrumentTimeout):
                s.query("VOLT?")
            assert s.query("FREQ?") == "2000000"
        assert s.counts["resyncs"] == 1 and not s.needs_resync

    def test_protocol_error_sets_resync(self):
        steps = [(b"WAV?\n", b"garbage\n"), CLEAR, (b"*IDN?\n", IDN), (b"*OPC?\n", b"1\n")]
        with FakeResource(steps) as fake:
            s = ScpiLink(fake)
            with pytest.raises(ProtocolError):
                s.query_block("WAV?")
            s.opc()
        assert s.identity == IDN.decode().strip()

    def test_write_on_closed_link(self):
        fake = FakeResource([])
        fake.closed = True
        with pytest.raises(ConnectionLost) as info:
            ScpiLink(fake).write("*RST")
        assert isinstance(info.value.__cause__, VisaIOError)

    def test_resync_on_a_closed_resource_is_connection_lost(self):
        # pyvisa raises InvalidSession for an attribute of a closed resource; a resync
        # asked for after the link was closed (a late generator during a safe-off) must
        # be a typed, catchable error, not an untyped one that ends a session.
        from pyvisa.errors import InvalidSession

        class Closed(FakeResource):
            @property
            def timeout(self):
                raise InvalidSession()

            @timeout.setter
            def timeout(self, value):
                pass

        with pytest.raises(ConnectionLost) as info:
            ScpiLink(Closed([])).resync()
        assert isinstance(info.value.__cause__, InvalidSession)

    def test_reopen_runs_hooks(self):
        first = FakeResource([])
        second = FakeResource([(b"ACQ:POIN 100\n", None)])
        s = ScpiLink(first, reopen=lambda: second)
        s.add_reopen_hook(lambda: s.write("ACQ:POIN 100"))
        s.reopen()
        assert first.closed and s.resource is second and s.counts["reopens"] == 1
        second.verify()

    def test_reopen_without_factory(self):
        with pytest.raises(ConnectionLost):
            ScpiLink(FakeResource([])).reopen()

    def test_recover_falls_back_to_reopen(self):
        first = FakeResource([CLEAR, (b"*IDN?\n", None)])
        second = FakeResource([])
        s = ScpiLink(first, reopen=lambda: second, resync_timeout_s=0.2)
        assert s.recover() == "reopen"
        assert s.resource is second
        first.verify()


def _part_then_close(conn):
    conn.sendall(b"#41000" + b"x" * 400)
    return "closed"


@pytest.fixture(params=[True, False], ids=["direct", "via-visa"])
def direct(request):
    """Both ways of reading blocks on pyvisa-py: straight from its socket, and via VISA."""
    return request.param


class TestOverTcp:
    """The same session over a real socket with pyvisa-py."""

    def test_connection_refused(self):
        server = LineServer(lambda line: None)
        resource = server.resource
        server.close()
        t0 = time.monotonic()
        with pytest.raises(ConnectionLost):
            open_resource(resource, timeout_s=1.0)
        assert time.monotonic() - t0 < 3.0

    def test_bad_library(self):
        with pytest.raises(ConnectionLost):
            open_resource("TCPIP0::127.0.0.1::1::SOCKET", visa_library="/no/such/visa.so")

    def test_block_and_queries(self, direct):
        payload = np.arange(-5000, 5000, dtype="<i2").tobytes()  # contains 0x0A bytes

        def handler(line):
            return {b"*IDN?": IDN, b"WAV?": ieee488.encode_block(payload) + b"\n",
                    b"SYST:ERR?": b'0,"No error"\n'}.get(line)

        with LineServer(handler) as server:
            s = ScpiLink.open(server.resource, timeout_s=2.0, direct_block_reads=direct)
            assert s.reads_blocks_directly is direct  # pyvisa-py's socket is reachable
            assert s.identify() == IDN.decode().strip()
            assert s.query_block("WAV?") == payload
            assert s.drain_errors() == []
            assert s.query_block("WAV?") == payload
            s.close()

    def test_block_after_buffered_text(self, direct):
        # One segment carries a text reply and a whole block: the line read leaves the
        # block in pyvisa-py's own buffer, and the block read must start from there.
        payload = bytes(range(256)) * 40

        def handler(line):
            if line == b"BOTH?":
                return b"1.25\n" + ieee488.encode_block(payload) + b"\n"
            return {b"*IDN?": IDN}.get(line)   # "WAIT?" gets no reply of its own

        with LineServer(handler) as server:
            s = ScpiLink.open(server.resource, timeout_s=2.0, direct_block_reads=direct)
            assert s.query("BOTH?") == "1.25"
            pending = pending_buffer(backend_session(s.resource))
            assert pending is not None and len(pending) > 0  # one loopback segment, read whole
            assert s.query_block("WAIT?") == payload
            assert s.identify() == IDN.decode().strip()  # nothing left over
            s.close()

    @pytest.mark.parametrize("reply, error, remedy", [
        (b"#3100" + b"x" * 50 + b"\n", InstrumentTimeout, "resync"),   # short, then silence
        (_part_then_close, ConnectionLost, "reopen"),                    # short, then closed
    ], ids=["short-block", "cut-off-by-close"])
    def test_incomplete_block_fails_in_time_and_recovers(self, direct, reply, error, remedy):
        def handler(line):
            return {b"*IDN?": IDN, b"WAV?": reply}.get(line)

        with LineServer(handler) as server:
            s = ScpiLink.open(server.resource, timeout_s=0.3, direct_block_reads=direct)
            t0 = time.monotonic()
            with pytest.raises(error):
                s.query_block("WAV?")
            assert time.monotonic() - t0 < 1.5
            assert s.recover() == remedy
            assert s.identify() == IDN.decode().strip()
            s.close()

    def test_stalled_reply_then_resync(self):
        def stall(conn):
            time.sleep(0.6)
            conn.sendall(b"1.25\n")

        def handler(line):
            return {b"*IDN?": IDN, b"VOLT?": stall, b"FREQ?": b"3\n"}.get(line)

        with LineServer(handler) as server:
            s = ScpiLink.open(server.resource, timeout_s=0.2)
            s.identify()
            with pytest.raises(InstrumentTimeout):
                s.query("VOLT?")
            assert s.query("FREQ?") == "3"  # not the late "1.25"
            s.close()

    def test_dropped_connection_and_reopen(self):
        def handler(line):
            if line == b"DROP?":
                return lambda conn: "closed"
            return {b"*IDN?": IDN}.get(line)

        with LineServer(handler) as server:
            s = ScpiLink.open(server.resource, timeout_s=0.3)
            s.identify()
            with pytest.raises(ConnectionLost):
                s.query("DROP?")
            assert s.recover() == "reopen"
            assert s.query("*IDN?") == IDN.decode().strip()
            assert server.connections == 2
            s.close()


class TestBlockPropertyOverTcp:
    """Malformed or short blocks over a real pyvisa-py socket: a typed error within the
    timeout, never a hang nor a wrong array, and the session usable again after."""

    def test_property(self, direct):
        from hypothesis import HealthCheck, given, settings
        from hypothesis import strategies as st

        reply = {"block": b""}

        def handler(line):
            if line == b"*IDN?":
                return IDN
            if line == b"WAV?":
                return reply["block"]
            return None

        payloads = st.binary(min_size=1, max_size=2000)
        malformed = st.one_of(
            payloads.map(lambda p: ieee488.encode_block(p)[:-1]),              # short
            payloads.map(lambda p: b"#0" + p + b"\n"),                         # indefinite
            payloads.map(lambda p: b"#9" + b"0" * 8 + b"1" + p + b"\n")        # 1 byte, then
            .filter(lambda b: b[12:13] != b"\n"),                              # no terminator
            payloads.map(lambda p: b"#" + bytes([65 + p[0] % 26]) + p + b"\n"),  # bad digit
            payloads.map(lambda p: ieee488.encode_block(p + b"x" * 20)[:-10]),  # short
        )
        timeout_s = 0.15
        with LineServer(handler) as server:
            session = ScpiLink.open(server.resource, timeout_s=timeout_s,
                                       resync_timeout_s=2.0, direct_block_reads=direct)
            session.identify()

            @settings(max_examples=25, deadline=None,
                      suppress_health_check=[HealthCheck.function_scoped_fixture])
            @given(block=malformed)
            def check(block):
                reply["block"] = block
                t0 = time.monotonic()
                with pytest.raises((ProtocolError, InstrumentTimeout)):
                    session.query_block("WAV?")
                assert time.monotonic() - t0 < timeout_s + 0.5
                good = np.arange(7, dtype="<i2").tobytes()
                reply["block"] = ieee488.encode_block(good) + b"\n"
                assert session.query_block("WAV?") == good

            check()
            session.close()
