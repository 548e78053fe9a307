"""The live session in a child process (what `watch` and `demo` run under the dashboard).

Against the simulated bench on 127.0.0.1: snapshots cross the pipe, commands reach the
session and its file, expected errors come back typed, and the session file is closed
with a reason however the session ends: asked to stop, signalled, or left behind by a
parent that died. A child that dies is reported, not waited for.
"""

from __future__ import annotations

import dataclasses
import io
import os
import signal
import socket
import subprocess
import sys
import textwrap
import time

import pytest
from polling import committed_traces, wait_for

from tankside.drivers.errors import ConnectionLost
from tankside.monitor.errors import CalibrationError, ConfigError, TanksideError
from tankside.monitor.live.benchfile import BenchConfig, load_bench
from tankside.monitor.live.child import SessionProcess, SessionSpec, session_for_display
from tankside.monitor.outcome import ExitCode
from tankside.monitor.record.store import SessionReader
from tankside.simulators.bench import SimulatedBench

FAST = {"digitiser.record_length": 2000, "digitiser.trigger_timeout_s": 0.5,
        "digitiser.timeout_s": 1.0}


@pytest.fixture
def sim():
    with SimulatedBench(seed=4, trigger_period_s=0.005) as bench:
        yield bench


def _bench(sim, tmp_path, overrides=None):
    path = sim.write_bench_file(tmp_path / "bench.toml", session_folder=str(tmp_path / "s"))
    return load_bench(path, {**FAST, **(overrides or {})})


@pytest.fixture
def child(sim, tmp_path):
    session = SessionProcess(SessionSpec(_bench(sim, tmp_path), tmp_path / "c.db",
                                         drive_on_at_start="test operator"),
                             report=io.StringIO())
    session.start()
    try:
        yield session
    finally:
        session.stop("test teardown")
        session.wait(30)


class TestCommandsAndSnapshots:
    def test_the_operator_switches_the_drive_through_the_child(self, child, sim):
        # read back from the simulated generator over its own TCP link, not our flag
        wait_for(lambda: sim.scene.drive.output_on, 10, "drive on at start")
        child.switch_drive(False, "test operator")
        wait_for(lambda: not sim.scene.drive.output_on, 10, "drive off")
        wait_for(lambda: child.snapshot().drive_on is False, 10, "snapshot says off")
        child.switch_drive(True, "test operator, confirmed")
        wait_for(lambda: sim.scene.drive.output_on, 10, "drive on again")
        child.stop("test done")
        assert child.wait(30)
        assert not sim.scene.drive.output_on        # switched off at the end
        with SessionReader(child.session_path) as r:
            drive = [(e["kind"], e["detail"]["cause"]) for e in r.events()
                     if e["kind"] in ("drive-on", "drive-off")]
        assert drive == [("drive-off", "start"), ("drive-on", "test operator"),
                         ("drive-off", "test operator"),
                         ("drive-on", "test operator, confirmed"),
                         ("drive-off", "end of session")]

    def test_snapshots_advance_and_commands_reach_the_file(self, child):
        assert child.pid != os.getpid() and child.running
        first = wait_for(lambda: child.snapshot().seq >= 3 and child.snapshot(), what="traces")
        later = wait_for(lambda: child.snapshot().seq >= first.seq + 10 and child.snapshot(),
                       what="more traces")
        assert later.state == "running" and later.pressure_pa.size == 2000
        assert later.converted >= later.seq and later.session_path == str(child.session_path)
        child.mark("probe at focus")
        child.set_method("deconvolve")
        # the switch takes effect at the next trace processed. The snapshot's method is
        # the last result's, which "auto" already resolves to "deconvolve", so waiting
        # for that name let the stop come before any trace had used the switch: wait for
        # a trace acquired after the request was taken (set_method returns then)
        asked_s = time.time()
        wait_for(lambda: child.snapshot().time_s > asked_s + 0.02, what="a later trace")
        assert child.snapshot().method == "deconvolve"
        child.stop("operator done")
        assert child.wait(30)
        assert not child.running
        assert (child.exit_code, child.exit_status, child.stop_reason) == (
            ExitCode.OK, "operator", "operator done")
        assert child.snapshot().state == "stopped"
        with SessionReader(child.session_path) as reader:
            events = reader.events()
            assert [e["detail"]["note"] for e in events if e["kind"] == "mark"] == [
                "probe at focus"]
            assert any(e["kind"] == "method-change" and e["detail"]["to"] == "deconvolve"
                       for e in events)
            assert reader.stop["exit_status"] == "operator"
            assert reader.stop["reason"] == "operator done"
            assert reader.stop["counts"]["stored"] == len(reader.seqs()) > 0

    def test_a_rejected_command_is_raised_here_and_the_session_goes_on(self, child):
        with pytest.raises(ValueError, match="method must be one of"):
            child.set_method("fastest")
        seq = child.snapshot().seq
        wait_for(lambda: child.snapshot().seq > seq + 5, what="traces after the error")
        assert child.running

    def test_acknowledge_reaches_the_session(self, sim, child):
        sim.faults.drop_connection()
        alert = wait_for(lambda: next((a for a in child.snapshot().alerts
                                     if a.rule == "instrument-fault"), None),
                       what="instrument-fault alert")
        child.acknowledge(alert.alert_id)
        wait_for(lambda: any(a.alert_id == alert.alert_id and a.acknowledged
                           for a in child.snapshot().alerts), what="acknowledged")
        child.stop()
        assert child.wait(30)
        with SessionReader(child.session_path) as reader:
            row = next(a for a in reader.alerts() if a["rule"] == "instrument-fault")
            assert row["acknowledged_time_s"] is not None

    def test_commands_after_the_end_are_a_typed_error(self, child):
        child.stop()
        assert child.wait(30)
        with pytest.raises(TanksideError, match="ended"):
            child.mark("too late")
        child.stop()   # a second stop is harmless


class TestStart:
    def test_unreachable_digitiser_is_raised_here_and_no_file_is_made(self, sim, tmp_path):
        with socket.socket() as s:
            s.bind(("127.0.0.1", 0))
            port = s.getsockname()[1]
        bench = _bench(sim, tmp_path, {"digitiser.resource": f"TCPIP0::127.0.0.1::{port}::SOCKET"})
        session = SessionProcess(SessionSpec(bench, tmp_path / "never.db"),
                                 report=io.StringIO())
        with pytest.raises(ConnectionLost, match=str(port)) as info:
            session.start()
        assert info.value.resource == f"TCPIP0::127.0.0.1::{port}::SOCKET"
        assert not session.running and session.wait(5)
        assert not (tmp_path / "never.db").exists()

    def test_bad_calibration_comes_back_with_its_fields(self, sim, tmp_path):
        bad = tmp_path / "bad-cal.csv"
        bad.write_text("frequency_hz,sensitivity_v_per_pa\n1e6,abc\n")
        bench = _bench(sim, tmp_path, {"calibration.file": str(bad)})
        session = SessionProcess(SessionSpec(bench, tmp_path / "never.db"),
                                 report=io.StringIO())
        with pytest.raises(CalibrationError) as info:
            session.start()
        assert "bad-cal.csv" in str(info.value) and "line 2" in str(info.value)
        assert info.value.source == str(bad) and info.value.line == 2

    def test_existing_session_file_is_refused_before_any_process(self, sim, tmp_path):
        (tmp_path / "taken.db").write_bytes(b"")
        with pytest.raises(ConfigError, match="already exists"):
            session_for_display(_bench(sim, tmp_path), own_process=True,
                                session_path=tmp_path / "taken.db")


class TestEndings:
    def test_sigterm_to_the_child_is_a_clean_stop(self, child):
        wait_for(lambda: child.snapshot().seq >= 3, what="traces")
        os.kill(child.pid, signal.SIGTERM)
        assert child.wait(30)
        assert child.exit_code == ExitCode.OK and "SIGTERM" in child.stop_reason
        with SessionReader(child.session_path) as reader:
            assert reader.stopped_cleanly and "SIGTERM" in reader.stop["reason"]

    def test_ctrl_c_reaches_only_the_parent(self, child):
        # A terminal sends SIGINT to the whole foreground process group; the child
        # leaves the decision to the parent and goes on.
        seq = wait_for(lambda: child.snapshot().seq >= 3 and child.snapshot().seq)
        os.kill(child.pid, signal.SIGINT)
        wait_for(lambda: child.snapshot().seq > seq + 10, what="traces after SIGINT")
        assert child.running

    def test_a_killed_child_is_reported_not_awaited(self, child):
        committed = wait_for(lambda: committed_traces(child.session_path) >= 5, what="commits")
        os.kill(child.pid, signal.SIGKILL)
        assert child.wait(10)
        snap = child.snapshot()
        assert snap.state == "stopped" and "unexpectedly" in snap.stop_reason
        assert child.exit_code == ExitCode.INTERNAL
        assert "unexpectedly" in child.message_for_operator
        with SessionReader(child.session_path) as reader:   # committed traces stay
            assert reader.integrity_check() == "ok" and not reader.stopped_cleanly
            assert reader.trace_count() >= committed

    def test_a_parent_that_dies_leaves_a_cleanly_closed_file(self, sim, tmp_path):
        bench_path = sim.write_bench_file(tmp_path / "bench.toml",
                                          session_folder=str(tmp_path / "s"))
        db = tmp_path / "orphan.db"
        script = textwrap.dedent(f"""
            import sys, time
            from pathlib import Path
            from tankside.monitor.live.benchfile import BenchConfig, load_bench
            from tankside.monitor.live.child import SessionProcess, SessionSpec
            if __name__ == "__main__":
                bench = load_bench({str(bench_path)!r}, {FAST!r})
                session = SessionProcess(SessionSpec(bench, Path({str(db)!r})))
                session.start()
                print(session.pid, flush=True)
                time.sleep(60)
        """)
        (tmp_path / "parent.py").write_text(script)
        # the child's log stays behind when its parent is killed: keep it in tmp_path
        parent = subprocess.Popen([sys.executable, str(tmp_path / "parent.py")],
                                  stdout=subprocess.PIPE, text=True,
                                  env=dict(os.environ, TMPDIR=str(tmp_path)))
        try:
            child_pid = int(parent.stdout.readline())
            wait_for(lambda: db.exists() and committed_traces(db) >= 5, what="committed traces")
        finally:
            parent.kill()
            parent.wait(10)
            parent.stdout.close()
        wait_for(lambda: not _alive(child_pid), timeout_s=30, what="the orphan's exit")
        assert not list(tmp_path.glob("tankside-session-*.log"))   # empty: removed
        with SessionReader(db) as reader:
            assert reader.stopped_cleanly
            assert reader.stop["reason"] == "display closed"
            assert reader.stop["counts"]["stored"] == len(reader.seqs()) > 0


def _alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    # a zombie whose parent has gone is reaped by init; until then it counts as ended
    try:
        with open(f"/proc/{pid}/stat") as f:
            return f.read().split(")")[-1].split()[0] != "Z"
    except OSError:
        return False


@dataclasses.dataclass(frozen=True)
class NoisyBench(BenchConfig):
    """A bench whose calibration loader prints, as a library warning would."""

    def calibration(self):
        print("noisy bench: loading the calibration")
        print("noisy bench: a warning", file=sys.stderr)
        return super().calibration()


def test_what_the_child_prints_is_reported_after_the_display(sim, tmp_path, capfd,
                                                              monkeypatch):
    import tempfile

    monkeypatch.setattr(tempfile, "tempdir", str(tmp_path))   # where the child's log goes
    plain = _bench(sim, tmp_path)
    bench = NoisyBench(**{f.name: getattr(plain, f.name) for f in dataclasses.fields(plain)})
    report = io.StringIO()
    session = SessionProcess(SessionSpec(bench, tmp_path / "n.db"), report=report)
    session.start()
    wait_for(lambda: session.snapshot().seq >= 2, what="traces")
    assert list(tmp_path.glob("tankside-session-*.log"))
    out, err = capfd.readouterr()            # nothing reached this process's terminal
    assert "noisy bench" not in out + err
    assert report.getvalue() == ""           # nor the report, while the session runs
    session.stop()
    assert session.wait(30)
    assert "loading the calibration" in report.getvalue()
    assert "a warning" in report.getvalue()
    assert session.wait(1) and report.getvalue().count("a warning") == 1   # once
    assert not list(tmp_path.glob("tankside-session-*.log"))              # then removed


def test_an_answer_too_late_for_an_earlier_command_is_not_taken_for_the_next(tmp_path):
    # The command protocol alone, with a thread playing the child: it answers an
    # earlier command (serial 6) before the one asked (serial 7), which is an error.
    import multiprocessing
    import threading
    import types

    parent_end, child_end = multiprocessing.Pipe()
    session = SessionProcess(SessionSpec(bench=None, session_path=tmp_path / "x.db"))
    session._process = types.SimpleNamespace(is_alive=lambda: True)
    session._commands, session._serial = parent_end, 6

    def child():
        serial, op, args = child_end.recv()
        child_end.send((serial - 1, "ok", None))
        child_end.send((serial, "error", ValueError(f"{op} {args[0]} refused")))

    thread = threading.Thread(target=child)
    thread.start()
    with pytest.raises(ValueError, match="set_method fastest refused"):
        session.set_method("fastest")
    thread.join(5)
    parent_end.close()
    child_end.close()


def test_a_snapshot_read_while_the_child_is_being_spawned_says_starting(tmp_path):
    # start() runs in a worker thread while the display reads ten times a second: between
    # making the Process and its start() returning, the pipes are not set and the process
    # cannot be joined yet (multiprocessing asserts). The read must say "starting".
    import multiprocessing

    session = SessionProcess(SessionSpec(bench=None, session_path=tmp_path / "x.db"))
    session._process = multiprocessing.get_context("spawn").Process(target=print)
    snap = session.snapshot()
    assert snap.state == "starting" and not session.running
