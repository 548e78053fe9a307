"""End to end: `tankside watch` and LiveSession on the simulated bench over TCP.

The simulated digitiser and generator serve SCPI on 127.0.0.1; the real drivers
(pyvisa with the pyvisa-py backend) talk to them. Traces are kept short (2000
samples) and the trigger fast (2 ms period) so the whole file runs in seconds.
"""

from __future__ import annotations

import os
import signal
import socket
import subprocess
import sys
import textwrap
import time

import numpy as np
import pytest

from tankside.monitor.cli import main
from tankside.monitor.live.benchfile import load_bench
from tankside.monitor.live.session import LiveSession
from tankside.monitor.outcome import ExitCode
from tankside.monitor.record.schema import RESULT_NAMES
from tankside.monitor.record.store import SessionReader
from tankside.monitor.record.tracefile import read_trace
from tankside.simulators.bench import SimulatedBench

FAST = {"digitiser.record_length": 2000, "digitiser.trigger_timeout_s": 0.5,
        "digitiser.timeout_s": 1.0}
TRIGGER_PERIOD_S = 0.002


@pytest.fixture
def sim():
    with SimulatedBench(seed=3, trigger_period_s=TRIGGER_PERIOD_S) as bench:
        yield bench


def bench_file(sim, tmp_path, extra: str = ""):
    path = sim.write_bench_file(tmp_path / "bench.toml", session_folder="sessions")
    text = path.read_text()
    text = text.replace("record_length = 10000", "record_length = 2000")
    text = text.replace("[digitiser]\n", "[digitiser]\ntrigger_timeout_s = 0.5\ntimeout_s = 1.0\n")
    text = text.replace(f"burst_period_s = {sim.scene.drive.burst_period_s!r}",
                        f"burst_period_s = {TRIGGER_PERIOD_S!r}")
    path.write_text(text + textwrap.dedent(extra))
    return path


def live(sim, tmp_path, overrides=None, **kw):
    sim.write_bench_file(tmp_path / "bench.toml", session_folder="sessions")
    bench = load_bench(tmp_path / "bench.toml", {**FAST, **(overrides or {})})
    # the simulated generator powers on with its output off; the test is the operator
    kw.setdefault("drive_on_at_start", "test operator")
    return LiveSession.from_bench(bench, session_path=tmp_path / "s.db", **kw)


def run_session(session, timeout_s=60):
    session.start()
    assert session.wait(timeout_s), "session did not finish in time"
    return session


def close_to(a, b, rel):
    if isinstance(a, str) or isinstance(a, bool) or a is None:
        return a == b
    return bool(np.isclose(a, b, rtol=rel, atol=0.0) or (np.isnan(a) and np.isnan(b)))


class TestSessionMatchesConvert:
    def test_few_hundred_traces_stored_and_reproducible(self, sim, tmp_path):
        s = run_session(live(sim, tmp_path, max_traces=300))
        assert s.exit_code == ExitCode.OK
        snap = s.snapshot()
        assert (snap.acquired, snap.converted, snap.stored) == (300, 300, 300)
        bench = load_bench(tmp_path / "bench.toml", FAST)
        converter = bench.converter()
        with SessionReader(tmp_path / "s.db") as r:
            assert r.seqs() == list(range(300))
            assert r.stop["exit_status"] == "completed"
            meta = r.metadata
            assert meta["calibration_sha256"] == converter.calibration.sha256
            assert "TANKSIDE" in meta["instruments"]["digitiser"]["identity"]
            # The same numerics on the stored raw trace give the stored result, exactly.
            for st in r.iter_traces():
                again = converter.process(st.raw.volts(), st.raw.dt_s).flat()
                for key in RESULT_NAMES:
                    assert close_to(st.result[key], again[key], 0.0), (st.raw.seq, key)
        # And `export --trace` + the signal chain (what `convert` does on that CSV) agree
        # within the CSV's 9 significant digits.
        for seq in (0, 149, 299):
            out = tmp_path / f"t{seq}.csv"
            assert main(["export", str(tmp_path / "s.db"), "--trace", str(seq),
                         "--out", str(out)]) == 0
            volts, dt_s, _t0 = read_trace(out)
            exported = converter.process(volts, dt_s).flat()
            with SessionReader(tmp_path / "s.db") as r:
                stored = r.trace(seq).result
            for key in ("peak_compressional_pa", "peak_rarefactional_pa",
                        "acoustic_working_frequency_hz", "pulse_intensity_integral_j_per_m2",
                        "mechanical_index"):
                assert close_to(stored[key], exported[key], 1e-6), (seq, key)
            assert stored["method"] == exported["method"]


class TestClosedLoop:
    def test_safe_off_before_next_trace(self, sim, tmp_path):
        # The default scene gives about 0.18 MPa: a 0.1 MPa limit trips on the first trace.
        s = run_session(live(sim, tmp_path, {"alerts.over_pressure.limit_pa": 1.0e5},
                             max_traces=5))
        assert sim.scene.drive.output_on is False
        with SessionReader(tmp_path / "s.db") as r:
            first = r.trace(0)
            second = r.trace(1)
            assert first.result["peak_compressional_pa"] > 1.0e5
            # Output off: noise only, well below the pulse (or too little to convert).
            assert np.abs(second.raw.volts()).max() < 0.2 * np.abs(first.raw.volts()).max()
            events = [e for e in r.events() if e["kind"] == "safe-off"]
            assert events[0]["detail"]["done"] and events[0]["detail"]["before_seq"] == 1
            assert r.alerts()[0]["rule"] == "over_pressure"
        assert s.exit_code == ExitCode.OK

    def test_auto_range_up_on_clipping_then_down_on_under_use(self, sim, tmp_path):
        # About 37 mV peak at the hydrophone: 0.02 V and 0.05 V spans clip, 0.1 V fits.
        s = run_session(live(sim, tmp_path, {"digitiser.range_v": 0.02}, max_traces=12))
        with SessionReader(tmp_path / "s.db") as r:
            changes = [(e["detail"]["from_v"], e["detail"]["to_v"]) for e in r.events()
                       if e["kind"] == "range-change"]
            assert changes == [(0.02, 0.05), (0.05, 0.1)]
            traces = list(r.iter_traces())
            assert traces[0].raw.clipped > 0 and traces[-1].raw.clipped == 0
            flagged = [t.raw.seq for t in traces if t.flags.get("range_changed")]
            assert flagged == [1, 2]
            assert traces[-1].raw.range_v == 0.1
        assert s.exit_code == ExitCode.OK
        (tmp_path / "s.db").rename(tmp_path / "up.db")
        # From 1 V down: at 0.2 V the pulse uses 0.37 of half the span, under 0.4, and
        # fits 0.1 V with margin (0.74 < the 0.8 fit limit), so three steps.
        s = run_session(live(sim, tmp_path, {"digitiser.range_v": 1.0,
                                             "alerts.range_under_use.consecutive_traces": 3,
                                             "alerts.range_under_use.below_fraction": 0.4},
                             max_traces=25))
        with SessionReader(tmp_path / "s.db") as r:
            changes = [(e["detail"]["from_v"], e["detail"]["to_v"]) for e in r.events()
                       if e["kind"] == "range-change"]
            assert changes == [(1.0, 0.5), (0.5, 0.2), (0.2, 0.1)]
            assert r.trace(24).raw.range_v == 0.1 and r.trace(24).raw.clipped == 0


class TestFaults:
    @pytest.mark.parametrize("inject, kinds", [
        (lambda f: f.drop_connection(), {"connection-lost", "reconnect"}),
        (lambda f: f.stall_next_reply(2.5), {"fault"}),
        (lambda f: f.malformed_next_block(), {"fault"}),
    ], ids=["dropped-connection", "stall", "malformed-block"])
    def test_fault_recovered_recorded_alerted(self, sim, tmp_path, inject, kinds):
        s = live(sim, tmp_path, max_traces=None)
        s.start()
        deadline = time.monotonic() + 20
        while s.snapshot().stored < 20 and time.monotonic() < deadline:
            time.sleep(0.02)
        before = s.snapshot().acquired
        inject(sim.faults)
        while s.snapshot().acquired < before + 30 and time.monotonic() < deadline:
            time.sleep(0.02)
        s.stop("test done")
        assert s.wait(20)
        assert s.exit_code == ExitCode.OK
        with SessionReader(tmp_path / "s.db") as r:
            seqs = r.seqs()
            assert seqs == list(range(len(seqs))) and len(seqs) >= before + 30
            event_kinds = {e["kind"] for e in r.events()}
            assert kinds <= event_kinds, event_kinds
            assert "instrument-fault" in {a["rule"] for a in r.alerts()}
            assert r.stopped_cleanly
            assert r.integrity_check() == "ok"


def _free_port():
    with socket.socket() as sock:
        sock.bind(("127.0.0.1", 0))
        return sock.getsockname()[1]


# The operator's part on a first, scripted run: the caution read, the drive switched on.
OPERATOR = ("--accept-caution", "--drive-on")


class TestCommand:
    def _watch(self, *args, **kw):
        env = dict(os.environ, PYTHONUNBUFFERED="1")
        return subprocess.Popen([sys.executable, "-m", "tankside.monitor.cli", "watch",
                                 *OPERATOR, *args],
                                stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                                env=env, **kw)

    def test_headless_traces_then_exit(self, sim, tmp_path, capsys):
        path = bench_file(sim, tmp_path)
        code = main(["watch", *OPERATOR, "--bench", str(path), "--headless", "--traces", "40",
                     "--session", str(tmp_path / "w.db"), "--status-every", "0.2"])
        out = capsys.readouterr().out
        assert code == ExitCode.OK
        assert "stored 40" in out and "session stopped: completed" in out
        with SessionReader(tmp_path / "w.db") as r:
            assert len(r.seqs()) == 40

    def test_settings_the_profile_cannot_apply_are_named_once_and_recorded_as_not_set(
            self, sim, tmp_path, capsys):
        text = "\n".join(ln for ln in sim.digitiser_profile_path.read_text().splitlines()
                         if not ln.startswith(("set_coupling", "set_averages")))
        profile = tmp_path / "no-coupling.toml"
        profile.write_text(text + "\n")
        path = bench_file(sim, tmp_path)
        path.write_text(path.read_text().replace(
            "[digitiser]\n", '[digitiser]\ncoupling = "AC"\naverages = 4\n', 1))
        code = main(["watch", *OPERATOR, "--bench", str(path), "--headless", "--traces", "3",
                     "--digitiser-profile", str(profile), "--session", str(tmp_path / "n.db")])
        err = capsys.readouterr().err
        assert code == ExitCode.OK
        assert err.count("coupling, averages: the profile has no command") == 1, err
        assert sim.digitiser.state.channels[1].coupling == "DC"     # never sent
        assert sim.digitiser.state.averages == 1
        with SessionReader(tmp_path / "n.db") as r:
            state = r.trace(0).raw.state
        assert state["coupling"] is None and state["averages"] is None
        assert state["trigger_source"] == sim.digitiser.state.trigger_source   # sent
        assert state["sample_rate_hz"] == pytest.approx(sim.digitiser.sample_rate_hz)
        assert state["range_v"] == pytest.approx(sim.digitiser.state.channels[1].range_v)

    def test_bench_rate_the_digitiser_does_not_run_at_stops_the_start(self, sim, tmp_path,
                                                                     capsys):
        path = bench_file(sim, tmp_path)
        text = path.read_text()
        assert "sample_rate_hz = 250000000.0" in text
        path.write_text(text.replace("sample_rate_hz = 250000000.0",
                                     "sample_rate_hz = 123000000.0"))
        code = main(["watch", *OPERATOR, "--bench", str(path), "--headless", "--traces", "3",
                     "--session", str(tmp_path / "r.db")])
        err = capsys.readouterr().err
        assert code == ExitCode.USAGE and "Traceback" not in err
        # the model's 1 GS/s clock divided by 8, the nearest to 123 MS/s
        assert "1.23e+08 Hz" in err and "8e-09 s (1.25e+08 Hz)" in err

    def test_kill_9_leaves_committed_traces_readable(self, sim, tmp_path):
        path = bench_file(sim, tmp_path)
        db = tmp_path / "k.db"
        proc = self._watch("--bench", str(path), "--headless", "--session", str(db))
        try:
            deadline = time.monotonic() + 30
            committed = 0
            while time.monotonic() < deadline and committed < 50:
                time.sleep(0.2)
                if db.exists():
                    try:
                        with SessionReader(db) as r:
                            committed = r.trace_count()
                    except Exception:  # noqa: BLE001 - the file may be mid-creation
                        committed = 0
            assert committed >= 50, proc.stderr.read() if proc.poll() is not None else ""
        finally:
            proc.send_signal(signal.SIGKILL)
            proc.wait(10)
            proc.stdout.close()
            proc.stderr.close()
        with SessionReader(db) as r:
            assert r.integrity_check() == "ok"
            assert not r.stopped_cleanly
            seqs = r.seqs()
            assert len(seqs) >= committed and seqs == list(range(len(seqs)))
            assert sum(1 for _ in r.iter_traces()) == len(seqs)
        out = tmp_path / "last.csv"
        assert main(["export", str(db), "--trace", str(seqs[-1]), "--out", str(out)]) == 0
        assert len(read_trace(out)[0]) == 2000

    @pytest.mark.parametrize("signum, reason", [(signal.SIGTERM, "SIGTERM"),
                                                (signal.SIGINT, "Ctrl-C")])
    def test_signal_stops_cleanly(self, sim, tmp_path, signum, reason):
        path = bench_file(sim, tmp_path)
        db = tmp_path / "t.db"
        proc = self._watch("--bench", str(path), "--headless", "--session", str(db))
        deadline = time.monotonic() + 30
        while time.monotonic() < deadline and not db.exists():
            time.sleep(0.1)
        time.sleep(1.0)
        proc.send_signal(signum)
        out, err = proc.communicate(timeout=20)
        assert proc.returncode == ExitCode.OK, err
        assert "Traceback" not in err
        with SessionReader(db) as r:
            assert r.stop["exit_status"] == "operator"
            assert reason in r.stop["reason"]
            assert r.stop["counts"]["stored"] == len(r.seqs()) > 0

    def test_file_size_limit_is_a_clean_store_stop(self, sim, tmp_path):
        import resource
        path = bench_file(sim, tmp_path)
        db = tmp_path / "full.db"

        def limit():  # files may grow to 1.5 MB: a disk that fills up after a few commits
            resource.setrlimit(resource.RLIMIT_FSIZE, (1_500_000, 1_500_000))

        proc = self._watch("--bench", str(path), "--headless", "--session", str(db),
                           preexec_fn=limit)
        out, err = proc.communicate(timeout=60)
        assert proc.returncode == ExitCode.STORE, err
        assert "Traceback" not in err
        assert "store" in err
        with SessionReader(db) as r:
            assert r.integrity_check() == "ok"
            seqs = r.seqs()
            assert len(seqs) > 10 and seqs == list(range(len(seqs)))

    def test_bad_bench_file_and_unreachable_resource(self, tmp_path, capsys, sim):
        bad = tmp_path / "bad.toml"
        bad.write_text("[digitiser]\nprofile = 'x'\n")
        assert main(["watch", "--bench", str(bad), "--headless"]) == ExitCode.USAGE
        err = capsys.readouterr().err
        assert "bad.toml" in err and "[digitiser] resource: missing" in err
        assert "Traceback" not in err
        path = bench_file(sim, tmp_path)
        port = _free_port()
        code = main(["watch", *OPERATOR, "--bench", str(path), "--headless", "--traces", "3",
                     "--digitiser", f"TCPIP0::127.0.0.1::{port}::SOCKET",
                     "--session", str(tmp_path / "never.db")])
        err = capsys.readouterr().err
        assert code == ExitCode.USAGE
        assert str(port) in err and err.count("\n") == 1
        assert not (tmp_path / "never.db").exists()
        code = main(["watch", *OPERATOR, "--bench", str(path), "--headless",
                     "--digitiser-profile", "no-such-profile"])
        err = capsys.readouterr().err
        assert code == ExitCode.USAGE and "no-such-profile" in err
