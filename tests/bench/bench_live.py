"""The live chain beside a reference loop doing the same work with the least overhead.

Both read 10,000-sample int16 traces from the simulated digitiser over TCP on
127.0.0.1 (serving pre-computed traces, so the simulator's scene model is not what
is timed):

* live chain: ``LiveSession`` (pyvisa-py driver with its error checks, conversion
  and every pulse parameter, rules, running figures, snapshots, SQLite store with
  batched commits), no display;
* headless: the same with the headless status printer reading snapshots (output
  thrown away), the figure the dashboard's rate is compared with;
* reference: one plain socket, arm / poll / fetch, one ``irfft(rfft(v) * H)`` with
  the same cached inverse sensitivity, one INSERT per trace, commit once a second.

Target: live >= 0.25x reference, with zero traces lost (acquired == converted ==
stored, sequence numbers contiguous).
"""

from __future__ import annotations

import io
import socket
import sqlite3
import statistics
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

from tankside.monitor.headless import run_headless
from tankside.monitor.live.benchfile import load_bench
from tankside.monitor.live.session import LiveSession
from tankside.monitor.record.store import SessionReader
from tankside.simulators.bench import SimulatedBench

N_SAMPLES = 10_000
N_TRACES = 600
ROUNDS = 3


def _bench(sim: SimulatedBench, folder: Path):
    sim.write_bench_file(folder / "bench.toml", session_folder=str(folder))
    return load_bench(folder / "bench.toml", {"digitiser.record_length": N_SAMPLES})


def live_rate(sim, folder: Path, name: str, headless: bool) -> tuple[float, dict]:
    bench = _bench(sim, folder)
    # the simulated drive switched on as `watch --drive-on` does: with the output off
    # every trace is noise and fails conversion at once, so the chain's work is not timed
    session = LiveSession.from_bench(bench, session_path=folder / f"{name}.db",
                                     max_traces=N_TRACES, drive_on_at_start="benchmark")
    session.start()
    t0 = time.perf_counter()
    if headless:
        run_headless(session, out=io.StringIO(), status_every_s=2.0)
    else:
        session.wait()
    elapsed = time.perf_counter() - t0
    snap = session.snapshot()
    with SessionReader(folder / f"{name}.db") as r:
        seqs = r.seqs()
    counts = {"acquired": snap.acquired, "converted": snap.converted, "stored": snap.stored,
              "in_file": len(seqs), "contiguous": seqs == list(range(len(seqs))),
              "exit_code": session.exit_code}
    return N_TRACES / elapsed, counts


def _read_block(f) -> bytes:
    head = f.read(2)
    if head[:1] != b"#":
        raise RuntimeError(f"not a block: {head!r}")
    size = int(f.read(int(head[1:2])))
    data = f.read(size)
    f.readline()
    return data


def reference_rate(sim, folder: Path) -> float:
    bench = _bench(sim, folder)
    settings = bench.digitiser_settings()
    converter = bench.converter()
    sock = socket.create_connection(("127.0.0.1", sim.digitiser_port))
    sock.setsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY, 1)
    f = sock.makefile("rb")

    def send(cmd: str) -> None:
        sock.sendall(cmd.encode() + b"\n")

    def query(cmd: str) -> bytes:
        send(cmd)
        return f.readline().strip()

    send(f"ACQ:POIN {settings.record_length}")
    send(f"ACQ:SRAT {settings.sample_rate_hz}")
    send(f"CHAN1:RANG {settings.range_v}")
    dt_s = float(query("WAV:XINC?"))
    vpc = float(query("WAV:YINC?"))
    off = float(query("WAV:YOFF?"))
    h = converter.plan(N_SAMPLES, dt_s).inverse_pa_per_v
    db = sqlite3.connect(folder / "reference.db", isolation_level=None)
    db.execute("PRAGMA journal_mode=WAL")
    db.execute("PRAGMA synchronous=FULL")
    db.execute("CREATE TABLE t (seq INTEGER PRIMARY KEY, time_s REAL, codes BLOB, "
               "p_c REAL, p_r REAL)")
    db.execute("BEGIN")
    last_commit = time.monotonic()
    t0 = time.perf_counter()
    for seq in range(N_TRACES):
        send("INIT")
        while query("ACQ:DONE?") != b"1":
            pass
        send("WAV:DATA? CHAN1")
        payload = _read_block(f)
        codes = np.frombuffer(payload, dtype="<i2")
        volts = codes * vpc + off
        p = np.fft.irfft(np.fft.rfft(volts) * h, N_SAMPLES)
        db.execute("INSERT INTO t VALUES (?, ?, ?, ?, ?)",
                   (seq, time.time(), payload, float(p.max()), float(-p.min())))
        if time.monotonic() - last_commit >= 1.0:
            db.execute("COMMIT")
            db.execute("BEGIN")
            last_commit = time.monotonic()
    db.execute("COMMIT")
    elapsed = time.perf_counter() - t0
    db.close()
    sock.close()
    return N_TRACES / elapsed


def main() -> None:
    print(f"live chain vs reference loop, {N_SAMPLES} samples/trace, {N_TRACES} traces per "
          f"run, {ROUNDS} interleaved rounds, simulated digitiser over TCP (pre-computed "
          f"traces); python {sys.version.split()[0]}")
    rates: dict[str, list[float]] = {"reference": [], "live": [], "headless": []}
    all_counts = []
    with tempfile.TemporaryDirectory() as tmp, \
            SimulatedBench(seed=5, precomputed=8, trigger_period_s=0.001) as sim:
        for k in range(ROUNDS):
            folder = Path(tmp) / f"round{k}"
            folder.mkdir()
            rates["reference"].append(reference_rate(sim, folder))
            rate, counts = live_rate(sim, folder, "live", headless=False)
            rates["live"].append(rate)
            all_counts.append(("live", counts))
            rate, counts = live_rate(sim, folder, "headless", headless=True)
            rates["headless"].append(rate)
            all_counts.append(("headless", counts))
    med = {name: statistics.median(values) for name, values in rates.items()}
    for name, values in rates.items():
        runs = " ".join(f"{v:7.1f}" for v in values)
        print(f"  {name:10s} median {med[name]:7.1f} traces/s   runs {runs}")
    ratios = [lv / rf for lv, rf in zip(rates["live"], rates["reference"], strict=True)]
    print(f"  live / reference      median {statistics.median(ratios):.2f}x "
          f"(runs {' '.join(f'{r:.2f}' for r in ratios)}; target >= 0.25x)")
    print(f"  headless / reference  median {med['headless'] / med['reference']:.2f}x; "
          f"headless / live {med['headless'] / med['live']:.2f}x")
    lost = sum(c["acquired"] - c["in_file"] for _, c in all_counts)
    bad = [c for _, c in all_counts if not c["contiguous"] or c["exit_code"] != 0
           or not c["acquired"] == c["converted"] == c["stored"] == c["in_file"] == N_TRACES]
    print(f"  traces lost over all runs: {lost}; runs with a gap, a count mismatch or a "
          f"non-zero exit: {len(bad)}")
    if bad:
        # a ratio measured on a chain that skipped its work is no measurement
        print(f"  FAILED: {bad}")
        sys.exit(1)


if __name__ == "__main__":
    main()
