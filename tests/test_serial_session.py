"""The stage and the thermometer in a live session, with in-process fakes of both.

The digitiser, generator and store are those of tests/test_pipeline_fakes.py (fakes on one
ordered log; the real store and rules). The stage and thermometer fakes follow the
protocols of tankside.monitor.live.serial_ports and share a small state object the tests
change while the session runs (mute, garbled, moved).
"""

from __future__ import annotations

import math
import threading
import time

import pytest
from test_pipeline_fakes import (
    DT_S,
    FakeConverter,
    FakeDigitiser,
    FakeGenerator,
    FakeSession,
    N,
    Scene,
)

from tankside.drivers.digitiser import DigitiserSettings
from tankside.drivers.errors import (
    ConnectionLost,
    InstrumentReportedError,
    InstrumentTimeout,
    ProtocolError,
)
from tankside.monitor.acoustics.water import Water
from tankside.monitor.errors import ConfigError, OutsideLimitsError
from tankside.monitor.live.acquisition import OpenInstrument
from tankside.monitor.live.rules import AlertConfig, RuleEngine, TickObservation
from tankside.monitor.live.session import LiveSession
from tankside.monitor.live.stage import check_target
from tankside.monitor.live.thermometer import ThermometerReading, water_for_trace
from tankside.monitor.outcome import ExitCode
from tankside.monitor.record.schema import EventKind, FaultKind, WaterSource
from tankside.monitor.record.store import SessionReader, SessionStore

LIMITS = {"x": (-20.0, 20.0), "y": (-20.0, 20.0), "z": (0.0, 80.0)}
BENCH_C = 20.0


class SerialBench:
    """Shared state of the fake stage and thermometer (changed by the tests)."""

    def __init__(self):
        self.lock = threading.Lock()
        self.position = {"x": 1.0, "y": -2.0, "z": 30.0}
        self.log: list[tuple] = []
        self.stage_mute = False
        self.stage_errors = 0           # position() raises an error the stage reports
        self.moving = False
        self.temperature_c = 21.3
        self.thermometer_mute = False
        self.thermometer_garbled = False
        self.opens = {"stage": 0, "thermometer": 0}

    def note(self, *entry):
        with self.lock:
            self.log.append(entry)


class FakeStage:
    axes = ("x", "y", "z")

    def __init__(self, bench: SerialBench):
        self.bench = bench

    def identify(self):
        self._answer()
        return "FAKE,STAGE,0,1"

    def _answer(self):
        if self.bench.stage_mute:
            raise InstrumentTimeout("stage: no reply")

    def position(self):
        self._answer()
        if self.bench.stage_errors:
            self.bench.stage_errors -= 1
            raise InstrumentReportedError(7, "axis y: following error")
        return dict(self.bench.position)

    def move_to(self, target):
        self._answer()
        self.bench.note("move", dict(target))
        self.bench.position.update(target)

    def is_moving(self):
        self._answer()
        return self.bench.moving

    def stop(self):
        self.bench.note("stop")
        self._answer()

    def close(self):
        self.bench.note("stage-close")


class FakeThermometer:
    def __init__(self, bench: SerialBench):
        self.bench = bench

    def identify(self):
        return None          # a thermometer that only streams readings

    def read_celsius(self):
        if self.bench.thermometer_mute:
            raise InstrumentTimeout("thermometer: no line within 0.2 s")
        if self.bench.thermometer_garbled:
            raise ProtocolError("thermometer: 'T=2#.1' is not a reading")
        return self.bench.temperature_c

    def close(self):
        self.bench.note("thermometer-close")


class WaterConverter(FakeConverter):
    """The fake converter, recording the water it was given as the real one does."""

    def process(self, voltage_v, dt_s, *, resolution_v=None, water=None):
        result = FakeConverter.process(self, voltage_v, dt_s, resolution_v=resolution_v)
        water = water if water is not None else Water.at(BENCH_C)
        result._flat.update(water_temperature_c=water.temperature_c,
                            water_density_kg_per_m3=water.density_kg_per_m3,
                            water_sound_speed_m_per_s=water.sound_speed_m_per_s)
        return result

    def with_method(self, method):
        return WaterConverter(method, self.refuse_above_v)


def make_serial_session(tmp_path, scene, bench, *, stage=True, thermometer=True,
                        max_traces=30, alerts=None, max_age_s=30.0, acquire_delay_s=0.01,
                        generator=False):
    settings = DigitiserSettings(record_length=N, sample_rate_hz=1 / DT_S, range_v=0.5)
    scene.acquire_delay_s = acquire_delay_s

    def open_digitiser():
        dev = FakeDigitiser(scene, settings)
        dev.configure(settings)
        return OpenInstrument(dev, FakeSession(scene), identity="FAKE,DIGITISER,0,1")

    def open_generator():
        return OpenInstrument(FakeGenerator(scene), FakeSession(scene),
                              identity="FAKE,GENERATOR,0,1")

    def open_stage():
        bench.opens["stage"] += 1
        if bench.stage_mute:
            raise ConnectionLost("stage: no such device")
        return FakeStage(bench)

    def open_thermometer():
        bench.opens["thermometer"] += 1
        if bench.thermometer_mute:
            raise ConnectionLost("thermometer: no such device")
        return FakeThermometer(bench)

    def open_store(path, meta):
        return SessionStore.create(path, meta, commit_interval_s=0.05)

    return LiveSession(
        open_digitiser=open_digitiser, open_generator=open_generator if generator else None,
        converter=WaterConverter(),
        rules=RuleEngine(AlertConfig.from_table(alerts or {}), water_reference_c=BENCH_C),
        open_store=open_store, metadata=lambda ids: {"instruments": ids},
        session_path=tmp_path / "s.db", trigger_timeout_s=0.05, queue_capacity=16,
        max_traces=max_traces, give_up_s=5.0,
        open_stage=open_stage if stage else None, stage_limits=LIMITS,
        open_thermometer=open_thermometer if thermometer else None, max_age_s=max_age_s,
        bench_temperature_c=BENCH_C, serial_poll_s={"stage": 0.02, "thermometer": 0.02})


def wait_for(condition, timeout_s=10.0):
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        if condition():
            return True
        time.sleep(0.01)
    return False


def events_of(path, kind):
    with SessionReader(path) as r:
        return [e for e in r.events() if e["kind"] == kind]


# -- pure parts -----------------------------------------------------------------------

class TestCheckTarget:
    def test_inside_and_on_the_limits(self):
        assert check_target({"x": -20, "z": 80.0}, LIMITS) == {"x": -20.0, "z": 80.0}

    @pytest.mark.parametrize("target, words", [
        ({"x": 20.001}, "outside the soft limits"),
        ({"z": -0.5}, "outside the soft limits"),
        ({"w": 1.0}, "no soft limits"),
        ({"x": math.nan}, "not a position"),
        ({"x": True}, "not a position"),
        ({}, "no axis"),
    ])
    def test_refused(self, target, words):
        with pytest.raises(OutsideLimitsError, match=words):
            check_target(target, LIMITS)


class TestWaterForTrace:
    def test_fresh_reading_is_used(self):
        choice = water_for_trace(ThermometerReading(22.4, 100.0), 110.0, max_age_s=30.0,
                                 bench_c=BENCH_C)
        assert (choice.temperature_c, choice.source, choice.age_s) == (
            22.4, WaterSource.THERMOMETER, 10.0)

    def test_reading_at_max_age_is_still_used_and_older_is_not(self):
        at = water_for_trace(ThermometerReading(22.4, 100.0), 130.0, max_age_s=30.0,
                             bench_c=BENCH_C)
        assert at.source == WaterSource.THERMOMETER
        old = water_for_trace(ThermometerReading(22.4, 100.0), 130.5, max_age_s=30.0,
                              bench_c=BENCH_C)
        assert (old.temperature_c, old.source, old.reading_c, old.age_s) == (
            BENCH_C, WaterSource.BENCH, 22.4, 30.5)
        assert "30 s old" in old.why or "31 s old" in old.why

    def test_no_reading_and_an_impossible_reading_fall_back(self):
        none = water_for_trace(None, 10.0, max_age_s=30.0, bench_c=BENCH_C)
        assert (none.temperature_c, none.source, none.reading_c) == (BENCH_C, "bench", None)
        hot = water_for_trace(ThermometerReading(99.0, 10.0), 10.0, max_age_s=30.0,
                              bench_c=BENCH_C)
        assert hot.source == WaterSource.BENCH and "outside" in hot.why

    def test_a_reading_newer_than_the_trace_is_zero_seconds_old(self):
        choice = water_for_trace(ThermometerReading(21.0, 100.02), 100.0, max_age_s=30.0,
                                 bench_c=BENCH_C)
        assert choice.age_s == 0.0


class TestWaterTemperatureRule:
    def engine(self, **params):
        table = {"water_temperature": params} if params else {}
        return RuleEngine(AlertConfig.from_table(table), water_reference_c=20.0)

    def fire(self, engine, reading_c, now_s=0.0):
        return [f for f in engine.on_tick(TickObservation(now_s=now_s, water_reading_c=reading_c))
                if f.rule == "water_temperature"]

    def test_both_checks_on_by_default_with_units(self):
        config = AlertConfig.defaults()["water_temperature"]
        assert config.enabled and config.params == {"band_c": 2.0, "max_change_c": 1.0}

    def test_outside_the_band_fires_once(self):
        engine = self.engine(max_change_c=0.0)
        assert self.fire(engine, 21.9) == []
        (firing,) = self.fire(engine, 22.0)           # inclusive, like every threshold
        assert firing.detail["outside_band"] and not firing.detail["changed"]
        assert "18 to 22 degC" in firing.message
        assert self.fire(engine, 22.5) == []          # latched while it stands

    def test_a_change_during_the_session_fires(self):
        engine = self.engine(band_c=0.0)
        assert self.fire(engine, 23.0) == []          # far from 20 C, but the band is off
        assert self.fire(engine, 23.9) == []
        (firing,) = self.fire(engine, 24.0)
        assert firing.detail["changed"] and firing.detail["first_reading_c"] == 23.0
        assert "+1 degC" in firing.message

    def test_no_reading_is_not_judged(self):
        engine = self.engine()
        assert self.fire(engine, None) == []
        assert "water_temperature" not in engine.active

    @pytest.mark.parametrize("table, key", [
        ({"water_temperature": {"band_c": -1.0}}, "water_temperature.band_c"),
        ({"water_temperature": {"max_change_c": "1 C"}}, "water_temperature.max_change_c"),
        ({"water_temperature": {"band": 1.0}}, "water_temperature.band"),
    ])
    def test_bad_settings_name_the_key(self, table, key):
        with pytest.raises(ConfigError) as info:
            AlertConfig.from_table(table)
        assert info.value.key == key


# -- in a live session ------------------------------------------------------------------

class TestPositionAndWaterWithEachTrace:
    def test_recorded_with_every_trace_and_the_stage_stopped_at_the_end(self, tmp_path):
        scene, bench = Scene(), SerialBench()
        s = make_serial_session(tmp_path, scene, bench, max_traces=None)
        s.start()
        assert wait_for(lambda: s.snapshot().converted >= 5)
        s.move_stage({"x": 5.0, "z": 40.0})
        assert wait_for(lambda: (s.snapshot().bench or None) is not None
                        and s.snapshot().bench.position_mm.get("z") == 40.0)
        moved_at = s.snapshot().acquired
        assert wait_for(lambda: s.snapshot().converted >= moved_at + 5)
        snap = s.snapshot()
        s.stop("test")
        assert s.wait(10) and s.exit_code == ExitCode.OK
        stage_log = [e for e in bench.log if e[0] != "thermometer-close"]
        assert stage_log[-2:] == [("stop",), ("stage-close",)]
        assert ("move", {"x": 5.0, "z": 40.0}) in bench.log
        assert snap.bench.has_stage and snap.bench.stage_connected
        assert snap.bench.reading_c == 21.3 and snap.bench.water_source == "thermometer"
        with SessionReader(tmp_path / "s.db") as r:
            stored = list(r.iter_traces())
            ids = r.metadata["instruments"]
            assert r.stage_axes() == ("x", "y", "z")
        assert ids["stage"]["axes"] == ["x", "y", "z"] and ids["stage"]["identity"]
        assert "thermometer" in ids
        before = {"x": 1.0, "y": -2.0, "z": 30.0}
        after = {"x": 5.0, "y": -2.0, "z": 40.0}
        assert stored[0].bench.positions_mm == before
        assert stored[-1].bench.positions_mm == after
        assert all(t.bench.positions_mm in (before, after) for t in stored)
        for t in stored:
            assert t.bench.water_source == WaterSource.THERMOMETER
            assert t.bench.water_reading_c == 21.3 and 0.0 <= t.bench.water_reading_age_s < 1.0
            # the conversion used the reading: Marczak 1997 / Tanaka et al. 2001 values
            assert t.result["water_temperature_c"] == 21.3
            assert t.result["water_sound_speed_m_per_s"] == Water.at(21.3).sound_speed_m_per_s
        (move,) = events_of(tmp_path / "s.db", EventKind.STAGE_MOVE)
        assert move["detail"] == {"target_mm": {"x": 5.0, "z": 40.0}, "done": True}
        stops = events_of(tmp_path / "s.db", EventKind.STAGE_STOP)
        assert stops[-1]["detail"] == {"cause": "end of session", "done": True}

    def test_a_move_outside_the_limits_is_refused_before_anything_is_sent(self, tmp_path):
        scene, bench = Scene(), SerialBench()
        s = make_serial_session(tmp_path, scene, bench, max_traces=None)
        s.start()
        try:
            with pytest.raises(OutsideLimitsError, match="outside the soft limits"):
                s.move_stage({"x": 25.0})
            with pytest.raises(OutsideLimitsError, match="no soft limits"):
                s.move_stage({"theta": 1.0})
            assert wait_for(lambda: s.snapshot().converted >= 3)
        finally:
            s.stop("test")
            assert s.wait(10)
        assert not [e for e in bench.log if e[0] == "move"]
        assert events_of(tmp_path / "s.db", EventKind.STAGE_MOVE) == []

    def test_a_session_without_them_records_no_bench_state(self, tmp_path):
        scene, bench = Scene(), SerialBench()
        s = make_serial_session(tmp_path, scene, bench, stage=False, thermometer=False,
                                max_traces=5)
        s.start()
        assert s.wait(10) and s.exit_code == ExitCode.OK
        assert s.snapshot().bench is None
        with pytest.raises(ConfigError):
            s.move_stage({"x": 0.0})
        with SessionReader(tmp_path / "s.db") as r:
            assert [t.bench for t in r.iter_traces()] == [None] * 5
            assert all(t.result["water_temperature_c"] == BENCH_C for t in r.iter_traces())

    def test_a_stage_axis_without_limits_stops_the_start(self, tmp_path):
        scene, bench = Scene(), SerialBench()
        s = make_serial_session(tmp_path, scene, bench)
        s._stage.limits = {"x": (-1.0, 1.0)}
        with pytest.raises(ConfigError, match="y, z without soft limits"):
            s.start()
        assert not (tmp_path / "s.db").exists()
        assert bench.log == [("stage-close",)]


class TestOldReadings:
    def test_an_old_reading_falls_back_to_the_bench_temperature_and_says_so(self, tmp_path):
        scene, bench = Scene(), SerialBench()
        s = make_serial_session(tmp_path, scene, bench, max_traces=None, max_age_s=0.3,
                                alerts={"water_temperature": {"band_c": 0.0}})
        s.start()
        assert wait_for(lambda: s.snapshot().converted >= 3)
        bench.thermometer_mute = True          # the reading ages from here on
        assert wait_for(lambda: (s.snapshot().bench or None) is not None
                        and s.snapshot().bench.water_source == "bench")
        n_old = s.snapshot().acquired
        bench.thermometer_mute = False
        assert wait_for(lambda: s.snapshot().bench.water_source == "thermometer")
        assert wait_for(lambda: s.snapshot().converted >= n_old + 5)
        s.stop("test")
        assert s.wait(10) and s.exit_code == ExitCode.OK
        path = tmp_path / "s.db"
        with SessionReader(path) as r:
            stored = list(r.iter_traces())
            rules = [a["rule"] for a in r.alerts()]
        sources = [t.bench.water_source for t in stored]
        assert sources[0] == WaterSource.THERMOMETER
        assert WaterSource.BENCH in sources and sources[-1] == WaterSource.THERMOMETER
        for t in stored:
            if t.bench.water_source == WaterSource.BENCH:
                assert t.result["water_temperature_c"] == BENCH_C
                assert t.bench.water_reading_c == 21.3 and t.bench.water_reading_age_s > 0.3
            else:
                assert t.result["water_temperature_c"] == 21.3
                assert t.bench.water_reading_age_s <= 0.3
        assert "water-reading-old" in rules and "instrument-lost" in rules
        changes = [e["detail"]["source"] for e in events_of(path, EventKind.WATER_SOURCE)]
        assert changes[:3] == ["thermometer", "bench", "thermometer"]
        (lost,) = events_of(path, EventKind.INSTRUMENT_LOST)
        assert lost["detail"]["instrument"] == "thermometer"
        (back,) = events_of(path, EventKind.INSTRUMENT_BACK)
        assert back["detail"]["instrument"] == "thermometer" and back["detail"]["attempts"] >= 1
        # acquisition never stopped: every trace in order
        assert [t.raw.seq for t in stored] == list(range(len(stored)))

    def test_a_garbled_reply_is_one_fault_not_a_loss(self, tmp_path):
        scene, bench = Scene(), SerialBench()
        s = make_serial_session(tmp_path, scene, bench, max_traces=None)
        s.start()
        assert wait_for(lambda: s.snapshot().converted >= 2)
        bench.thermometer_garbled = True
        time.sleep(0.2)                          # about ten garbled replies
        bench.thermometer_garbled = False
        s.stop("test")
        assert s.wait(10)
        faults = [e for e in events_of(tmp_path / "s.db", EventKind.FAULT)
                  if e["detail"]["kind"] == FaultKind.THERMOMETER_REPLY]
        assert len(faults) == 1
        assert events_of(tmp_path / "s.db", EventKind.INSTRUMENT_LOST) == []


class TestStageTrouble:
    def test_a_lost_stage_is_an_alert_reconnects_and_acquisition_goes_on(self, tmp_path):
        scene, bench = Scene(), SerialBench()
        s = make_serial_session(tmp_path, scene, bench, max_traces=None)
        s.start()
        assert wait_for(lambda: s.snapshot().converted >= 3)
        bench.stage_mute = True
        assert wait_for(lambda: not s.snapshot().bench.stage_connected)
        with pytest.raises(ConnectionLost, match="not sent"):
            s.move_stage({"x": 0.0})
        lost_at = s.snapshot().acquired
        assert wait_for(lambda: s.snapshot().converted >= lost_at + 5)
        bench.stage_mute = False
        assert wait_for(lambda: s.snapshot().bench.stage_connected)
        back_at = s.snapshot().acquired
        assert wait_for(lambda: s.snapshot().converted >= back_at + 3)
        s.stop("test")
        assert s.wait(10) and s.exit_code == ExitCode.OK
        path = tmp_path / "s.db"
        (lost,) = events_of(path, EventKind.INSTRUMENT_LOST)
        assert lost["detail"]["instrument"] == "stage"
        (back,) = events_of(path, EventKind.INSTRUMENT_BACK)
        assert back["detail"]["identity"] == "FAKE,STAGE,0,1"
        # a stop was tried when it stopped answering (it could not be confirmed)
        failed_stop = [e for e in events_of(path, EventKind.STAGE_STOP)
                       if e["detail"]["cause"] == "stage error"]
        assert failed_stop and failed_stop[0]["detail"]["done"] is False
        with SessionReader(path) as r:
            stored = list(r.iter_traces())
            rules = [a["rule"] for a in r.alerts()]
        assert "instrument-lost" in rules and "stage-stop-failed" in rules
        assert [t.raw.seq for t in stored] == list(range(len(stored)))
        # while lost, traces are recorded without a position (the water is still there)
        unknown = [t for t in stored if not t.bench.positions_mm]
        assert unknown and all(t.bench.water_source == "thermometer" for t in unknown)
        assert stored[-1].bench.positions_mm == bench.position

    def test_a_stage_error_sends_stop_and_the_session_goes_on(self, tmp_path):
        scene, bench = Scene(), SerialBench()
        s = make_serial_session(tmp_path, scene, bench, max_traces=None)
        s.start()
        assert wait_for(lambda: s.snapshot().converted >= 2)
        bench.stage_errors = 3                   # three in a row: one episode
        assert wait_for(lambda: ("stop",) in bench.log and bench.stage_errors == 0)
        s.stop("test")
        assert s.wait(10) and s.exit_code == ExitCode.OK
        path = tmp_path / "s.db"
        causes = [e["detail"]["cause"] for e in events_of(path, EventKind.STAGE_STOP)]
        assert causes == ["stage error", "end of session"]
        (fault,) = [e for e in events_of(path, EventKind.FAULT)
                    if e["detail"]["kind"] == FaultKind.STAGE_ERROR]
        assert "following error" in fault["detail"]["message"]
        assert events_of(path, EventKind.INSTRUMENT_LOST) == []

    def test_safe_off_also_stops_the_stage(self, tmp_path):
        scene = Scene(amplitude=lambda seq: 0.2 if seq >= 5 else 0.02)   # 2 MPa from trace 5
        bench = SerialBench()
        s = make_serial_session(tmp_path, scene, bench, max_traces=10, generator=True,
                                alerts={"over_pressure": {"limit_pa": 1.0e6},
                                        "range_under_use": {"enabled": False}})
        s.start()
        assert s.wait(10)
        causes = [e["detail"]["cause"] for e in events_of(tmp_path / "s.db",
                                                           EventKind.STAGE_STOP)]
        assert causes == ["safe-off", "end of session"]
        assert bench.log.count(("stop",)) == 2



def test_a_water_temperature_change_during_the_session_is_an_alert(tmp_path):
    scene, bench = Scene(), SerialBench()
    s = make_serial_session(tmp_path, scene, bench, max_traces=None,
                            alerts={"water_temperature": {"band_c": 0.0}})
    s.start()
    assert wait_for(lambda: s.snapshot().converted >= 3)
    time.sleep(1.2)                              # a tick judges the first reading
    bench.temperature_c = 22.4                   # 1.1 degC above it: limit 1 degC
    assert wait_for(lambda: any(a.rule == "water_temperature" for a in s.snapshot().alerts))
    s.stop("test")
    assert s.wait(10) and s.exit_code == ExitCode.OK
    with SessionReader(tmp_path / "s.db") as r:
        (alert,) = [a for a in r.alerts() if a["rule"] == "water_temperature"]
        stored = list(r.iter_traces())
    assert "changed by +1.1 degC" in alert["message"] and alert["actions"] == ("record", "bell")
    # the conversion followed the water: both temperatures were used
    assert {t.result["water_temperature_c"] for t in stored} == {21.3, 22.4}


def test_traces_acquired_while_the_stage_moves_are_flagged(tmp_path):
    scene, bench = Scene(), SerialBench()
    s = make_serial_session(tmp_path, scene, bench, max_traces=None)
    s.start()
    assert wait_for(lambda: s.snapshot().converted >= 3)
    bench.moving = True
    assert wait_for(lambda: s.snapshot().bench.stage_moving)
    at = s.snapshot().acquired
    assert wait_for(lambda: s.snapshot().converted >= at + 3)
    s.stop("test")
    assert s.wait(10)
    with SessionReader(tmp_path / "s.db") as r:
        flags = [t.flags.get("stage_moving", False) for t in r.iter_traces()]
    assert flags[0] is False and flags[-1] is True
