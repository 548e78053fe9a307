"""IEEE 488.2 block headers and reply parsing.

Reference: IEEE Std 488.2-1992, 8.7.9 (definite-length arbitrary block: '#', one
non-zero digit n, n digits of length, the bytes), 8.7.10 (indefinite form '#0');
SCPI-1999 Vol. 1, 21.8 (error-queue replies); SCPI-1999 Vol. 1, 7.2.1.5 (9.91E37 NaN).
"""

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from transcript import FakeResource

from tankside.drivers import ieee488
from tankside.drivers.errors import InstrumentTimeout, ProtocolError
from tankside.drivers.scpi import ScpiLink


class TestBlockHeader:
    def test_worked_example(self):
        # IEEE 488.2 8.7.9: "#15ABCDE" carries the five bytes ABCDE.
        assert ieee488.split_block(b"#15ABCDE") == (b"ABCDE", b"")

    def test_header_and_length(self):
        assert ieee488.parse_block_header(b"#3100") == (5, 100)

    def test_encode(self):
        assert ieee488.encode_block(b"") == b"#10"
        assert ieee488.encode_block(b"x" * 12) == b"#212" + b"x" * 12

    @pytest.mark.parametrize("bad", [b"", b"#", b"15ABCDE", b"#A5", b"# 5", b"#2", b"#2 5"])
    def test_malformed(self, bad):
        with pytest.raises(ProtocolError):
            ieee488.split_block(bad)

    def test_indefinite_form_rejected(self):
        with pytest.raises(ProtocolError, match="indefinite"):
            ieee488.split_block(b"#0ABC\n")

    def test_short_block(self):
        with pytest.raises(ProtocolError, match="short block"):
            ieee488.split_block(b"#15ABC")

    def test_terminator_checked(self):
        assert ieee488.split_block(b"#12ab\nrest", b"\n") == (b"ab", b"rest")
        with pytest.raises(ProtocolError, match="terminator"):
            ieee488.split_block(b"#12abX", b"\n")


class TestNumbers:
    @pytest.mark.parametrize("text, value", [("1", 1.0), ("+2.5", 2.5), ("-3.0E-09", -3e-9),
                                             (" 4e2\n", 400.0), (".5", 0.5)])
    def test_nr1_nr2_nr3(self, text, value):
        assert ieee488.parse_number(text) == value

    @pytest.mark.parametrize("text", ["", "abc", "1,2", "1.0V", "nan", "inf", "9.91E37",
                                      "-9.91E+37"])
    def test_rejects(self, text):
        with pytest.raises(ProtocolError):
            ieee488.parse_number(text)

    def test_int(self):
        assert ieee488.parse_int("1.0E3") == 1000
        with pytest.raises(ProtocolError):
            ieee488.parse_int("2.5")

    def test_bool(self):
        assert ieee488.parse_bool("1") and ieee488.parse_bool(" on\n")
        assert not ieee488.parse_bool("0") and not ieee488.parse_bool("OFF")
        with pytest.raises(ProtocolError):
            ieee488.parse_bool("2")


class TestErrorReply:
    def test_undefined_header(self):
        # SCPI-1999 Vol. 2, 21.8.9: -113 "Undefined header".
        assert ieee488.parse_error_reply('-113,"Undefined header"') == (-113, "Undefined header")

    def test_no_error_and_quotes(self):
        assert ieee488.parse_error_reply('+0,"No error"\n') == (0, "No error")
        assert ieee488.parse_error_reply('-222,"Data out of range; ""RANG 9"""') == (
            -222, 'Data out of range; "RANG 9"')

    @pytest.mark.parametrize("text", ["", "0", "No error", '-113 "x"', 'x,"y"', '-1,"a'])
    def test_rejects(self, text):
        with pytest.raises(ProtocolError):
            ieee488.parse_error_reply(text)


def _block_session(reply: bytes) -> tuple[ScpiLink, FakeResource]:
    fake = FakeResource([(b"WAV?\n", reply)], timeout_ms=50)
    return ScpiLink(fake), fake


@settings(max_examples=300, suppress_health_check=[HealthCheck.too_slow], deadline=None)
@given(payload=st.binary(max_size=300))
def test_well_formed_blocks_round_trip(payload):
    session, fake = _block_session(ieee488.encode_block(payload) + b"\n")
    assert session.query_block("WAV?") == payload
    fake.verify()
    assert np.array_equal(np.frombuffer(ieee488.split_block(ieee488.encode_block(payload))[0],
                                        np.uint8), np.frombuffer(payload, np.uint8))


def _malformed():
    payload = st.binary(max_size=64)
    short = payload.flatmap(lambda p: st.integers(0, max(len(p) - 1, 0)).map(
        lambda k, p=p: ieee488.encode_block(p)[: 2 + len(str(len(p))) + k] if p else b"#1"))
    announced_more = st.tuples(payload, st.integers(1, 50)).map(
        lambda t: b"#" + str(len(str(len(t[0]) + t[1]))).encode() + str(len(t[0]) + t[1]).encode()
        + t[0] + b"\n")
    bad_start = st.binary(min_size=1, max_size=40).filter(lambda b: b[:1] != b"#")
    bad_digit = st.tuples(st.sampled_from([b"0", b"A", b" ", b"-", b"\n"]),
                          st.binary(max_size=30)).map(lambda t: b"#" + t[0] + t[1])
    bad_length = st.tuples(st.integers(1, 9), st.binary(min_size=1, max_size=9)).filter(
        lambda t: not t[1][: t[0]].isdigit()).map(
        lambda t: b"#" + str(t[0]).encode() + t[1] + b"\n")
    no_terminator = payload.map(lambda p: ieee488.encode_block(p) + b"X")
    return st.one_of(short, announced_more, bad_start, bad_digit, bad_length, no_terminator)


@settings(max_examples=400, suppress_health_check=[HealthCheck.too_slow], deadline=None)
@given(reply=_malformed())
def test_malformed_or_short_block_is_a_typed_error(reply):
    # Never a hang (the fake times out at once when bytes run out) nor a wrong array.
    session, _ = _block_session(reply)
    with pytest.raises((ProtocolError, InstrumentTimeout)):
        session.query_block("WAV?")
    assert session.needs_resync
