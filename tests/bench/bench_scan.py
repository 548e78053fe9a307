"""The scan loop's own overhead beside the moves, settling and acquisition it waits for.

A line scan runs on the simulated bench (stage on its pty, digitiser and generator over
TCP on 127.0.0.1) through ``LiveSession`` as ``tankside scan`` runs it. The runner stamps
each point (move asked, arrival seen, point opened after settling, point complete); the
simulator says what the waits had to be:

* move: the simulated stage's own trapezoidal motion time for the step (its speed and
  acceleration), the time the stage really moved;
* settle: the plan's settle time;
* acquisition: the traces the point needs, plus the one trace skipped after settling (it
  may have been armed before the stage was at rest), at the simulator's trigger period.

Printed side by side, as shares of the scan's wall time:

* the loop's own time: between one point's end and the next move asked, and from the
  settle time's end to the point being opened. Target: under 5 %.
* arrival seen late: arrival seen minus the motion time (the stage's position readings
  every 20 ms while it moves, the serial exchanges, the driver);
* acquisition beyond the traces: traces at the point arriving later than one trigger
  period each (the processing thread's verdict gate, refused traces).

Run: ``.venv/bin/python tests/bench/bench_scan.py`` (exit 1 when the target is missed).
"""

from __future__ import annotations

import math
import sys
import tempfile
import time
from pathlib import Path

from tankside.monitor.live.benchfile import load_bench
from tankside.monitor.live.build import scan_parts
from tankside.monitor.live.scanplan import plan_from_table
from tankside.monitor.live.session import LiveSession
from tankside.simulators.bench import SimulatedBench

TRIGGER_PERIOD_S = 0.01
POINTS = 40
STEP_MM = 0.25
TRACES = 4
SETTLE_S = 0.05
TARGET = 0.05


def motion_time_s(distance_mm: float, speed_mm_s: float, accel_mm_s2: float) -> float:
    """Time of a trapezoidal move (triangular when too short to reach the speed)."""
    if distance_mm <= 0:
        return 0.0
    if distance_mm >= speed_mm_s**2 / accel_mm_s2:
        return distance_mm / speed_mm_s + speed_mm_s / accel_mm_s2
    return 2.0 * math.sqrt(distance_mm / accel_mm_s2)


def main() -> int:
    with tempfile.TemporaryDirectory() as tmp, \
            SimulatedBench(seed=3, trigger_period_s=TRIGGER_PERIOD_S, stage=True) as sim:
        folder = Path(tmp)
        bench = load_bench(sim.write_bench_file(folder / "bench.toml",
                                                session_folder=str(folder)),
                           {"digitiser.record_length": 4000})
        stop = -2.0 + STEP_MM * (POINTS - 1)
        table = {"kind": "line", "settle_s": SETTLE_S, "traces": TRACES, "speed_mm_s": 20.0,
                 "fixed": {"y": 0.0, "z": 0.0},
                 "axes": [{"name": "x", "start_mm": -2.0, "stop_mm": stop,
                           "step_mm": STEP_MM}]}
        plan = plan_from_table(table, source="bench", base_dir=folder,
                               limits=dict(bench.stage.limits))
        session = LiveSession(**scan_parts(bench, session_path=folder / "scan.db",
                                           scan_plan=plan), drive_on_at_start="benchmark")
        axis = sim.stage.axes["X"]
        speed, accel = axis.speed / 1000.0, axis.accel / 1000.0     # counts -> mm
        session.start()
        assert session.wait(600)
        runner = session._scan_runner
        assert runner is not None
        timings = runner.timings
        if session.exit_status != "completed" or len(timings) != POINTS:
            print(f"bad run: {session.exit_status} {session.stop_reason}, "
                  f"{len(timings)} of {POINTS} points timed")
            return 1
    wall = timings[-1].done - timings[0].asked
    moves = [motion_time_s(STEP_MM if i else 0.0, speed, accel) for i in range(POINTS)]
    # the first point: the stage starts at x = 0, 2 mm away
    moves[0] = motion_time_s(2.0, speed, accel)
    waited_move = sum(t.arrived - t.asked for t in timings)
    settle_gap = sum(t.opened - t.arrived - SETTLE_S for t in timings)
    acquire = sum(t.done - t.opened for t in timings)
    between = sum(b.asked - a.done for a, b in zip(timings, timings[1:], strict=False))
    needed = {
        "moves (stage motion)": sum(moves),
        "settling (plan)": SETTLE_S * POINTS,
        "acquisition ((traces + 1) x period)": (TRACES + 1) * TRIGGER_PERIOD_S * POINTS,
    }
    own = between + settle_gap
    print(f"scan of {POINTS} points, {STEP_MM} mm apart, {TRACES} traces each, "
          f"settle {SETTLE_S} s, {1 / TRIGGER_PERIOD_S:.0f} traces/s; wall {wall:.2f} s")
    late_arrival = waited_move - sum(moves)
    late_traces = acquire - needed["acquisition ((traces + 1) x period)"]
    rows = [(f"waited for {name}", seconds) for name, seconds in needed.items()]
    rows += [("arrival seen after the motion ended", late_arrival),
             ("acquisition beyond the traces' periods", late_traces),
             ("the loop's own time (between points, settled)", own)]
    for name, seconds in rows:
        print(f"  {name:50s} {seconds:7.3f} s  {seconds / wall:6.1%}")
    print(f"  target: the loop's own time under {TARGET:.0%} of the wall time")
    ok = own / wall < TARGET
    print("PASS" if ok else "MISS")
    return 0 if ok else 1


if __name__ == "__main__":
    t0 = time.perf_counter()
    code = main()
    print(f"({time.perf_counter() - t0:.1f} s)")
    sys.exit(code)
