"""Fetch rate of int16 waveform blocks from the simulated digitiser, three ways, one run.

1. the driver: ``ScpiLink.query_block`` (header, then exactly the announced count,
   then the terminator), over pyvisa-py, reading straight from its socket into one
   buffer (the default); the same session reading through pyvisa-py's ``read`` with
   the termination character off (``direct_block_reads=False``, what any other VISA
   library gets); and the whole ``Digitiser.acquire`` (arm, poll, block, scaling,
   error queue);
2. a plain-socket client reading the same blocks from the same simulator;
3. pyvisa's termination-based ``query_binary_values`` on a pyvisa-py socket resource.

The simulator serves pre-computed traces (``SimulatedBench(precomputed=...)``), so the
scene model is not what is measured, and runs in a separate process, as an instrument is
a separate machine: in one process its server thread and the client would share one
interpreter lock and each would be measured with the other's work. Loopback only.

Run: .venv/bin/python tests/bench/bench_fetch.py
"""

from __future__ import annotations

import multiprocessing
import socket
import time

import numpy as np

from tankside.drivers import ieee488
from tankside.drivers.digitiser import Digitiser, DigitiserSettings
from tankside.drivers.profile import load_profile
from tankside.drivers.scpi import ScpiLink
from tankside.drivers.visa import open_resource
from tankside.simulators.bench import SimulatedBench

FETCH = "WAV:DATA? CHAN1"
BUDGET_S = 1.5  # time spent per method and size


def _rate(fetch, nbytes: int, budget_s: float = BUDGET_S, repeats: int = 3) -> float:
    """Blocks per second: the best of ``repeats`` timed runs (the machine is shared)."""
    fetch()  # warm-up (first block may be computed by the simulator)
    best = 0.0
    for _ in range(repeats):
        n, t0 = 0, time.perf_counter()
        while True:
            data = fetch()
            n += 1
            if len(data) != nbytes:
                raise RuntimeError(f"got {len(data)} bytes, expected {nbytes}")
            elapsed = time.perf_counter() - t0
            if elapsed >= budget_s / repeats:
                break
        best = max(best, n / elapsed)
    return best


def _plain_socket(port: int):
    """A minimal client: header by small reads, payload by recv_into one buffer."""
    sock = socket.create_connection(("127.0.0.1", port))
    sock.setsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY, 1)

    def recv_exact(count: int) -> bytearray:
        out = bytearray(count)
        view, got = memoryview(out), 0
        while got < count:
            n = sock.recv_into(view[got:])
            if not n:
                raise ConnectionError("simulator closed the connection")
            got += n
        return out

    def fetch() -> bytes:
        sock.sendall(FETCH.encode() + b"\n")
        n = ieee488.header_digit_count(bytes(recv_exact(2)))
        count = ieee488.payload_length(bytes(recv_exact(n)), n)
        payload = recv_exact(count)
        if recv_exact(1) != b"\n":
            raise RuntimeError("missing terminator")
        return payload

    return sock, fetch


def _serve(conn) -> None:
    with SimulatedBench(seed=0, precomputed=4) as bench:
        conn.send((bench.digitiser_resource, bench.digitiser_port,
                   str(bench.digitiser_profile_path)))
        conn.recv()  # until the parent is done


def main() -> None:
    print("fetch rate of int16 blocks from the simulated digitiser over loopback "
          "(pre-computed traces), blocks/s")
    header = (f"{'samples':>8} {'driver':>9} {'via VISA':>9} {'acquire':>9} {'socket':>9} "
              f"{'pyvisa term':>11} {'drv/term':>8} {'drv/sock':>8} {'MB/s drv':>8}")
    print(header)
    rows = []
    parent, child = multiprocessing.Pipe()
    server = multiprocessing.get_context("spawn").Process(target=_serve, args=(child,))
    server.start()
    resource, port, profile_path = parent.recv()
    try:
        profile = load_profile(profile_path)
        for samples in (10_000, 100_000):
            nbytes = 2 * samples
            settings = DigitiserSettings(record_length=samples, sample_rate_hz=250e6,
                                         range_v=0.1, trigger_source="EXT", trigger_level_v=1.0)
            session = ScpiLink.open(resource, timeout_s=10.0)
            dig = Digitiser(session, profile)
            dig.configure(settings)
            driver = _rate(lambda s=session: s.query_block(FETCH), nbytes)
            newlines = session.query_block(FETCH).count(b"\n")

            acquire = _rate(lambda d=dig: d.acquire(0, trigger_timeout_s=5.0).codes.tobytes(),
                            nbytes)
            session.close()

            session = ScpiLink.open(resource, timeout_s=10.0, direct_block_reads=False)
            via_visa = _rate(lambda s=session: s.query_block(FETCH), nbytes)
            session.close()

            sock, fetch = _plain_socket(port)
            plain = _rate(fetch, nbytes)
            sock.close()

            res = open_resource(resource, timeout_s=30.0)
            term = _rate(lambda r=res: np.asarray(r.query_binary_values(
                FETCH, datatype="h", is_big_endian=False, container=np.array)).tobytes(),
                nbytes, budget_s=3.0)
            res.close()
            rows.append((samples, driver, via_visa, acquire, plain, term, newlines))
            print(f"{samples:>8} {driver:>9.0f} {via_visa:>9.0f} {acquire:>9.0f} {plain:>9.0f} "
                  f"{term:>11.1f} {driver / term:>8.1f} {driver / plain:>8.2f} "
                  f"{driver * nbytes / 1e6:>8.0f}")
    finally:
        parent.send("stop")
        server.join(timeout=10)
    for row in rows:
        print(f"{row[0]}-sample block holds {row[6]} bytes of 0x0A (each ends a "
              "termination-character read)")
    big = rows[-1]
    print(f"100k-sample blocks through the driver: {big[1]:.0f}/s "
          f"(target >= 1100/s: {'met' if big[1] >= 1100 else 'NOT met'}); "
          f"driver / termination path: {big[1] / big[5]:.0f}x (target >= 10x: "
          f"{'met' if big[1] / big[5] >= 10 else 'NOT met'})")


if __name__ == "__main__":
    main()
