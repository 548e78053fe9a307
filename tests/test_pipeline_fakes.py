"""LiveSession with fake instruments and a fake converter: fast and deterministic.

The fakes record every instrument operation in one ordered log, so the tests can
check the order of acquisitions and actions (safe-off before the next trace, range
changes between traces). The store and the rules are the real ones.
"""

from __future__ import annotations

import threading
import time

import numpy as np
import pytest

from tankside.drivers.digitiser import DigitiserSettings
from tankside.drivers.errors import ConnectionLost, InstrumentTimeout, NoTrigger
from tankside.drivers.trace import RawTrace, count_at_rails
from tankside.monitor.errors import DiskFullError, OutOfBandError
from tankside.monitor.live.acquisition import OpenInstrument
from tankside.monitor.live.rules import AlertConfig, RuleEngine
from tankside.monitor.live.session import LiveSession
from tankside.monitor.outcome import ExitCode
from tankside.monitor.record.schema import RESULT_NAMES, EventKind, FaultKind
from tankside.monitor.record.store import SessionReader, SessionStore

SENSITIVITY_V_PER_PA = 1e-7      # fake hydrophone: 0.1 V per MPa
RANGES_V = (0.1, 0.2, 0.5, 1.0, 2.0)
N = 256
DT_S = 1e-8


class Scene:
    """Shared state of the fake bench; ``amplitude(seq)`` gives the pulse amplitude, V."""

    def __init__(self, amplitude=lambda seq: 0.05):
        self.amplitude = amplitude
        self.output_on = True
        self.log: list[tuple] = []
        self.faults: dict[int, list[Exception]] = {}
        self.lock = threading.Lock()
        self.acquire_delay_s = 0.0

    def note(self, *entry) -> None:
        with self.lock:
            self.log.append(entry)


class FakeSession:
    def __init__(self, scene, resync_ok=True):
        self.scene = scene
        self.resync_ok = resync_ok
        self.closed = False

    def resync(self):
        self.scene.note("resync")
        if not self.resync_ok:
            raise InstrumentTimeout("no marker reply")

    def close(self, *, quiet=False):
        self.closed = True


class FakeDigitiser:
    ranges_v = RANGES_V

    def __init__(self, scene, settings):
        self.scene = scene
        self.settings = settings
        self.warnings = list(getattr(scene, "configuration_warnings", ()))

    def take_warnings(self):
        out, self.warnings = self.warnings, []
        return out

    def configure(self, settings):
        self.settings = settings
        self.scene.note("configure", settings.range_v)

    def set_range(self, range_v):
        self.settings = self.settings.replace(range_v=range_v)
        self.scene.note("range", range_v)

    def acquire(self, seq, *, trigger_timeout_s):
        faults = self.scene.faults.get(seq)
        if faults:
            fault = faults.pop(0)
            if isinstance(fault, NoTrigger):
                time.sleep(trigger_timeout_s)
            raise fault
        if self.scene.acquire_delay_s:
            time.sleep(self.scene.acquire_delay_s)
        self.scene.note("acquire", seq, self.scene.output_on)
        amp = self.scene.amplitude(seq) if self.scene.output_on else 0.001
        t = np.arange(N) * DT_S
        volts = amp * np.sin(2 * np.pi * 2e6 * t) * np.hanning(N)
        vpc = self.settings.range_v / 65536
        codes = np.clip(np.round(volts / vpc), -32768, 32767).astype(np.int16)
        low, high = count_at_rails(codes, -32768, 32767)
        return RawTrace(codes=codes, volts_per_code=vpc, offset_v=0.0, dt_s=DT_S, t0_s=0.0,
                        seq=seq, time_s=time.time(), range_v=self.settings.range_v,
                        code_min=-32768, code_max=32767, clipped_low=low, clipped_high=high,
                        data_format="int16", state={"range_v": self.settings.range_v})


class FakeGenerator:
    def __init__(self, scene):
        self.scene = scene

    def set_output(self, on):
        self.scene.output_on = bool(on)
        self.scene.note("output", bool(on))

    def output_is_on(self):
        self.scene.note("output?")
        if getattr(self.scene, "generator_mute", False):
            raise InstrumentTimeout("generator: no reply to OUTP?")
        return self.scene.output_on


class FakeResult:
    def __init__(self, volts, dt_s, method):
        self.pressure_pa = volts / SENSITIVITY_V_PER_PA
        self.freqs_hz = np.fft.rfftfreq(len(volts), dt_s)
        self.spectrum_pa = np.abs(np.fft.rfft(self.pressure_pa))
        self.sensitivity_v_per_pa = np.full(self.freqs_hz.shape, SENSITIVITY_V_PER_PA)
        self.warnings = ()                 # a clean result (TraceResult.warnings)
        self._flat = {name: float("nan") for name in RESULT_NAMES}
        self._flat.update(method=method, phase_source="measured", narrowband_ok=True,
                          peak_compressional_pa=float(self.pressure_pa.max()),
                          peak_rarefactional_pa=float(-self.pressure_pa.min()),
                          acoustic_working_frequency_hz=2e6)

    def flat(self):
        return dict(self._flat)


class FakeConverter:
    """Divides by a flat sensitivity; refuses a trace without signal (like f_awf unknown)."""

    def __init__(self, method="deconvolve", refuse_above_v=None):
        self.method = method
        self.refuse_above_v = refuse_above_v

    def process(self, voltage_v, dt_s, *, resolution_v=None):
        if np.max(np.abs(voltage_v)) < 1e-4:
            raise OutOfBandError("no signal: acoustic working frequency undefined")
        if self.refuse_above_v is not None and np.max(np.abs(voltage_v)) > self.refuse_above_v:
            raise OutOfBandError("acoustic working frequency outside the calibrated band")
        return FakeResult(voltage_v, dt_s, self.method)

    def with_method(self, method):
        return FakeConverter(method, self.refuse_above_v)


class SlowStore:
    """A real store whose trace writes take ``delay_s`` (a slow disk)."""

    def __init__(self, store, delay_s=0.0, full_after=None):
        self._store = store
        self.delay_s = delay_s
        self.full_after = full_after
        self.written = 0
        self.events = []

    def add_trace(self, *args, **kw):
        if self.full_after is not None and self.written >= self.full_after:
            raise DiskFullError(f"{self._store.path}: database or disk is full")
        time.sleep(self.delay_s)
        self._store.add_trace(*args, **kw)
        self.written += 1

    def add_event(self, time_s, kind, detail, seq=None):
        self.events.append((kind, detail))
        self._store.add_event(time_s, kind, detail, seq=seq)

    def __getattr__(self, name):
        return getattr(self._store, name)


def make_session(tmp_path, scene, *, alerts=None, max_traces=40, range_v=0.5, store_delay_s=0.0,
                 full_after=None, queue_capacity=16, opener_failures=None, resync_ok=True,
                 give_up_s=5.0, generator=True, commit_interval_s=0.05, duration_s=None,
                 bell=None, converter=None):
    settings = DigitiserSettings(record_length=N, sample_rate_hz=1 / DT_S, range_v=range_v)
    opens = {"digitiser": 0}

    def open_digitiser():
        opens["digitiser"] += 1
        if opener_failures is not None and opener_failures():
            raise ConnectionLost("connection refused")
        dev = FakeDigitiser(scene, settings)
        dev.configure(settings)
        return OpenInstrument(dev, FakeSession(scene, resync_ok), identity="FAKE,DIGITISER,0,1")

    def open_generator():
        return OpenInstrument(FakeGenerator(scene), FakeSession(scene),
                              identity="FAKE,GENERATOR,0,1")

    def open_store(path, meta):
        store = SessionStore.create(path, meta, commit_interval_s=commit_interval_s)
        stores.append(SlowStore(store, store_delay_s, full_after))
        return stores[-1]

    stores = []

    session = LiveSession(
        open_digitiser=open_digitiser, open_generator=open_generator if generator else None,
        converter=converter or FakeConverter(),
        rules=RuleEngine(AlertConfig.from_table(alerts or {})),
        open_store=open_store, metadata=lambda ids: {"instruments": ids, "test": True},
        session_path=tmp_path / "s.db", trigger_timeout_s=0.05, queue_capacity=queue_capacity,
        max_traces=max_traces, give_up_s=give_up_s, duration_s=duration_s, bell=bell)
    session.opens = opens
    session.stores = stores
    return session


def run(session, timeout_s=30.0):
    session.start()
    assert session.wait(timeout_s), "session did not finish"
    # every event the session wrote has a kind (and a fault its kind) declared by name
    for store in session.stores:
        for kind, detail in store.events:
            assert isinstance(kind, EventKind), f"event kind {kind!r} is not an EventKind"
            if kind is EventKind.FAULT:
                assert isinstance(detail["kind"], FaultKind), detail
    return session


def acquires(scene):
    return [e for e in scene.log if e[0] == "acquire"]


class TestLiveSessionBasics:
    def test_configuration_warning_recorded_once_across_reconnects(self, tmp_path):
        # Every new driver (each reconnect opens one) has the warning again: the
        # session records it once, as a configuration fault with a warning alert.
        scene = Scene()
        scene.configuration_warnings = ["the range in use is 0.5 V peak to peak, but ..."]
        scene.faults = {5: [ConnectionLost("gone")], 12: [ConnectionLost("gone")]}
        s = run(make_session(tmp_path, scene, max_traces=20))
        assert s.opens["digitiser"] == 3
        events = [d for k, d in s.stores[0].events
                  if k is EventKind.FAULT and d["kind"] is FaultKind.CONFIGURATION]
        assert len(events) == 1 and events[0]["message"].startswith("the range in use")

    def test_every_trace_converted_and_stored(self, tmp_path):
        scene = Scene()
        s = run(make_session(tmp_path, scene, max_traces=40))
        assert s.exit_code == ExitCode.OK
        snap = s.snapshot()
        assert (snap.acquired, snap.converted, snap.stored) == (40, 40, 40)
        assert snap.state == "stopped"
        with SessionReader(tmp_path / "s.db") as r:
            assert r.seqs() == list(range(40))
            assert r.stop["exit_status"] == "completed"
            assert r.stop["counts"]["stored"] == 40
            assert r.metadata["instruments"]["digitiser"]["identity"] == "FAKE,DIGITISER,0,1"
            st = r.trace(7)
            expected = FakeConverter().process(st.raw.volts(), st.raw.dt_s).flat()
            assert st.result["peak_compressional_pa"] == expected["peak_compressional_pa"]
            ranged = [e["detail"] for e in r.events()
                      if e["kind"] == "range-change" and e["detail"].get("done")]
        # the figures start afresh at a range change (the fake scene's under-use steps down)
        first = ranged[-1]["before_seq"] if ranged else 0
        assert snap.figures_since_reason == ("range change" if ranged else "")
        fig = snap.figures["peak_compressional_pa"]
        assert fig.count == 40 - first and fig.minimum <= fig.mean <= fig.maximum
        assert snap.pressure_pa.shape == (N,) and snap.spectrum_db.shape == (N // 2 + 1,)

    def test_operator_stop_mark_method_and_acknowledge(self, tmp_path):
        scene = Scene(amplitude=lambda seq: 0.3)   # clips: 0.3 V > 0.25 V, half the 0.5 V span
        scene.acquire_delay_s = 0.005
        s = make_session(tmp_path, scene, max_traces=None,
                         alerts={"clipping": {"actions": ["record"]}})
        s.start()
        deadline = time.monotonic() + 10
        while not s.snapshot().alerts and time.monotonic() < deadline:
            time.sleep(0.01)
        alert = s.snapshot().alerts[0]
        assert alert.rule == "clipping"
        s.acknowledge(alert.alert_id)
        s.mark("hydrophone moved to 40 mm")
        s.set_method("narrowband")
        while s.snapshot().method != "narrowband" and time.monotonic() < deadline:
            time.sleep(0.01)
        s.stop("operator pressed q")
        assert s.wait(10)
        assert s.exit_code == ExitCode.OK and not s.running
        assert s.snapshot().alerts[0].acknowledged
        with SessionReader(tmp_path / "s.db") as r:
            kinds = [e["kind"] for e in r.events()]
            assert "mark" in kinds and "method-change" in kinds
            stored_alert = r.alerts()[0]
            assert stored_alert["rule"] == "clipping"
            assert stored_alert["acknowledged_time_s"] is not None
            assert r.stop["exit_status"] == "operator"
            assert r.stop["reason"] == "operator pressed q"
            assert r.seqs() == list(range(len(r.seqs())))


class TestThrottling:
    def test_slow_writer_throttles_and_loses_nothing(self, tmp_path):
        scene = Scene()
        s = run(make_session(tmp_path, scene, max_traces=60, store_delay_s=0.03,
                             queue_capacity=4))
        assert s.exit_code == ExitCode.OK
        with SessionReader(tmp_path / "s.db") as r:
            assert r.seqs() == list(range(60))
            rules = [a["rule"] for a in r.alerts()]
        # The acquisition waited (on the full queue or on the judgement of the trace
        # before) instead of dropping traces.
        assert s._acq.blocked_s + s._acq.gate_wait_s > 0.5
        assert "falling_behind" in rules


class TestActions:
    def test_safe_off_before_next_acquisition(self, tmp_path):
        # 0.2 V on a 0.5 V range is 2 MPa with the fake hydrophone: above the limit.
        scene = Scene(amplitude=lambda seq: 0.2 if seq >= 5 else 0.02)
        s = run(make_session(tmp_path, scene, max_traces=12,
                             alerts={"over_pressure": {"limit_pa": 1.0e6},
                                     "range_under_use": {"enabled": False}}))
        log = [e for e in scene.log if e[0] in ("acquire", "output")]
        i = log.index(("acquire", 5, True))
        assert log[i + 1] == ("output", False)
        assert log[i + 2] == ("acquire", 6, False)
        with SessionReader(tmp_path / "s.db") as r:
            events = [e for e in r.events() if e["kind"] == "safe-off"]
            assert events and events[0]["detail"]["done"] is True
            assert events[0]["detail"]["before_seq"] == 6
            assert r.trace(6).result["peak_compressional_pa"] < 1.0e5
            assert [a["rule"] for a in r.alerts()][0] == "over_pressure"
        assert s.exit_code == ExitCode.OK

    def test_stop_action_ends_with_rule_exit_code(self, tmp_path):
        scene = Scene(amplitude=lambda seq: 0.2 if seq >= 3 else 0.02)
        s = run(make_session(tmp_path, scene, max_traces=None,
                             alerts={"over_pressure": {"limit_pa": 1.0e6,
                                                       "actions": ["record", "safe-off",
                                                                   "stop"]},
                                     "range_under_use": {"enabled": False}}))
        assert s.exit_code == ExitCode.STOPPED_BY_RULE
        assert scene.output_on is False
        with SessionReader(tmp_path / "s.db") as r:
            assert r.stop["exit_status"] == "stopped-by-rule"
            assert "over_pressure" in r.stop["reason"]

    def test_auto_range_steps_and_flags(self, tmp_path):
        # Clips on 0.2 V, then falls to a small signal that under-uses the range.
        scene = Scene(amplitude=lambda seq: 0.15 if seq < 6 else 0.02)
        s = run(make_session(tmp_path, scene, max_traces=30, range_v=0.2,
                             alerts={"range_under_use": {"consecutive_traces": 3}}))
        assert s.exit_code == ExitCode.OK
        ranges = [e[1] for e in scene.log if e[0] == "range"]
        assert ranges == [0.5, 0.2, 0.1]
        with SessionReader(tmp_path / "s.db") as r:
            changes = [e for e in r.events() if e["kind"] == "range-change"]
            assert [(c["detail"]["from_v"], c["detail"]["to_v"]) for c in changes] == [
                (0.2, 0.5), (0.5, 0.2), (0.2, 0.1)]
            first_after = changes[0]["detail"]["before_seq"]
            tr = r.trace(first_after)
            assert tr.flags["range_changed"] and tr.raw.range_v == 0.5
            assert tr.flags["previous_range_v"] == 0.2
            assert not r.trace(first_after + 1).flags["range_changed"]
            assert r.trace(first_after - 1).raw.range_v == 0.2


class TestFaults:
    def test_a_start_that_fails_leaves_nothing_running(self, tmp_path):
        s = make_session(tmp_path, Scene(), opener_failures=lambda: True)
        with pytest.raises(ConnectionLost):
            s.start()
        assert not s.running
        assert s.wait(0)                      # nothing to wait for
        assert s.snapshot().state == "stopped"
        assert not (tmp_path / "s.db").exists()

    def test_reconnect_continues_sequence(self, tmp_path):
        scene = Scene()
        scene.faults = {10: [ConnectionLost("peer closed")],
                        20: [InstrumentTimeout("stalled reply")]}
        fails = iter([False, True, False])   # first open ok, first reopen refused, then ok
        s = run(make_session(tmp_path, scene, max_traces=30,
                             opener_failures=lambda: next(fails, False)))
        assert s.exit_code == ExitCode.OK
        assert s.opens["digitiser"] == 3
        with SessionReader(tmp_path / "s.db") as r:
            assert r.seqs() == list(range(30))
            kinds = [e["kind"] for e in r.events()]
            assert "connection-lost" in kinds and "reconnect" in kinds and "resync" in kinds
            reconnect = next(e for e in r.events() if e["kind"] == "reconnect")
            assert reconnect["detail"]["next_seq"] == 10
            assert "instrument-fault" in [a["rule"] for a in r.alerts()]

    def test_lost_for_good_is_an_instrument_failure(self, tmp_path):
        scene = Scene()
        scene.faults = {5: [ConnectionLost("peer closed")]}
        calls = iter([False])
        s = run(make_session(tmp_path, scene, max_traces=None, give_up_s=0.4,
                             opener_failures=lambda: next(calls, True)))
        assert s.exit_code == ExitCode.INSTRUMENT
        assert "not reachable" in s.message_for_operator
        with SessionReader(tmp_path / "s.db") as r:
            assert r.seqs() == list(range(5))
            assert r.stop["exit_status"] == "instrument-failure"

    def test_no_trigger_is_recorded_and_alerted(self, tmp_path):
        scene = Scene()
        scene.faults = {3: [NoTrigger("no trigger")] * 25}
        s = run(make_session(tmp_path, scene, max_traces=6,
                             alerts={"no_trigger": {"after_s": 0.5}}))
        with SessionReader(tmp_path / "s.db") as r:
            assert r.seqs() == list(range(6))
            assert sum(e["kind"] == "no-trigger" for e in r.events()) == 25
            assert "no_trigger" in [a["rule"] for a in r.alerts()]
        assert s.exit_code == ExitCode.OK

    def test_conversion_error_stored_and_session_goes_on(self, tmp_path):
        # Trace 4 holds a pulse the converter refuses: a conversion failure to report.
        scene = Scene(amplitude=lambda seq: 0.08 if seq == 4 else 0.05)
        s = run(make_session(tmp_path, scene, max_traces=10,
                             converter=FakeConverter(refuse_above_v=0.07)))
        assert s.exit_code == ExitCode.OK
        snap = s.snapshot()
        assert (snap.acquired, snap.converted, snap.stored) == (10, 9, 10)
        with SessionReader(tmp_path / "s.db") as r:
            bad = r.trace(4)
            assert bad.result is None and "outside the calibrated band" in bad.error
            assert r.trace(5).result is not None
            assert [a["rule"] for a in r.alerts()] == ["conversion_failed"]

    @pytest.mark.parametrize("error", [OverflowError("(34, 'Numerical result out of range')"),
                                       ValueError("array must not contain infs or NaNs")])
    def test_a_numeric_error_is_one_bad_trace_not_the_end(self, tmp_path, error, capsys):
        # an overflowing calibration value once ended the session at once: 0 traces stored
        class Overflowing(FakeConverter):
            def process(self, voltage_v, dt_s, *, resolution_v=None):
                if np.max(np.abs(voltage_v)) > 0.07:
                    raise error
                return super().process(voltage_v, dt_s)

            def with_method(self, method):
                return Overflowing(method)

        scene = Scene(amplitude=lambda seq: 0.08 if seq in (2, 6) else 0.05)
        s = run(make_session(tmp_path, scene, max_traces=10, converter=Overflowing()))
        assert s.exit_code == ExitCode.OK
        with SessionReader(tmp_path / "s.db") as r:
            assert r.seqs() == list(range(10))
            for seq in (2, 6):
                assert r.trace(seq).result is None
                assert type(error).__name__ in r.trace(seq).error
                assert len(r.trace(seq).raw.codes) == N       # the raw trace is kept
            assert r.trace(3).result is not None
            assert "conversion_failed" in [a["rule"] for a in r.alerts()]
        # the first one's traceback is shown once, for the bug report
        assert capsys.readouterr().err.count("Traceback") == 1

    def test_empty_trace_is_no_pulse_not_a_conversion_failure(self, tmp_path):
        scene = Scene(amplitude=lambda seq: 0.0 if seq == 4 else 0.05)
        s = run(make_session(tmp_path, scene, max_traces=10))
        assert s.exit_code == ExitCode.OK
        assert (s.snapshot().converted, s.snapshot().no_pulse_traces) == (9, 1)
        with SessionReader(tmp_path / "s.db") as r:
            bad = r.trace(4)
            assert bad.result is None and "no signal" in bad.error
            assert np.all(bad.raw.codes == 0)
            assert bad.flags.get("no_pulse") is True
            assert "no_pulse" not in r.trace(5).flags
            assert [a["rule"] for a in r.alerts()] == ["no_pulse"]

    def test_disk_full_stops_cleanly_with_store_exit_code(self, tmp_path):
        scene = Scene()
        s = run(make_session(tmp_path, scene, max_traces=None, full_after=20,
                             commit_interval_s=0.0))
        assert s.exit_code == ExitCode.STORE
        assert "disk is full" in s.message_for_operator
        assert not s.running
        with SessionReader(tmp_path / "s.db") as r:
            assert r.seqs() == list(range(20))
            assert r.integrity_check() == "ok"

    def test_a_bug_in_processing_is_an_internal_error_not_an_instrument_failure(
            self, tmp_path, capsys):
        class BuggyConverter(FakeConverter):
            def process(self, voltage_v, dt_s, *, resolution_v=None):
                raise RuntimeError("a bug in the chain")

        s = run(make_session(tmp_path, Scene(), max_traces=None, converter=BuggyConverter()))
        assert s.exit_code == ExitCode.INTERNAL != ExitCode.INSTRUMENT
        assert s.exit_status == "internal-error" and "a bug in the chain" in s.stop_reason
        assert "RuntimeError" in capsys.readouterr().err       # the traceback is shown
        with SessionReader(tmp_path / "s.db") as r:
            assert r.stop["exit_status"] == "internal-error"


@pytest.mark.parametrize("gate", [True])
def test_duration_stop(tmp_path, gate):
    scene = Scene()
    scene.acquire_delay_s = 0.002
    t0 = time.monotonic()
    s = run(make_session(tmp_path, scene, max_traces=None, duration_s=0.5))
    assert 0.4 < time.monotonic() - t0 < 5
    assert s.exit_code == ExitCode.OK
    with SessionReader(tmp_path / "s.db") as r:
        assert r.stop["exit_status"] == "completed"
        assert len(r.seqs()) == s.snapshot().acquired


class TestHeadless:
    def test_status_lines_alerts_and_bell(self, tmp_path):
        import io
        from datetime import datetime

        from tankside.monitor.headless import run_headless

        scene = Scene(amplitude=lambda seq: 0.2 if seq >= 5 else 0.02)
        scene.acquire_delay_s = 0.002
        rings = []
        s = make_session(tmp_path, scene, max_traces=40,
                         alerts={"over_pressure": {"limit_pa": 1.0e6},
                                 "range_under_use": {"enabled": False},
                                 "pr_drift": {"enabled": False}},
                         bell=lambda: rings.append(1))
        s.start()
        out = io.StringIO()
        code = run_headless(s, out=out, status_every_s=0.05)
        text = out.getvalue()
        assert code == ExitCode.OK
        alert_lines = [ln for ln in text.splitlines() if ln.startswith("ALERT")]
        assert len(alert_lines) == 1 and "CRITICAL over_pressure seq 5" in alert_lines[0]
        assert "safe-off" in alert_lines[0]
        assert rings == [1]            # over_pressure rings by default
        # status lines begin with an ISO 8601 time (with its UTC offset)
        status = [ln for ln in text.splitlines() if " [" in ln and not ln.startswith("ALERT")]
        for ln in status:
            stamp = datetime.fromisoformat(ln.split(" ", 1)[0])
            assert stamp.tzinfo is not None and ln.split(" ", 2)[1].startswith("[")
        last = [ln for ln in status if " [stopped] " in ln][-1]
        assert "acquired 40 converted 40 stored 40" in last and "alerts 1" in last
        assert "session stopped: completed" in text.splitlines()[-1]


class TestDriveState:
    def test_output_switched_at_the_generator_is_noticed_without_a_query_per_trace(
            self, tmp_path):
        scene = Scene()
        scene.output_on = False          # off at the start
        scene.acquire_delay_s = 0.002
        s = make_session(tmp_path, scene, max_traces=None)
        s.start()
        try:
            wait = time.monotonic() + 5
            while s.snapshot().drive_detail != "output off" and time.monotonic() < wait:
                time.sleep(0.01)
            assert s.snapshot().drive_on is False
            scene.output_on = True       # the operator, at the instrument
            t_on = time.monotonic()
            while s.snapshot().drive_on is not True and time.monotonic() < t_on + 5:
                time.sleep(0.01)
            assert time.monotonic() - t_on < 2.0
            gen = next(v for v in s.snapshot().instruments if v.name == "generator")
            assert gen.detail == "output on"
        finally:
            s.stop()
            assert s.wait(10)
        queries = sum(e[0] == "output?" for e in scene.log)
        traces = len(acquires(scene))
        assert traces > 50 and queries <= 2 + s.elapsed_s / 1.0
        with SessionReader(tmp_path / "s.db") as r:
            drive = [(e["kind"], e["detail"]["cause"]) for e in r.events()
                     if e["kind"] in ("drive-on", "drive-off")]
            # switched on at the instrument, noticed; switched off when the session ends
            assert drive == [("drive-off", "start"), ("drive-on", "generator"),
                             ("drive-off", "end of session")]
            before = next(e for e in r.events() if e["kind"] == "drive-on")["detail"]
            assert r.trace(before["before_seq"] - 1).flags.get("drive_off") is True
            assert "drive_off" not in r.trace(before["before_seq"]).flags

    def test_unanswered_output_query_is_a_fault_and_the_state_unknown(self, tmp_path):
        scene = Scene()
        scene.generator_mute = True
        s = run(make_session(tmp_path, scene, max_traces=20))
        snap = s.snapshot()
        assert snap.drive_on is None and snap.drive_detail == "output state unknown"
        with SessionReader(tmp_path / "s.db") as r:
            faults = [e for e in r.events() if e["kind"] == "fault"]
            assert [f["detail"]["kind"] for f in faults] == ["generator-query"]
            assert [a["rule"] for a in r.alerts()].count("instrument-fault") == 1
            assert r.seqs() == list(range(20))
            # the output could not be confirmed off at the end: the session says so
            assert r.stop["exit_status"] == "drive-may-be-on"
        assert s.exit_status == "drive-may-be-on" and s.exit_code == ExitCode.DRIVE_MAY_BE_ON
        assert "DRIVE MAY STILL BE ON" in s.message_for_operator
        assert ("resync",) in scene.log
