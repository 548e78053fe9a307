"""Live chain trace rate with the dashboard running vs headless, side by side in one run.

Each phase is a fresh live session on the simulated bench (loopback). The simulated
instruments run in a process of their own, as real instruments are other machines.

* headless: ``LiveSession`` in this process, no display (what ``watch --headless`` runs);
* dashboard: what ``watch`` and ``demo`` run: the session in a child process
  (``SessionProcess``) and the real ``DashboardApp`` here, under Textual's
  ``run_test`` at a fixed terminal size, refreshing at its normal rate;
* child, no display: the session in a child process, this process only reading its
  snapshots ten times a second (what the process split costs by itself);
* one process: the same app drawing from a ``LiveSession`` in its own process (how
  the dashboard ran before the session had a process of its own).

The rate is converted traces per second, counted in the session file over a
wall-clock window after a warm-up (acquisition times of traces with a result), so
that it does not depend on how snapshots travel. Two settings of the simulated
digitiser: the bench's default trigger, 20 traces/s (what the demo shows), and
free-running, serving pre-computed traces with no wait for a trigger, so that the
chain runs flat out and the display competes with it for the CPU. Rounds alternate
between the phases. Target: dashboard >= 90 % of headless.

Run: .venv/bin/python tests/bench/bench_dashboard.py
"""

from __future__ import annotations

import asyncio
import io
import multiprocessing
import statistics
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from tankside.monitor.dashboard.app import DashboardApp  # noqa: E402
from tankside.monitor.live.benchfile import load_bench  # noqa: E402
from tankside.monitor.live.child import SessionProcess, SessionSpec  # noqa: E402
from tankside.monitor.live.session import LiveSession  # noqa: E402
from tankside.monitor.record.store import SessionReader  # noqa: E402
from tankside.simulators.bench import SimulatedBench  # noqa: E402

WARMUP_S = 2.0
WINDOW_S = 6.0
ROUNDS = 3
SIZE = (160, 48)
PHASES = ("headless", "dashboard", "child, no display", "one process")


def _serve(conn, precomputed, folder) -> None:
    with SimulatedBench(seed=1, precomputed=precomputed) as bench:
        path = bench.write_bench_file(Path(folder) / "bench.toml",
                                      session_folder=str(Path(folder) / "sessions"))
        conn.send(str(path))
        conn.recv()  # until the parent is done


def _converted_in(db: Path, window: tuple[float, float]) -> float:
    """Converted traces per second acquired inside the wall-clock ``window``."""
    t0, t1 = window
    with SessionReader(db) as reader:
        n = sum(1 for r in reader.iter_results() if r["converted"] and t0 <= r["time_s"] < t1)
    return n / (t1 - t0)


async def _window(sleep) -> tuple[float, float]:
    await sleep(WARMUP_S)
    t0 = time.time()
    await sleep(WINDOW_S)
    return t0, time.time()


def run_phase(phase: str, bench_path: str, db: Path) -> float:
    bench = load_bench(bench_path, {})
    in_child = phase in ("dashboard", "child, no display")
    # the simulated drive switched on as `watch --drive-on` does: with the output off
    # every trace is noise and none would be converted (nor counted)
    session = (SessionProcess(SessionSpec(bench, db, drive_on_at_start="benchmark"),
                              report=io.StringIO()) if in_child
               else LiveSession.from_bench(bench, session_path=db,
                                           drive_on_at_start="benchmark"))
    session.start()

    async def reading(seconds: float) -> None:   # a display's reads, without drawing
        for _ in range(round(seconds * 10)):
            session.snapshot()
            await asyncio.sleep(0.1)

    async def run() -> tuple[float, float]:
        if phase in ("headless", "child, no display"):
            return await _window(reading if in_child else asyncio.sleep)
        app = DashboardApp(session, first_run_notice=False)
        async with app.run_test(size=SIZE) as pilot:
            window = await _window(asyncio.sleep)
            drawn = app.trace.seq
            await asyncio.sleep(0.5)
            if app.trace.seq <= drawn:
                raise RuntimeError("the dashboard did not redraw")
            await pilot.press("q")
        return window

    try:
        window = asyncio.run(run())
    finally:
        if session.running:
            session.stop("benchmark")
        session.wait(30)
    return _converted_in(db, window)


def main() -> None:
    print(f"dashboard vs headless trace rate ({SIZE[0]}x{SIZE[1]}, window {WINDOW_S:g} s, "
          f"{ROUNDS} rounds each, alternating; simulated bench in its own process; "
          "converted traces counted in the session file)")
    ctx = multiprocessing.get_context("spawn")
    for label, precomputed in (("default trigger, 20 traces/s", 0),
                               ("free-running, pre-computed traces", 8)):
        rates: dict[str, list[float]] = {name: [] for name in PHASES}
        with tempfile.TemporaryDirectory() as tmp:
            parent, child = ctx.Pipe()
            server = ctx.Process(target=_serve, args=(child, precomputed, tmp))
            server.start()
            bench_path = parent.recv()
            try:
                for r in range(ROUNDS):
                    for i, phase in enumerate(PHASES):
                        rates[phase].append(run_phase(phase, bench_path,
                                                      Path(tmp) / f"r{r}-{i}.db"))
            finally:
                parent.send("stop")
                server.join(10)
        median = {k: statistics.median(v) for k, v in rates.items()}
        h = median["headless"]
        print(f"  {label}: median of rounds, traces/s")
        for name, values in rates.items():
            ratio = "" if name == "headless" else f"  {median[name] / h:6.1%} of headless"
            print(f"    {name:18s} {median[name]:7.1f}{ratio}   (rounds: "
                  f"{', '.join(f'{x:.1f}' for x in values)})")
        verdict = "met" if median["dashboard"] >= 0.9 * h else "NOT met"
        print(f"    dashboard / headless {median['dashboard'] / h:.1%} (target >= 90 %: "
              f"{verdict}); dashboard / child without display "
              f"{median['dashboard'] / median['child, no display']:.1%}")


if __name__ == "__main__":
    main()
