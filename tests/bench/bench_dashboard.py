"""Live chain trace rate with the dashboard running vs headless, side by side in one run.

Each phase is a fresh live session on the simulated bench (loopback). The headless
phase only waits; the dashboard phase runs the real DashboardApp headless under
Textual's run_test at a fixed terminal size, refreshing at its normal rate. The rate
is traces converted per second over a window after a short warm-up.

Two trigger settings: the bench's default 20 traces/s (what the demo shows), and a
fast trigger that keeps the chain busy, where the display competes for the CPU.
"""

from __future__ import annotations

import asyncio
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from tankside.monitor.benchfile import load_bench  # noqa: E402
from tankside.monitor.dashboard.app import DashboardApp  # noqa: E402
from tankside.monitor.pipeline import LiveSession  # noqa: E402
from tankside.simulators.bench import SimulatedBench  # noqa: E402

WARMUP_S = 1.5
WINDOW_S = 6.0
SIZE = (160, 48)


def _session(bench: SimulatedBench, folder: Path) -> LiveSession:
    folder.mkdir(parents=True, exist_ok=True)
    path = bench.write_bench_file(folder / "bench.toml", session_folder=str(folder / "sessions"))
    session = LiveSession.from_bench(load_bench(path, {}))
    session.start()
    return session


def _rate_over_window(session: LiveSession, sleep) -> float:
    sleep(WARMUP_S)
    n0, t0 = session.snapshot().converted, time.monotonic()
    sleep(WINDOW_S)
    n1, t1 = session.snapshot().converted, time.monotonic()
    return (n1 - n0) / (t1 - t0)


def headless_rate(bench: SimulatedBench, folder: Path) -> float:
    session = _session(bench, folder)
    try:
        return _rate_over_window(session, time.sleep)
    finally:
        session.stop("benchmark")
        session.wait(30)


def dashboard_rate(bench: SimulatedBench, folder: Path) -> tuple[float, int]:
    session = _session(bench, folder)

    async def run() -> tuple[float, int]:
        app = DashboardApp(session, first_run_notice=False)
        async with app.run_test(size=SIZE) as pilot:
            await asyncio.sleep(WARMUP_S)
            n0, t0 = session.snapshot().converted, time.monotonic()
            drawn0 = app.trace.seq
            await asyncio.sleep(WINDOW_S)
            n1, t1 = session.snapshot().converted, time.monotonic()
            assert app.trace.seq > drawn0, "the dashboard did not redraw"
            await pilot.press("q")
        return (n1 - n0) / (t1 - t0), app.trace.seq

    try:
        return asyncio.run(run())
    finally:
        if session.running:
            session.stop("benchmark")
        session.wait(30)


def main() -> None:
    print(f"dashboard vs headless trace rate ({SIZE[0]}x{SIZE[1]}, window {WINDOW_S:g} s, "
          "two rounds each, alternating)")
    for label, period_s in (("default trigger 20/s", None), ("fast trigger 500/s", 0.002)):
        heads, dashes = [], []
        for _ in range(2):
            with tempfile.TemporaryDirectory() as tmp:  # a fresh folder per round
                with SimulatedBench(seed=1, trigger_period_s=period_s) as bench:
                    heads.append(headless_rate(bench, Path(tmp) / "h"))
                with SimulatedBench(seed=1, trigger_period_s=period_s) as bench:
                    dashes.append(dashboard_rate(bench, Path(tmp) / "d")[0])
        h, d = sum(heads) / len(heads), sum(dashes) / len(dashes)
        print(f"  {label:22s} headless {h:7.1f} tr/s   dashboard {d:7.1f} tr/s   "
              f"ratio {d / h:6.1%}   (rounds: headless "
              f"{', '.join(f'{x:.1f}' for x in heads)}; dashboard "
              f"{', '.join(f'{x:.1f}' for x in dashes)})")


if __name__ == "__main__":
    main()
