"""Scans on the simulated bench, through the real drivers: the stage on its pty, the
digitiser and generator over TCP on 127.0.0.1. What the instruments did is read back
from the simulators themselves (the stage's own position, the generator's ``OUTP?`` on a
link of its own), not from tankside's flags.

The scene is invented (simulators/scene.py); its beam is the truth the scan maps.
"""

from __future__ import annotations

import time
from collections import Counter
from pathlib import Path

import numpy as np
import pytest
from polling import wait_for
from scpi_client import scpi

from tankside.monitor.errors import ConfigError
from tankside.monitor.live.benchfile import load_bench
from tankside.monitor.live.scan import TOLERANCE_MM
from tankside.monitor.live.scanplan import plan_from_table
from tankside.monitor.live.session import LiveSession
from tankside.monitor.record.reader import SessionReader
from tankside.monitor.record.schema import EventKind, PointStatus
from tankside.simulators.bench import PROFILE_DIR as SIM_PROFILES
from tankside.simulators.bench import SimulatedBench

FAST = {"digitiser.record_length": 2000, "digitiser.trigger_timeout_s": 0.5,
        "digitiser.timeout_s": 1.0}


@pytest.fixture
def sim():
    with SimulatedBench(seed=21, trigger_period_s=0.005, stage=True) as bench:
        yield bench


def _bench(sim, tmp_path: Path, overrides: dict | None = None):
    path = sim.write_bench_file(tmp_path / "bench.toml", session_folder=str(tmp_path))
    return load_bench(path, {**FAST, **(overrides or {})})


def _line_plan(bench, xs: tuple[float, float, float], *, traces: int = 4,
               settle_s: float = 0.05):
    table = {"kind": "line", "settle_s": settle_s, "traces": traces, "speed_mm_s": 20.0,
             "axes": [{"name": "x", "start_mm": xs[0], "stop_mm": xs[1], "step_mm": xs[2]}]}
    return plan_from_table(table, source="test plan", base_dir=Path("."),
                           limits=dict(bench.stage.limits))


def _run(bench, plan, path: Path, *, seconds: float = 60.0, drive: bool = True,
         during=None) -> LiveSession:
    session = LiveSession.from_bench(bench, session_path=path, scan_plan=plan,
                                     drive_on_at_start="test operator" if drive else None,
                                     duration_s=seconds)
    session.start()
    try:
        if during is not None:
            during(session)
        assert session.wait(seconds + 20), "the session did not end"
    finally:
        session.stop("test done")
        session.wait(20)
    return session


def _points(path: Path):
    with SessionReader(path) as reader:
        return (reader.scan_points(), reader.trace_points(), reader.events(),
                list(reader.iter_results()), reader.integrity_check())


def test_a_line_scan_completes_every_point_once_at_the_stages_positions(sim, tmp_path):
    bench = _bench(sim, tmp_path)
    plan = _line_plan(bench, (-1.0, 1.0, 0.5))
    session = _run(bench, plan, tmp_path / "s.db")
    assert session.exit_status == "completed", session.stop_reason
    assert "scan complete" in session.stop_reason
    # at the end the digitiser was closed by the session, not lost (the bench panel says so)
    (dig,) = [i for i in session.snapshot().instruments if i.name == "digitiser"]
    assert dig.ended and not dig.connected
    points, trace_points, events, results, integrity = _points(tmp_path / "s.db")
    assert integrity == "ok"
    assert [p.index for p in points] == list(range(5))
    assert all(p.status == PointStatus.DONE and p.counted == 4 for p in points)
    for p, want in zip(points, (-1.0, -0.5, 0.0, 0.5, 1.0), strict=True):
        assert p.target_mm == {"x": want}
        # the recorded position is the mean of the stage's own readings at the point,
        # each within the scan's tolerance of the target
        assert p.position_mm["x"] == pytest.approx(want, abs=TOLERANCE_MM)
    # the counted traces are the ones the points name, and each trace counts at most once
    counted = sorted(seq for seq, (_, c, _) in trace_points.items() if c)
    assert len(counted) == 20
    for p in points:
        mine = [s for s, (i, c, _) in trace_points.items() if i == p.index and c]
        assert (min(mine), max(mine)) == (p.first_seq, p.last_seq)
    by_seq = {r["seq"]: r for r in results}
    assert not any(by_seq[s]["clipped"] for s in counted)
    kinds = [e["kind"] for e in events]
    assert kinds.count(EventKind.SCAN_START) == 1 and kinds.count(EventKind.SCAN_END) == 1
    # the beam is symmetric about the focus (x = 0): the map says so (invented scene)
    p_r = [p.value("peak_rarefactional_pa") for p in points]
    assert p_r[2] == max(p_r)
    assert p_r[0] == pytest.approx(p_r[4], rel=0.05)
    assert p_r[1] == pytest.approx(p_r[3], rel=0.05)


def test_the_scan_waits_with_the_drive_off_and_goes_on_when_the_operator_switches_it_on(
        sim, tmp_path):
    bench = _bench(sim, tmp_path)
    plan = _line_plan(bench, (0.0, 0.5, 0.5))

    def during(session):
        time.sleep(1.5)
        snap = session.snapshot()
        assert snap.scan is not None and snap.scan.completed == 0
        assert snap.scan.phase == "waiting" and "drive off" in snap.scan.why
        assert scpi(sim.generator_port, "OUTP?") == "0"     # tankside switched nothing on
        session.switch_drive(True, "test operator")

    session = _run(bench, plan, tmp_path / "s.db", drive=False, during=during)
    assert session.exit_status == "completed", session.stop_reason
    points, *_ = _points(tmp_path / "s.db")
    assert [p.index for p in points] == [0, 1]


def test_a_stall_mid_move_pauses_the_scan_and_it_goes_on(sim, tmp_path):
    bench = _bench(sim, tmp_path)
    plan = _line_plan(bench, (0.0, 1.0, 0.5))

    def during(session):
        wait_for(lambda: (session.snapshot().scan or object()).__dict__.get("completed", 0)
                 >= 1, 30, "the first point")
        sim.stage.stall_next_move("X", 0.5)

    session = _run(bench, plan, tmp_path / "s.db", during=during)
    assert session.exit_status == "completed", session.stop_reason
    points, _, events, _, _ = _points(tmp_path / "s.db")
    assert [p.index for p in points] == [0, 1, 2]
    assert all(p.status == PointStatus.DONE for p in points)
    for p in points:
        assert p.position_mm["x"] == pytest.approx(p.target_mm["x"], abs=TOLERANCE_MM)
    kinds = [e["kind"] for e in events]
    assert EventKind.SCAN_PAUSED in kinds and EventKind.SCAN_CONTINUED in kinds


def test_a_stage_lost_mid_scan_pauses_it_until_the_stage_is_back(sim, tmp_path):
    bench = _bench(sim, tmp_path)
    plan = _line_plan(bench, (0.0, 1.0, 0.5))

    def during(session):
        wait_for(lambda: session.snapshot().scan.completed >= 1, 30, "the first point")
        sim.stage.go_silent(True)
        wait_for(lambda: session.snapshot().scan.phase == "paused", 15, "the scan paused")
        assert "stage lost" in session.snapshot().scan.why
        done = session.snapshot().scan.completed
        time.sleep(0.5)
        assert session.snapshot().scan.completed == done      # nothing measured meanwhile
        sim.stage.go_silent(False)

    session = _run(bench, plan, tmp_path / "s.db", during=during)
    assert session.exit_status == "completed", session.stop_reason
    points, _, events, _, _ = _points(tmp_path / "s.db")
    assert [p.index for p in points] == [0, 1, 2]
    kinds = [e["kind"] for e in events]
    assert EventKind.INSTRUMENT_LOST in kinds and EventKind.INSTRUMENT_BACK in kinds
    assert EventKind.SCAN_PAUSED in kinds and EventKind.SCAN_CONTINUED in kinds


def test_clipped_traces_never_count_and_the_point_is_measured_after_auto_range(sim, tmp_path):
    # the default scene gives about 37 mV at the focus: a 20 mV range clips there until
    # auto-range steps it up (the clipping rule's default actions include auto-range)
    bench = _bench(sim, tmp_path, {"digitiser.range_v": 0.02})
    plan = _line_plan(bench, (0.0, 0.5, 0.5))
    session = _run(bench, plan, tmp_path / "s.db")
    assert session.exit_status == "completed", session.stop_reason
    points, trace_points, events, results, _ = _points(tmp_path / "s.db")
    assert [p.status for p in points] == [PointStatus.DONE] * 2
    by_seq = {r["seq"]: r for r in results}
    counted = [s for s, (_, c, _) in trace_points.items() if c]
    assert counted and not any(by_seq[s]["clipped"] for s in counted)
    assert any(e["kind"] == EventKind.RANGE_CHANGE for e in events)
    refused = Counter(w for (_, c, w) in trace_points.values() if not c)
    clipped_at_points = [s for s, (_, c, w) in trace_points.items() if w == "clipped"]
    # every clipped trace acquired at a point was refused, named as clipped
    assert all(not trace_points[s][1] for s in clipped_at_points), refused
    assert all(by_seq[s]["clipped"] for s in clipped_at_points)


def test_over_pressure_mid_scan_stops_stage_and_drive_and_ends_the_scan(sim, tmp_path):
    # p_r is about 185 kPa at the focus at the default 2 Vpp (invented scene); a limit of
    # 150 kPa trips on the way from x = -1 mm towards it
    bench = _bench(sim, tmp_path, {"alerts.over_pressure.limit_pa": 1.5e5,
                                   "alerts.over_pressure.actions": ["record", "safe-off"]})
    plan = _line_plan(bench, (-1.0, 1.0, 0.5))
    session = _run(bench, plan, tmp_path / "s.db")
    assert session.exit_status == "stopped-by-rule", session.stop_reason
    assert "safe-off" in session.stop_reason
    # read back from the instruments themselves
    assert scpi(sim.generator_port, "OUTP?") == "0"
    assert "HALT" in sim.stage.received
    assert not any(ax.moving(time.monotonic()) for ax in sim.stage.axes.values())
    points, trace_points, events, _, _ = _points(tmp_path / "s.db")
    assert len(points) < 5
    # the stage was told to stop for the safe-off itself (not only at the session's end)
    stops = [e["detail"] for e in events if e["kind"] == EventKind.STAGE_STOP]
    assert {"cause": "safe-off", "done": True} in stops, stops
    safe_off = [e for e in events if e["kind"] == EventKind.SAFE_OFF and e["detail"].get("done")]
    assert safe_off
    end = [e for e in events if e["kind"] == EventKind.SCAN_END]
    assert len(end) == 1 and "safe-off" in end[0]["detail"]["why"]
    assert end[0]["detail"]["completed"] == len(points)


def test_a_mean_waveform_plan_converts_each_points_mean_trace_once(sim, tmp_path):
    bench = _bench(sim, tmp_path)
    table = {"kind": "line", "settle_s": 0.05, "traces": 4, "speed_mm_s": 20.0,
             "combine": "mean-waveform",
             "axes": [{"name": "x", "start_mm": 0.0, "stop_mm": 0.5, "step_mm": 0.5}]}
    plan = plan_from_table(table, source="test plan", base_dir=Path("."),
                           limits=dict(bench.stage.limits))
    session = _run(bench, plan, tmp_path / "s.db")
    assert session.exit_status == "completed", session.stop_reason
    with SessionReader(tmp_path / "s.db") as reader:
        points = reader.scan_points()
        traces = {s: reader.trace(s) for p in points
                  for s in range(p.first_seq, p.last_seq + 1)}
        counted = reader.trace_points()
    from tankside.monitor.live.build import session_parts
    converter = session_parts(bench, session_path=tmp_path / "other.db")["converter"]
    for p in points:
        mine = [traces[s].raw for s in range(p.first_seq, p.last_seq + 1) if counted[s][1]]
        assert len(mine) == 4
        # the reference: numpy's mean of the same four traces' volts, converted once
        mean = np.mean([r.volts() for r in mine], axis=0)
        want = converter.process(mean, mine[0].dt_s,
                                 resolution_v=max(abs(r.volts_per_code) for r in mine)).flat()
        for name in ("peak_rarefactional_pa", "peak_compressional_pa",
                     "pulse_intensity_integral_j_per_m2"):
            assert p.waveform[name] == pytest.approx(want[name], rel=1e-9), name
        # and the per-trace parameters are still averaged beside it
        assert p.results["peak_rarefactional_pa"].n == 4


def test_a_passive_scan_maps_the_points_another_program_moves_the_stage_to(sim, tmp_path):
    # a stage profile with query commands only: tankside reads the position, never moves
    # or stops the stage; here "another program" is the test, at the simulated stage
    text = (Path(SIM_PROFILES) / "sim-stage.toml").read_text(encoding="utf-8")
    passive = "\n".join(line for line in text.splitlines()
                        if not line.startswith(("move_", "home", "stop", "set_velocity")))
    profile = tmp_path / "passive-stage.toml"
    profile.write_text(passive + "\n", encoding="utf-8")
    bench_path = sim.write_bench_file(tmp_path / "bench.toml", session_folder=str(tmp_path))
    bench_path.write_text(bench_path.read_text().replace(
        str(Path(SIM_PROFILES) / "sim-stage.toml"), str(profile)))
    bench = load_bench(bench_path, FAST)
    plan = _line_plan(bench, (0.0, 1.0, 0.5))
    visits = (1.0, 0.0, 0.5)
    # the stage starts at x = 0, a point of the plan: park it off the plan first
    sim.stage.handle("X GO -1000")
    wait_for(lambda: not sim.stage.axes["X"].moving(time.monotonic()), 5, "the stage parked")

    def during(session):
        for x in visits:
            sim.stage.handle(f"X GO {round(x * 1000)}")
            wait_for(lambda x=x: any(
                p.target_mm["x"] == x for p in _points(tmp_path / "s.db")[0]), 20,
                f"the point at x = {x}")
        with pytest.raises(ConfigError, match="passive"):
            session.move_stage({"x": 0.25})

    session = _run(bench, plan, tmp_path / "s.db", during=during)
    assert session.exit_status == "completed", session.stop_reason
    points, *_ = _points(tmp_path / "s.db")
    # measured in the order the stage was brought there, each once, at its reading
    assert sorted(p.index for p in points) == [0, 1, 2]
    order = [p.target_mm["x"] for p in sorted(points, key=lambda p: p.time_s)]
    assert order == list(visits)
    assert all(p.position_mm["x"] == pytest.approx(p.target_mm["x"], abs=TOLERANCE_MM)
               for p in points)
    # tankside sent the stage no move, home, speed or stop: only its queries
    sent = [line for line in sim.stage.received if line != "WHO?"]
    assert sent and all(line.endswith(("AT?", "BUSY?")) for line in sent), set(sent)
