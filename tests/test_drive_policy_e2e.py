"""The drive is the operator's: checked on the simulated bench over TCP.

Every check reads the simulated generator's output state back over a TCP connection of
its own (``OUTP?``), not a flag inside tankside. The simulated generator powers on with
its output off, like most real ones.
"""

from __future__ import annotations

import resource
import subprocess
import sys
import time

import pytest
from polling import wait_for
from scpi_client import scpi

from tankside.monitor.cli import main
from tankside.monitor.live.benchfile import load_bench
from tankside.monitor.live.session import LiveSession
from tankside.monitor.outcome import ExitCode
from tankside.monitor.record.store import SessionReader
from tankside.simulators.bench import SimulatedBench

FAST = {"digitiser.record_length": 2000, "digitiser.trigger_timeout_s": 0.5,
        "digitiser.timeout_s": 1.0, "generator.timeout_s": 1.0}
TRIGGER_PERIOD_S = 0.002



def output_on(sim) -> bool:
    return scpi(sim.generator_port, "OUTP?") == "1"


@pytest.fixture
def sim():
    with SimulatedBench(seed=8, trigger_period_s=TRIGGER_PERIOD_S) as bench:
        yield bench


def bench_path(sim, tmp_path, extra: str = ""):
    path = sim.write_bench_file(tmp_path / "bench.toml", session_folder="sessions")
    text = path.read_text().replace("record_length = 10000", "record_length = 2000")
    text = text.replace("[digitiser]\n", "[digitiser]\ntrigger_timeout_s = 0.5\n")
    text = text.replace(f"burst_period_s = {sim.scene.drive.burst_period_s!r}",
                        f"burst_period_s = {TRIGGER_PERIOD_S!r}")
    path.write_text(text + extra)
    return path


def drive_events(db) -> list[tuple[str, str]]:
    with SessionReader(db) as r:
        return [(e["kind"], e["detail"]["cause"]) for e in r.events()
                if e["kind"] in ("drive-on", "drive-off")]


class TestNeverOnByItself:
    def test_watch_applies_settings_with_the_output_off_and_leaves_it_off(self, sim, tmp_path):
        # finding 1: the bench file's settings once switched the drive on at start
        path = bench_path(sim, tmp_path)
        code = main(["watch", "--accept-caution", "--bench", str(path), "--headless",
                     "--traces", "5", "--session", str(tmp_path / "w.db")])
        assert code == ExitCode.OK
        assert not output_on(sim)
        assert scpi(sim.generator_port, "BURS:PER?") == f"{TRIGGER_PERIOD_S:g}"  # applied
        assert ("drive-on", "--drive-on") not in drive_events(tmp_path / "w.db")
        assert not [k for k, _ in drive_events(tmp_path / "w.db") if k == "drive-on"]

    def test_a_bench_file_asking_for_output_on_is_refused_before_anything_is_sent(
            self, sim, tmp_path, capsys):
        path = bench_path(sim, tmp_path, "")
        text = path.read_text().replace("leave_on_at_end = false", "output = true")
        path.write_text(text)
        code = main(["watch", "--accept-caution", "--bench", str(path), "--headless",
                     "--traces", "3", "--session", str(tmp_path / "x.db")])
        assert code == ExitCode.USAGE
        assert "never switches the drive on" in capsys.readouterr().err
        assert not output_on(sim) and not (tmp_path / "x.db").exists()

    def test_the_caution_comes_before_any_instrument_is_touched(self, sim, tmp_path):
        # a first headless run without a terminal and without --accept-caution
        path = bench_path(sim, tmp_path).read_text().replace(
            "amplitude_vpp = ", "amplitude_vpp = 0.5 # was ")
        (tmp_path / "b2.toml").write_text(path)
        before = scpi(sim.generator_port, "VOLT?")
        proc = subprocess.run([sys.executable, "-m", "tankside.monitor.cli", "watch",
                               "--bench", str(tmp_path / "b2.toml"), "--headless",
                               "--traces", "3", "--drive-on"],
                              stdin=subprocess.DEVNULL, capture_output=True, text=True,
                              timeout=60, cwd=tmp_path)
        assert proc.returncode == ExitCode.USAGE, proc.stderr
        assert "CAUTION" in proc.stdout and "--accept-caution" in proc.stderr
        assert "Traceback" not in proc.stderr
        assert scpi(sim.generator_port, "VOLT?") == before       # nothing was set
        assert not output_on(sim)
        assert not list((tmp_path / "sessions").glob("*.db"))

    def test_drive_on_is_an_explicit_recorded_action_and_off_at_the_end(self, sim, tmp_path):
        path = bench_path(sim, tmp_path)
        code = main(["watch", "--accept-caution", "--drive-on", "--bench", str(path),
                     "--headless", "--traces", "30", "--session", str(tmp_path / "d.db")])
        assert code == ExitCode.OK
        assert not output_on(sim)                 # [generator] leave_on_at_end = false
        assert drive_events(tmp_path / "d.db") == [
            ("drive-off", "start"), ("drive-on", "--drive-on"), ("drive-off", "end of session")]
        with SessionReader(tmp_path / "d.db") as r:
            # the drive went on before the first trace: every trace holds the pulse
            assert not any(r.trace(s).flags.get("drive_off") for s in r.seqs())

    def test_leave_on_at_end_is_honoured_when_asked(self, sim, tmp_path):
        path = bench_path(sim, tmp_path)
        path.write_text(path.read_text().replace("leave_on_at_end = false",
                                                 "leave_on_at_end = true"))
        code = main(["watch", "--accept-caution", "--drive-on", "--bench", str(path),
                     "--headless", "--traces", "5", "--session", str(tmp_path / "l.db")])
        assert code == ExitCode.OK and output_on(sim)
        scpi(sim.generator_port, "OUTP OFF", "OUTP?")

    @pytest.mark.parametrize("signum", ["SIGTERM", "SIGINT"])
    def test_off_at_the_end_after_a_signal(self, sim, tmp_path, signum):
        import signal
        path = bench_path(sim, tmp_path)
        db = tmp_path / "s.db"
        proc = subprocess.Popen([sys.executable, "-m", "tankside.monitor.cli", "watch",
                                 "--accept-caution", "--drive-on", "--bench", str(path),
                                 "--headless", "--session", str(db)],
                                stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
        wait_for(lambda: output_on(sim), 30, "the operator's drive-on")
        time.sleep(0.5)
        proc.send_signal(getattr(signal, signum))
        _, err = proc.communicate(timeout=30)
        assert proc.returncode == ExitCode.OK, err
        assert not output_on(sim)
        assert drive_events(db)[-1] == ("drive-off", "end of session")


class TestFailedStart:
    def test_a_store_that_cannot_start_leaves_no_file_and_no_setting_changed(
            self, sim, tmp_path):
        # finding 2: disk full writing the start record
        path = bench_path(sim, tmp_path)
        before = (scpi(sim.generator_port, "VOLT?"), scpi(sim.generator_port, "BURS:PER?"))
        db = tmp_path / "full.db"

        def tiny_files():
            resource.setrlimit(resource.RLIMIT_FSIZE, (2048, 2048))

        proc = subprocess.run([sys.executable, "-m", "tankside.monitor.cli", "watch",
                               "--accept-caution", "--drive-on", "--bench", str(path),
                               "--headless", "--session", str(db)],
                              capture_output=True, text=True, timeout=60,
                              preexec_fn=tiny_files)
        assert proc.returncode == ExitCode.STORE, proc.stderr
        assert "Traceback" not in proc.stderr
        assert not db.exists() and not list(tmp_path.glob("full.db-*"))
        assert (scpi(sim.generator_port, "VOLT?"),
                scpi(sim.generator_port, "BURS:PER?")) == before
        assert not output_on(sim)


class TestSafeOffHolds:
    def _session(self, sim, tmp_path, **overrides):
        sim.write_bench_file(tmp_path / "bench.toml", session_folder="sessions")
        bench = load_bench(tmp_path / "bench.toml", {**FAST, **overrides})
        return LiveSession.from_bench(bench, session_path=tmp_path / "s.db",
                                      drive_on_at_start="test operator", duration_s=30)

    def test_a_generator_that_refuses_output_off_stops_the_session_saying_so(
            self, sim, tmp_path):
        # finding 3: one alert, then 19 s more of driving above the limit, exit 0
        session = self._session(sim, tmp_path, **{
            "alerts.over_pressure.limit_pa": 1.0e5, "generator.safe_off_give_up_s": 1.5})
        session.start()
        wait_for(lambda: output_on(sim), 10, "drive on")
        sim.faults.report_error("OUTP", -200, detail="output relay stuck", count=10_000,
                                device="generator")
        try:
            assert session.wait(30), "the session should stop by itself"
        finally:
            sim.faults.clear()
        assert output_on(sim)                                   # really still on
        assert session.exit_code == ExitCode.DRIVE_MAY_BE_ON
        assert "DRIVE MAY STILL BE ON" in session.message_for_operator
        with SessionReader(tmp_path / "s.db") as r:
            assert r.stop["exit_status"] == "drive-may-be-on"
            failed = [a for a in r.alerts() if a["rule"] == "safe-off-failed"]
            attempts = [e for e in r.events()
                        if e["kind"] == "safe-off" and e["detail"]["done"] is False]
            # every failed attempt re-alerts; bounded backoff within the 1.5 s allowed
            assert len(failed) == len(attempts) >= 3
            assert attempts[-1]["detail"]["after_s"] <= 1.5
        scpi(sim.generator_port, "OUTP OFF", "OUTP?")

    def test_a_late_generator_never_holds_up_the_digitiser(self, sim, tmp_path):
        # finding 4: a late generator reply once blocked the digitiser for 12 s
        session = self._session(sim, tmp_path, **{"generator.timeout_s": 0.5})
        session.start()
        try:
            wait_for(lambda: session.snapshot().acquired > 20, 10, "traces")
            sim.faults.stall_next_reply(3.0, device="generator")
            t0 = time.monotonic()
            start = session.snapshot().acquired
            wait_for(lambda: time.monotonic() - t0 > 2.5, 5, "the stall")
            during = session.snapshot().acquired - start
        finally:
            session.stop("test done")
            assert session.wait(30)
        # at 500 triggers/s, 2.5 s of acquisition is far more than 100 traces
        assert during > 100
        assert session.exit_code == ExitCode.OK
        with SessionReader(tmp_path / "s.db") as r:
            assert not [a for a in r.alerts() if a["rule"] == "no_trigger"]
            kinds = [e["detail"].get("kind") for e in r.events() if e["kind"] == "fault"]
            assert "generator-query" in kinds
        assert not output_on(sim)

    def test_a_late_generator_during_safe_off_does_not_crash_the_session(
            self, sim, tmp_path):
        # finding 4: a late reply during a safe-off once crashed the session (exit 3)
        session = self._session(sim, tmp_path, **{
            "alerts.over_pressure.limit_pa": 3.0e5, "generator.timeout_s": 0.3})
        session.start()
        try:
            wait_for(lambda: output_on(sim), 10, "drive on")
            wait_for(lambda: session.snapshot().acquired > 20, 10, "traces")
            volts = float(scpi(sim.generator_port, "VOLT?"))
            sim.faults.stall_next_reply(1.0, device="generator")   # the next poll is late
            time.sleep(1.1)        # the poll has been sent and is waiting for its reply
            scpi(sim.generator_port, f"VOLT {3 * volts:g}", "VOLT?")  # over the limit now
            wait_for(lambda: not output_on(sim), 15, "safe-off")
        finally:
            session.stop("test done")
            assert session.wait(30)
        assert session.exit_status in ("operator", "completed")
        with SessionReader(tmp_path / "s.db") as r:
            assert [a["rule"] for a in r.alerts()].count("over_pressure") >= 1
            done = [e for e in r.events() if e["kind"] == "safe-off" and e["detail"]["done"]]
            assert done
