"""One session per instrument: a second session on the same digitiser is refused.

Two sessions arming and fetching one digitiser corrupt each other's acquisitions.
Checked on the simulated bench over TCP, with the lock files in a folder of the test.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys

import pytest
from polling import wait_for

from tankside.monitor.errors import InstrumentBusy
from tankside.monitor.live.benchfile import load_bench
from tankside.monitor.live.locks import InstrumentLock
from tankside.monitor.live.session import LiveSession
from tankside.monitor.outcome import ExitCode
from tankside.simulators.bench import SimulatedBench

FAST = {"digitiser.record_length": 2000, "digitiser.trigger_timeout_s": 0.5}


@pytest.fixture
def sim(tmp_path, monkeypatch):
    monkeypatch.setenv("TANKSIDE_LOCK_DIR", str(tmp_path / "locks"))
    with SimulatedBench(seed=2, trigger_period_s=0.005) as bench:
        yield bench


def _session(sim, tmp_path, name):
    path = sim.write_bench_file(tmp_path / f"{name}.toml", session_folder="sessions")
    return LiveSession.from_bench(load_bench(path, FAST), session_path=tmp_path / f"{name}.db")


def test_a_second_session_on_the_same_digitiser_is_refused_naming_the_holder(sim, tmp_path):
    first = _session(sim, tmp_path, "first")
    first.start()
    try:
        second = _session(sim, tmp_path, "second")
        with pytest.raises(InstrumentBusy) as info:
            second.start()
        message = str(info.value)
        assert sim.digitiser_resource in message and f"pid {os.getpid()}" in message
        assert "first.db" in message
        assert not (tmp_path / "second.db").exists() and not second.running
    finally:
        first.stop("test done")
        assert first.wait(30)
    again = _session(sim, tmp_path, "again")      # released when the first one ended
    again.start()
    again.stop("test done")
    assert again.wait(30)


def test_a_lock_left_by_a_dead_process_is_taken_over(sim, tmp_path):
    lock = InstrumentLock(sim.digitiser_resource, folder=tmp_path / "locks")
    lock.path.parent.mkdir(parents=True)
    lock.path.write_text(json.dumps({"pid": 999999, "session": "gone.db", "since": "then"}))
    session = _session(sim, tmp_path, "after")
    session.start()
    session.stop("test done")
    assert session.wait(30)


def test_the_command_says_who_holds_it_in_one_line(sim, tmp_path):
    first = _session(sim, tmp_path, "first")
    first.start()
    try:
        path = sim.write_bench_file(tmp_path / "cli.toml", session_folder="sessions")
        proc = subprocess.run([sys.executable, "-m", "tankside.monitor.cli", "watch",
                               "--accept-caution", "--bench", str(path), "--headless",
                               "--traces", "3"],
                              capture_output=True, text=True, timeout=60,
                              env={**os.environ, "TANKSIDE_LOCK_DIR": str(tmp_path / "locks")})
        assert proc.returncode == ExitCode.USAGE
        assert "in use by another tankside session" in proc.stderr
        assert proc.stderr.strip().count("\n") == 0 and "Traceback" not in proc.stderr
        wait_for(lambda: first.snapshot().acquired > 3, 10, "the first session goes on")
    finally:
        first.stop("test done")
        assert first.wait(30)
