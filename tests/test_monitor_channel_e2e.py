"""The monitor channel end to end: a live session on the simulated bench over TCP records
the digitiser's channel 2 (the simulator's invented drive-voltage monitor) raw with each
trace; it reads back, exports to HDF5 and to CSV, and a session or file without it is as
before.

The expected monitor signal is written here from its definition (a sine of the drive's
frequency under a burst envelope with raised-cosine edges of one cycle, peak
monitor_ratio x amplitude_vpp / 2, starting at the trigger), not taken from the
simulator. The drive is set to 2.5 MHz and the record to start 1 us before the trigger at
250 MS/s, so that one sample falls on the burst's crest (t = 500 ns, a whole 1.25 cycles
in and inside the burst's flat top): the recorded peak then equals the crest within the
quantisation step (half a code from rounding).
"""

from __future__ import annotations

import queue
import shutil
import sqlite3
import threading

import h5py
import numpy as np
import pytest

from tankside.drivers.errors import ProtocolError
from tankside.drivers.trace import RawTrace
from tankside.monitor.cli import main
from tankside.monitor.errors import TraceChecksumError
from tankside.monitor.live.acquisition import AcqEvent, Acquired, AcquisitionLoop, OpenInstrument
from tankside.monitor.live.benchfile import load_bench
from tankside.monitor.live.session import LiveSession
from tankside.monitor.outcome import ExitCode
from tankside.monitor.record.export import export_hdf5
from tankside.monitor.record.schema import EventKind, FaultKind
from tankside.monitor.record.store import SessionReader
from tankside.monitor.record.tracefile import read_trace
from tankside.simulators.bench import SimulatedBench
from tankside.simulators.digitiser import MONITOR_RATIO
from tankside.simulators.scene import Drive

PERIOD_S = 0.002
FREQUENCY_HZ = 2.5e6
AMPLITUDE_VPP = 2.0
MONITOR_RANGE_V = 0.5
T0_S = -1.0e-6
FAST = {"digitiser.trigger_timeout_s": 0.5, "digitiser.timeout_s": 1.0}
STEP_V = MONITOR_RANGE_V / 65536          # int16 codes span the range in 65536 steps


@pytest.fixture
def sim():
    drive = Drive(output_on=False, amplitude_vpp=AMPLITUDE_VPP, frequency_hz=FREQUENCY_HZ,
                  burst_cycles=3, burst_period_s=PERIOD_S)
    with SimulatedBench(seed=11, drive=drive) as bench:
        # The record starts before the trigger so it holds the drive's burst (and, 34 us
        # later, the hydrophone's pulse); the session sets no trigger delay itself.
        bench.digitiser.state.trigger_delay_s = T0_S
        yield bench


def run_live(sim, tmp_path, overrides, n=6, name="s.db"):
    sim.write_bench_file(tmp_path / "bench.toml", session_folder="sessions")
    bench = load_bench(tmp_path / "bench.toml", {**FAST, **overrides})
    session = LiveSession.from_bench(bench, session_path=tmp_path / name, max_traces=n,
                                     drive_on_at_start="test operator")
    session.start()
    assert session.wait(60), "session did not finish in time"
    return session


MONITOR = {"digitiser.monitor_channel": 2, "digitiser.monitor_range_v": MONITOR_RANGE_V}


def expected_monitor_v(t_s: np.ndarray) -> np.ndarray:
    """The invented monitor by its definition: peak ratio x A/2, 3 cycles, 1-cycle
    raised-cosine edges, from t = 0 (the trigger)."""
    f = FREQUENCY_HZ
    duration, edge = 3 / f, 1 / f
    inside = (t_s >= 0) & (t_s <= duration)
    ramp = np.clip(np.minimum(t_s / edge, (duration - t_s) / edge), 0, 1)
    env = np.where(inside, 0.5 - 0.5 * np.cos(np.pi * ramp), 0.0)
    return MONITOR_RATIO * AMPLITUDE_VPP / 2 * env * np.sin(2 * np.pi * f * t_s)


@pytest.fixture
def recorded(sim, tmp_path):
    session = run_live(sim, tmp_path, MONITOR)
    assert session.exit_code == ExitCode.OK
    return tmp_path / "s.db"


class TestMonitorRecorded:
    def test_every_trace_carries_the_drive_monitor_as_sent(self, recorded):
        crest_v = MONITOR_RATIO * AMPLITUDE_VPP / 2
        with SessionReader(recorded) as r:
            traces = list(r.iter_traces())
            assert len(traces) == 6 and r.has_monitor_channel()
            for st in traces:
                mon = st.raw.monitor
                assert mon is not None and mon.channel == 2 and mon.range_v == MONITOR_RANGE_V
                assert mon.codes.dtype == np.dtype("=i2") and mon.n == st.raw.n
                assert mon.dt_s == st.raw.dt_s == 4e-9 and mon.t0_s == pytest.approx(T0_S)
                assert mon.volts_per_code == pytest.approx(STEP_V, rel=1e-12)
                v = mon.volts()
                # the peak is the crest, within the quantisation step
                assert abs(np.max(np.abs(v)) - crest_v) <= STEP_V
                # and the whole record is the invented signal to half a code
                np.testing.assert_allclose(v, expected_monitor_v(mon.times()),
                                           rtol=0, atol=STEP_V / 2 + 1e-12)
                # the hydrophone's trace is its own channel's: another signal, another scale
                assert st.raw.state["channel"] == 1 and st.raw.state["monitor_channel"] == 2
                assert st.raw.volts_per_code == pytest.approx(st.raw.range_v / 65536)
                assert not np.array_equal(st.raw.codes, mon.codes)
            # the monitor channel never feeds the alert rules: no fault, no alert of it
            assert not [e for e in r.events() if e["kind"] == EventKind.FAULT]

    def test_the_monitor_range_was_set_once_and_never_auto_ranged(self, sim, recorded):
        assert sim.digitiser.state.channels[2].range_v == MONITOR_RANGE_V
        with SessionReader(recorded) as r:
            changes = [e for e in r.events() if e["kind"] == EventKind.RANGE_CHANGE]
            assert all(st.raw.state["monitor_range_v"] == MONITOR_RANGE_V
                       for st in r.iter_traces())
        # a range change, if the hydrophone needed one, is of the hydrophone's channel
        assert all(e["detail"]["to_v"] == sim.digitiser.state.channels[1].range_v
                   for e in changes[-1:])

    def test_hdf5_has_the_monitor_volts_with_units(self, recorded, tmp_path):
        out = tmp_path / "s.h5"
        assert export_hdf5(SessionReader(recorded), out) == 6
        with SessionReader(recorded) as r, h5py.File(out, "r") as f:
            g = f["monitor"]
            assert g["volts"].attrs["units"] == "V" and g["dt_s"].attrs["units"] == "s"
            assert g["volts"].shape == (6, 10000)
            assert list(g["channel"][:]) == [2] * 6 and list(g["sample_count"][:]) == [10000] * 6
            np.testing.assert_array_equal(g["range_v"][:], MONITOR_RANGE_V)
            for i, st in enumerate(r.iter_traces()):
                assert f["traces/seq"][i] == st.raw.seq
                np.testing.assert_array_equal(g["volts"][i], st.raw.monitor.volts())
                assert g["t0_s"][i] == st.raw.monitor.t0_s

    def test_export_trace_channel_2_writes_the_monitor(self, recorded, tmp_path):
        out = tmp_path / "m.csv"
        assert main(["export", str(recorded), "--trace", "3", "--channel", "2",
                     "--out", str(out)]) == 0
        volts, dt_s, t0_s = read_trace(out)
        with SessionReader(recorded) as r:
            mon = r.trace(3).raw.monitor
        # (times are written to 12 significant digits)
        assert dt_s == pytest.approx(mon.dt_s, rel=1e-9)
        assert t0_s == pytest.approx(mon.t0_s, abs=1e-15)
        # the CSV keeps 9 significant digits
        np.testing.assert_allclose(volts, mon.volts(), rtol=1e-8, atol=1e-12)
        assert "monitor channel 2" in out.read_text()
        hydro, plain = tmp_path / "h1.csv", tmp_path / "h.csv"
        assert main(["export", str(recorded), "--trace", "3", "--channel", "1",
                     "--out", str(hydro)]) == 0
        assert main(["export", str(recorded), "--trace", "3", "--out", str(plain)]) == 0
        assert hydro.read_text() == plain.read_text()

    def test_export_of_a_channel_the_trace_lacks_is_refused(self, recorded, tmp_path,
                                                            capsys):
        out = tmp_path / "x.csv"
        code = main(["export", str(recorded), "--trace", "0", "--channel", "3",
                     "--out", str(out)])
        assert code != 0 and not out.exists()
        assert "no channel 3" in capsys.readouterr().err

    def test_a_damaged_monitor_block_is_reported(self, recorded, tmp_path):
        copy = tmp_path / "damaged.db"
        with SessionReader(recorded):
            pass
        shutil.copy(recorded, copy)
        with sqlite3.connect(copy) as conn:
            blob = bytearray(conn.execute(
                "SELECT codes FROM trace_channels WHERE seq = 2").fetchone()[0])
            blob[100] ^= 0x01
            conn.execute("UPDATE trace_channels SET codes = ? WHERE seq = 2", (bytes(blob),))
        with SessionReader(copy) as r:
            r.trace(1)
            with pytest.raises(TraceChecksumError, match="trace_channels"):
                r.trace(2)

    def test_a_file_without_the_table_reads_as_one_without_a_monitor(self, recorded,
                                                                     tmp_path):
        copy = tmp_path / "older.db"
        shutil.copy(recorded, copy)
        with sqlite3.connect(copy) as conn:
            conn.execute("DROP TABLE trace_channels")
        with SessionReader(copy) as r:
            assert not r.has_monitor_channel()
            traces = list(r.iter_traces())
            assert len(traces) == 6 and all(st.raw.monitor is None for st in traces)
        out = tmp_path / "older.h5"
        assert export_hdf5(SessionReader(copy), out) == 6
        with h5py.File(out, "r") as f:
            assert "monitor" not in f and f["traces/codes"].shape[0] == 6


def test_a_session_without_a_monitor_channel_is_unchanged(sim, tmp_path):
    session = run_live(sim, tmp_path, {}, n=4)
    assert session.exit_code == ExitCode.OK
    path = tmp_path / "s.db"
    with sqlite3.connect(path) as conn:
        assert conn.execute("SELECT COUNT(*) FROM trace_channels").fetchone()[0] == 0
    with SessionReader(path) as r:
        assert [st.raw.monitor for st in r.iter_traces()] == [None] * 4
        assert r.trace(0).raw.state["monitor_channel"] is None
    out = tmp_path / "s.h5"
    assert export_hdf5(SessionReader(path), out) == 4
    with h5py.File(out, "r") as f:
        assert "monitor" not in f


def test_a_monitor_channel_the_digitiser_lacks_stops_the_start(sim, tmp_path, capsys):
    """The simulated digitiser has two channels: setting channel 3's range is refused at
    configuration, before any trace, with the instrument's own error."""
    path = sim.write_bench_file(tmp_path / "bench.toml", session_folder="sessions")
    path.write_text(path.read_text().replace(
        "[digitiser]\n", "[digitiser]\nmonitor_channel = 3\nmonitor_range_v = 0.5\n"
        "trigger_timeout_s = 0.5\ntimeout_s = 1.0\n", 1))
    code = main(["watch", "--accept-caution", "--drive-on", "--bench", str(path),
                 "--headless", "--traces", "2", "--session", str(tmp_path / "n.db")])
    err = capsys.readouterr().err
    assert code != ExitCode.OK and "Traceback" not in err
    assert "CHAN3:RANG" in err, err


def test_a_bench_channel_out_of_range_is_a_config_error(sim, tmp_path, capsys):
    path = sim.write_bench_file(tmp_path / "bench.toml", session_folder="sessions")
    path.write_text(path.read_text().replace("[digitiser]\n", "[digitiser]\nchannel = 0\n", 1))
    assert main(["watch", "--bench", str(path), "--headless"]) == ExitCode.USAGE
    assert "channel must be an integer 1 .. 16" in capsys.readouterr().err


class _FakeLink:
    def __init__(self):
        self.resyncs = 0
        self.queue = [(-224, "no channel 2")]

    def resync(self):
        self.resyncs += 1

    def drain_errors(self):
        out, self.queue = self.queue, []
        return out

    def close(self, quiet=False):
        pass


class _FakeDigitiser:
    """Returns one good hydrophone trace whose monitor fetch failed."""

    def __init__(self):
        self.settings = None

    def acquire(self, seq, *, trigger_timeout_s):
        return RawTrace(codes=np.zeros(8, np.int16), volts_per_code=1e-5, offset_v=0.0,
                        dt_s=4e-9, t0_s=0.0, seq=seq, time_s=1.0, range_v=0.5,
                        code_min=-32768, code_max=32767, clipped_low=0, clipped_high=0,
                        data_format="int16",
                        monitor_error=ProtocolError("monitor channel 2: odd block"))

    def take_warnings(self):
        return []


def test_a_failed_monitor_fetch_is_a_fault_event_and_the_trace_is_kept():
    link = _FakeLink()
    out: queue.Queue = queue.Queue(16)
    loop = AcquisitionLoop(open_digitiser=lambda: OpenInstrument(_FakeDigitiser(), link),
                           out=out, stop=threading.Event(), trigger_timeout_s=0.1,
                           max_traces=1, gate=False)
    loop.connect()
    loop.run()
    items = []
    while not out.empty():
        items.append(out.get_nowait())
    fault, trace, resync, queued = items
    assert isinstance(fault, AcqEvent) and fault.kind == EventKind.FAULT
    assert fault.detail["kind"] == FaultKind.MONITOR_CHANNEL
    assert fault.detail["cause"] == FaultKind.MALFORMED_REPLY and fault.detail["at_seq"] == 0
    assert fault.alert is not None and "monitor channel" in fault.alert.message
    assert isinstance(trace, Acquired) and trace.raw.seq == 0 and trace.raw.monitor is None
    assert isinstance(resync, AcqEvent) and resync.kind == EventKind.RESYNC
    # the error the instrument queued for the monitor fetch goes with the monitor's fault
    assert isinstance(queued, AcqEvent) and queued.detail["kind"] == FaultKind.MONITOR_CHANNEL
    assert queued.detail["cause"] == FaultKind.INSTRUMENT_ERROR and queued.alert is None
    assert "-224" in queued.detail["message"] and link.queue == []
    assert link.resyncs == 1 and loop.seq == 1


def test_a_monitor_channel_the_digitiser_lacks_costs_no_hydrophone_trace(tmp_path):
    """Without monitor_range_v nothing refuses channel 3 at start: each trace's monitor
    fetch gets no reply (the simulator queues -224 instead), is a fault, and the
    hydrophone's traces are all kept, one per acquisition."""
    with SimulatedBench(seed=2, trigger_period_s=PERIOD_S) as sim:
        session = run_live(sim, tmp_path, {"digitiser.monitor_channel": 3,
                                           "digitiser.record_length": 2000,
                                           "digitiser.timeout_s": 0.3}, n=3)
        assert session.exit_code == ExitCode.OK
        acquisitions = sim.digitiser.acquisitions
    with SessionReader(tmp_path / "s.db") as r:
        assert r.seqs() == [0, 1, 2] and not r.has_monitor_channel()
        faults = [e["detail"] for e in r.events() if e["kind"] == EventKind.FAULT]
    assert acquisitions == 3
    assert [(f["kind"], f["cause"], f["at_seq"]) for f in faults] == [
        (FaultKind.MONITOR_CHANNEL, cause, seq) for seq in range(3)
        for cause in (FaultKind.STALLED, FaultKind.INSTRUMENT_ERROR)]
    assert all("no channel 3" in f["message"] for f in faults[1::2])
