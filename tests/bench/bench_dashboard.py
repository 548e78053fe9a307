"""Live chain trace rate with the dashboard running vs headless, side by side in one run.

Each phase is a fresh live session on the simulated bench (loopback). The simulated
instruments run in a process of their own, as real instruments are other machines.

* headless: ``LiveSession`` in this process, no display (what ``watch --headless`` runs);
* dashboard: what ``watch`` and ``demo`` run: the session in a child process
  (``SessionProcess``) and the real ``DashboardApp`` here, under Textual's
  ``run_test`` at a fixed terminal size, refreshing at its normal rate;
* dashboard, one process: the same app drawing from a ``LiveSession`` in its own
  process, for comparison (how the dashboard ran before the session had a process
  of its own).

The rate is traces converted per second over a window after a short warm-up. Two
settings of the simulated digitiser: the bench's default trigger, 20 traces/s (what
the demo shows), and free-running, serving pre-computed traces with no wait for a
trigger, so that the chain runs flat out and the display competes with it for the
CPU. Rounds alternate between the phases. Target: dashboard >= 90 % of headless.

Run: .venv/bin/python tests/bench/bench_dashboard.py
"""

from __future__ import annotations

import asyncio
import io
import multiprocessing
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from tankside.monitor.benchfile import load_bench  # noqa: E402
from tankside.monitor.dashboard.app import DashboardApp  # noqa: E402
from tankside.monitor.pipeline import LiveSession  # noqa: E402
from tankside.monitor.session_process import SessionProcess, SessionSpec  # noqa: E402
from tankside.simulators.bench import SimulatedBench  # noqa: E402

WARMUP_S = 2.0
WINDOW_S = 6.0
ROUNDS = 3
SIZE = (160, 48)


def _serve(conn, precomputed, folder) -> None:
    with SimulatedBench(seed=1, precomputed=precomputed) as bench:
        path = bench.write_bench_file(Path(folder) / "bench.toml",
                                      session_folder=str(Path(folder) / "sessions"))
        conn.send(str(path))
        conn.recv()  # until the parent is done


def _rate(session, sleep) -> float:
    sleep(WARMUP_S)
    n0, t0 = session.snapshot().converted, time.monotonic()
    sleep(WINDOW_S)
    n1, t1 = session.snapshot().converted, time.monotonic()
    return (n1 - n0) / (t1 - t0)


def headless_rate(bench_path: str, db: Path) -> float:
    session = LiveSession.from_bench(load_bench(bench_path, {}), session_path=db)
    session.start()
    try:
        return _rate(session, time.sleep)
    finally:
        session.stop("benchmark")
        session.wait(30)


def dashboard_rate(bench_path: str, db: Path, *, own_process: bool) -> float:
    bench = load_bench(bench_path, {})
    if own_process:
        session = SessionProcess(SessionSpec(bench, db))
    else:
        session = LiveSession.from_bench(bench, session_path=db)
    session.start()

    async def run() -> float:
        app = DashboardApp(session, first_run_notice=False)
        async with app.run_test(size=SIZE) as pilot:
            drawn0 = []

            async def sleep(s):
                drawn0.append(app.trace.seq)
                await asyncio.sleep(s)

            await sleep(WARMUP_S)
            n0, t0 = session.snapshot().converted, time.monotonic()
            await sleep(WINDOW_S)
            n1, t1 = session.snapshot().converted, time.monotonic()
            if app.trace.seq <= drawn0[-1]:
                raise RuntimeError("the dashboard did not redraw")
            await pilot.press("q")
        return (n1 - n0) / (t1 - t0)

    try:
        return asyncio.run(run())
    finally:
        if session.running:
            session.stop("benchmark")
        session.wait(30)
        if own_process:
            session.close(report=io.StringIO())


def main() -> None:
    print(f"dashboard vs headless trace rate ({SIZE[0]}x{SIZE[1]}, window {WINDOW_S:g} s, "
          f"{ROUNDS} rounds each, alternating; simulated bench in its own process)")
    ctx = multiprocessing.get_context("spawn")
    for label, precomputed in (("default trigger, 20 traces/s", 0),
                               ("free-running, pre-computed traces", 8)):
        rates: dict[str, list[float]] = {"headless": [], "dashboard": [], "one process": []}
        with tempfile.TemporaryDirectory() as tmp:
            parent, child = ctx.Pipe()
            server = ctx.Process(target=_serve, args=(child, precomputed, tmp))
            server.start()
            bench_path = parent.recv()
            try:
                for r in range(ROUNDS):
                    rates["headless"].append(headless_rate(bench_path, Path(tmp) / f"h{r}.db"))
                    rates["dashboard"].append(dashboard_rate(
                        bench_path, Path(tmp) / f"d{r}.db", own_process=True))
                    rates["one process"].append(dashboard_rate(
                        bench_path, Path(tmp) / f"o{r}.db", own_process=False))
            finally:
                parent.send("stop")
                server.join(10)
        mean = {k: sum(v) / len(v) for k, v in rates.items()}
        h = mean["headless"]
        print(f"  {label}")
        for name, values in rates.items():
            ratio = "" if name == "headless" else f"   {mean[name] / h:6.1%} of headless"
            print(f"    {name:12s} {mean[name]:7.1f} tr/s{ratio}   (rounds: "
                  f"{', '.join(f'{x:.1f}' for x in values)})")
        verdict = "met" if mean["dashboard"] >= 0.9 * h else "NOT met"
        print(f"    dashboard / headless {mean['dashboard'] / h:.1%} (target >= 90 %: {verdict})")


if __name__ == "__main__":
    main()
