"""How fast the simulated digitiser makes and serves traces (one run, side by side).

Prints, for 10,000- and 100,000-sample int16 records: the time the scene and digitiser
model take to make one trace, and the block rate a plain-socket client on 127.0.0.1
reads from the server when it serves live traces (bursts every 0.1 ms) and pre-computed
ones, with their ratio. Run: .venv/bin/python tests/bench/bench_simulator.py
"""

from __future__ import annotations

import socket
import time

from tankside.simulators.bench import SimulatedBench
from tankside.simulators.digitiser import SimulatedDigitiser
from tankside.simulators.scene import Drive, Scene

SECONDS = 1.5


def model_trace_ms(points: int) -> float:
    dig = SimulatedDigitiser(Scene(drive=Drive(burst_period_s=1e-4)), seed=0)
    dig.handle(f"ACQ:POIN {points}")
    dig.handle("INIT;*WAI;:WAV:DATA?")
    t = time.perf_counter()
    k = 0
    while time.perf_counter() - t < SECONDS / 2:
        dig.handle("INIT;*WAI;:WAV:DATA?")
        k += 1
    return 1e3 * (time.perf_counter() - t) / k


def socket_rate(port: int, points: int) -> float:
    s = socket.create_connection(("127.0.0.1", port))
    s.setsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY, 1)
    s.sendall(f"ACQ:POIN {points}\n".encode())
    digits = len(str(2 * points))
    need = 2 + digits + 2 * points + 1
    buf = bytearray(need)
    view = memoryview(buf)
    command = b"INIT;*WAI;:WAV:DATA? CHAN1\n"

    def one():
        s.sendall(command)
        got = 0
        while got < need:
            got += s.recv_into(view[got:], need - got)

    one()
    t = time.perf_counter()
    k = 0
    while time.perf_counter() - t < SECONDS:
        one()
        k += 1
    rate = k / (time.perf_counter() - t)
    s.close()
    return rate


def main() -> None:
    print("simulated digitiser, int16 blocks on 127.0.0.1, plain-socket client")
    print(f"{'samples':>8} {'model ms/trace':>15} {'live blocks/s':>14} "
          f"{'precomputed blocks/s':>21} {'ratio':>6}")
    # Bursts every 0.1 ms, so the trigger wait hardly counts in the live figures; the
    # simulated output on from power-on, so that the live traces carry the modelled pulse
    # (with it off the model only makes noise).
    on = Drive(output_on=True)
    with SimulatedBench(seed=0, trigger_period_s=1e-4, drive=on) as live, \
            SimulatedBench(seed=0, precomputed=8, drive=on) as pre:
        for points in (10_000, 100_000):
            ms = model_trace_ms(points)
            r_live = socket_rate(live.digitiser_port, points)
            r_pre = socket_rate(pre.digitiser_port, points)
            print(f"{points:>8} {ms:>15.2f} {r_live:>14.0f} {r_pre:>21.0f} {r_pre / r_live:>6.1f}")


if __name__ == "__main__":
    main()
