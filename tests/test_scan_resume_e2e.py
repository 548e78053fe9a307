"""``tankside scan`` as a user runs it, on the simulated bench: a plan outside the soft
limits is refused before the stage moves, the dry run touches no instrument, and a scan
killed with SIGKILL at random points resumes in the same file until every point is
recorded exactly once and the file passes SQLite's integrity check.
"""

from __future__ import annotations

import os
import random
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest
from polling import wait_for

from tankside.monitor.cli import main
from tankside.monitor.outcome import ExitCode
from tankside.monitor.record.reader import SessionReader
from tankside.monitor.record.schema import EventKind
from tankside.simulators.bench import SimulatedBench

OPERATOR = ("--accept-caution", "--drive-on", "--headless", "--status-every", "0.5")
PLAN = """\
kind = "raster"
settle_s = 0.02
traces = 3
speed_mm_s = 20.0
serpentine = true

[[axes]]
name = "x"
start_mm = -1.0
stop_mm = 1.0
step_mm = 0.5

[[axes]]
name = "y"
start_mm = -0.5
stop_mm = 0.5
step_mm = 0.5
"""
POINTS = 15


@pytest.fixture
def sim():
    with SimulatedBench(seed=31, trigger_period_s=0.005, stage=True) as bench:
        yield bench


def _files(sim, tmp_path: Path, plan: str = PLAN) -> tuple[Path, Path]:
    bench = sim.write_bench_file(tmp_path / "bench.toml", session_folder=str(tmp_path))
    plan_path = tmp_path / "plan.toml"
    plan_path.write_text(plan)
    return bench, plan_path


def _scan(*args: str) -> subprocess.Popen:
    env = dict(os.environ, PYTHONUNBUFFERED="1")
    return subprocess.Popen([sys.executable, "-m", "tankside.monitor.cli", "scan", *OPERATOR,
                             *args], stdout=subprocess.DEVNULL, stderr=subprocess.PIPE,
                            text=True, env=env)


def _completed(path: Path) -> int:
    try:
        with SessionReader(path) as reader:
            return len(reader.scan_points())
    except Exception:  # noqa: BLE001 - the file is being created
        return 0


def test_a_point_outside_the_soft_limits_is_refused_naming_it(sim, tmp_path, capsys):
    plan = PLAN.replace("stop_mm = 1.0", "stop_mm = 80.0").replace("step_mm = 0.5\n\n[[",
                                                                   "step_mm = 20.0\n\n[[")
    bench, plan_path = _files(sim, tmp_path, plan)
    code = main(["scan", *OPERATOR, "--bench", str(bench), "--plan", str(plan_path),
                 "--session", str(tmp_path / "s.db")])
    err = capsys.readouterr().err
    assert code == ExitCode.USAGE
    assert "point 2 (x = 39 mm, y = -0.5 mm)" in err and "soft limits" in err
    assert not (tmp_path / "s.db").exists()
    assert not any(line.split()[1:2] == ["GO"] for line in sim.stage.received)


def test_the_dry_run_prints_the_plan_and_sends_nothing(sim, tmp_path, capsys):
    bench, plan_path = _files(sim, tmp_path)
    before = list(sim.stage.received)
    code = main(["scan", "--bench", str(bench), "--plan", str(plan_path), "--dry-run"])
    out = capsys.readouterr().out
    assert code == ExitCode.OK
    assert "raster, 15 points" in out and "travel" in out and "estimate" in out
    assert sim.stage.received == before
    assert not list(tmp_path.glob("*.db"))


def test_killed_scans_resume_until_every_point_is_recorded_exactly_once(sim, tmp_path):
    bench, plan_path = _files(sim, tmp_path)
    path = tmp_path / "s.db"
    rng = random.Random(2026)
    kills = []
    proc = _scan("--bench", str(bench), "--plan", str(plan_path), "--session", str(path))
    resumes = 0
    try:
        for _ in range(2):
            # kill -9 once a random number of points more are recorded
            target = _completed(path) + rng.randint(1, 4)
            wait_for(lambda t=target, p=proc: _completed(path) >= t or p.poll() is not None,
                     60, f"{target} points")
            if proc.poll() is not None:
                break
            time.sleep(rng.uniform(0.0, 0.3))       # anywhere in a move, settle or point
            proc.send_signal(signal.SIGKILL)
            proc.wait(10)
            kills.append(_completed(path))
            with SessionReader(path) as reader:
                assert reader.stop is None          # killed: no stop record
            proc = _scan("--bench", str(bench), "--resume", str(path))
            resumes += 1
        _, err = proc.communicate(timeout=120)
        assert proc.returncode == 0, err
    finally:
        if proc.poll() is None:
            proc.kill()
    assert resumes >= 1, "the scan ended before it could be killed"
    with SessionReader(path) as reader:
        points = reader.scan_points()
        events = reader.events()
        assert reader.integrity_check() == "ok"
        assert reader.stop is not None and "scan complete" in reader.stop["reason"]
        seqs = reader.seqs()
    assert [p.index for p in points] == list(range(POINTS))       # each exactly once
    assert len(seqs) == len(set(seqs)) and seqs == sorted(seqs)
    resumed = [e for e in events if e["kind"] == EventKind.SCAN_RESUMED]
    assert len(resumed) == resumes
    for event, done_then in zip(resumed, kills, strict=False):
        assert event["detail"]["previous_stop"] is None
        assert event["detail"]["completed"] == done_then
        assert event["detail"]["first_point"] == done_then     # points go in plan order
    # points completed after the first resume say so
    first_resumed = resumed[0]["detail"]["completed"]
    assert all(p.resumed == (p.index >= first_resumed) for p in points)
