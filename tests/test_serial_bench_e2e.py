"""A live session on the simulated bench with its serial stage and thermometer, through
the real drivers on ptys: the stage is moved to three positions, the recorded positions
are the simulator's, and p_r follows the simulated beam there."""

from __future__ import annotations

import time

import numpy as np
import pytest
from scipy.optimize import brentq

from tankside.monitor.live.benchfile import load_bench
from tankside.monitor.live.session import LiveSession
from tankside.monitor.record.reader import SessionReader
from tankside.simulators.bench import SimulatedBench
from tankside.simulators.scene import beam_factor


@pytest.fixture
def sim():
    with SimulatedBench(seed=6, trigger_period_s=0.01, stage=True, thermometer=True) as b:
        yield b


def _wait(check, seconds: float, what: str):
    deadline = time.monotonic() + seconds
    while time.monotonic() < deadline:
        value = check()
        if value:
            return value
        time.sleep(0.02)
    raise AssertionError(f"timed out waiting for {what}")


def test_three_positions_recorded_and_p_r_follows_the_beam(sim, tmp_path):
    path = sim.write_bench_file(tmp_path / "bench.toml", session_folder=str(tmp_path))
    bench = load_bench(path, {"digitiser.record_length": 4000})
    session = LiveSession.from_bench(bench, session_path=tmp_path / "s.db",
                                     drive_on_at_start="test operator")
    session.start()
    params, f = sim.scene.params, sim.scene.drive.frequency_hz

    def beam_mm(x_mm: float) -> float:
        # the scene's beam across the geometric focal plane, re its on-axis value there
        return (beam_factor((x_mm * 1e-3, 0.0, 0.0), f, params)
                / beam_factor((0.0, 0.0, 0.0), f, params))

    # on axis, and where the scene's beam is 0.75 and 0.5 of it (brentq in the main lobe)
    targets = [0.0] + [round(brentq(lambda x, lv=lv: beam_mm(x) - lv, 0.0, 1.0), 3)
                       for lv in (0.75, 0.5)]
    windows = []
    try:
        for x in targets:
            session.move_stage({"x": x})
            _wait(lambda x=x: abs(sim.stage.position_mm()["x"] - x) < 1e-3
                  and not sim.stage.axes["X"].moving(time.monotonic()), 5, f"stage at {x}")
            time.sleep(0.3)                       # the workers' next position reading
            start = time.time()
            _wait(lambda s=start: session.snapshot().time_s > s + 0.3, 10, "traces there")
            windows.append((start, time.time()))
    finally:
        session.stop("test done")
        assert session.wait(30)
    # the session stopped the stage at its end and says so (not LOST)
    assert "HALT" in sim.stage.received
    end = session.snapshot().bench
    assert end is not None and end.stage_ended and end.thermometer_ended
    with SessionReader(tmp_path / "s.db") as reader:
        results = list(reader.iter_results())
        states = reader.bench_states(0, max(r["seq"] for r in results))
    p_r = []
    for (t0, t1), x in zip(windows, targets, strict=True):
        here = [r for r in results if t0 <= r["time_s"] < t1 and r["converted"]
                and r["seq"] in states and states[r["seq"]].positions_mm]
        assert len(here) >= 5, x
        # the recorded position is the simulator's, to its 1 um count
        recorded = [states[r["seq"]].positions_mm["x"] for r in here]
        assert max(abs(v - x) for v in recorded) <= 1.0e-3 + 1e-9, (x, recorded[:3])
        p_r.append(float(np.median([r["peak_rarefactional_pa"] for r in here])))
    # the scene's own truth: its beam factor at those points (invented scene), p_r to
    # follow it within 2 %
    for x, p in zip(targets[1:], p_r[1:], strict=True):
        truth = beam_mm(x)
        assert p / p_r[0] == pytest.approx(truth, rel=0.02), (x, p / p_r[0], truth)
