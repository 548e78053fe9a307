"""pyvisa-py still has the private parts tankside uses (drivers/pyvisa_py_internals.py).

Without them tankside falls back to plain VISA calls and keeps working, so nothing
else in the suite would notice; this test says which attribute went away and in
which pyvisa-py version.
"""

from __future__ import annotations

import socket

import pytest
from tcp_fixture import LineServer

from tankside.drivers import pyvisa_py_internals as internals
from tankside.drivers.visa import open_resource

IDN = b"TANKSIDE,INTERNALS,0,1\n"


@pytest.fixture
def resource():
    with LineServer(lambda line: {b"*IDN?": IDN, b"TWO?": b"one\ntwo\n"}.get(line)) as server:
        res = open_resource(server.resource, timeout_s=2.0)
        try:
            yield res, server
        finally:
            res.close()


def test_pyvisa_py_has_what_tankside_uses(resource):
    res, _ = resource
    problems = internals.missing(res)
    assert not problems, (
        f"pyvisa-py {internals.installed_version()} no longer has what "
        f"tankside.drivers.pyvisa_py_internals uses: " + "; ".join(problems))


def test_the_functions_reach_the_connected_socket_and_buffer(resource):
    res, server = resource
    sock = internals.backend_socket(res)
    assert isinstance(sock, socket.socket)
    assert sock.getpeername()[:2] == ("127.0.0.1", server.port)
    assert res.query("*IDN?") == IDN.decode().strip()
    session, same_sock = internals.buffered_socket(res)
    assert same_sock is sock
    # one reply segment with two lines: the second waits in pyvisa-py's buffer
    assert res.query("TWO?") == "one"
    assert internals.pending_buffer(session) == bytearray(b"two\n")
    assert res.read() == "two"
    internals.raise_recv_size(res, 1 << 22)
    assert internals.backend_session(res).max_recv_size >= 1 << 22


def test_other_objects_get_none():
    class NotVisa:
        pass

    assert internals.backend_session(NotVisa()) is None
    assert internals.backend_socket(NotVisa()) is None
    assert internals.buffered_socket(NotVisa()) is None
    assert internals.pending_buffer(NotVisa()) is None
    internals.raise_recv_size(NotVisa(), 1 << 22)      # nothing to raise, no error
    assert internals.missing(NotVisa()) == [
        "resource.visalib.sessions: expected dict, found NoneType"]
