"""The drivers against the simulated instruments over real TCP with pyvisa-py.

Every driver operation, every fault the simulator can inject, and recovery after a
timeout. Values checked against the simulator's own state (read from the device model),
not against numbers copied from the driver.
"""

import socket
import time

import numpy as np
import pytest

from tankside.drivers.digitiser import Digitiser, DigitiserSettings
from tankside.drivers.errors import (
    ConnectionLost,
    InstrumentReportedError,
    InstrumentTimeout,
    NoTrigger,
    ProtocolError,
    SettingError,
)
from tankside.drivers.generator import Generator
from tankside.drivers.profile import load_profile
from tankside.drivers.pyvisa_py_internals import backend_socket
from tankside.drivers.scpi import ScpiLink
from tankside.drivers.visa import open_resource
from tankside.monitor.live.benchfile import InstrumentConfig
from tankside.monitor.live.instruments import digitiser_opener
from tankside.simulators.bench import SimulatedBench
from tankside.simulators.scene import Drive

SETTINGS = DigitiserSettings(record_length=2000, sample_rate_hz=250e6, range_v=0.1,
                             trigger_source="EXT", trigger_level_v=1.0)


@pytest.fixture
def bench():
    # a generator left with its output on by the operator: these tests are of the
    # instruments, not of tankside's drive policy
    with SimulatedBench(seed=3, trigger_period_s=0.005,
                        drive=Drive()) as b:
        yield b


def _digitiser(bench, *, timeout_s=2.0, **kw):
    session = ScpiLink.open(bench.digitiser_resource, timeout_s=timeout_s,
                               resync_timeout_s=5.0, **kw)
    dig = Digitiser(session, load_profile(bench.digitiser_profile_path))
    dig.configure(SETTINGS)
    return dig


def _seconds_to_fail(dig, error, *, trigger_timeout_s=1.0) -> float:
    """Wall-clock seconds the first acquisition takes to fail with ``error``."""
    t0 = time.monotonic()
    with pytest.raises(error):
        dig.acquire(0, trigger_timeout_s=trigger_timeout_s)
    return time.monotonic() - t0


def _generator(bench):
    session = ScpiLink.open(bench.generator_resource, timeout_s=2.0)
    return Generator(session, load_profile(bench.generator_profile_path))


def _nodelay(sock: socket.socket) -> int:
    return sock.getsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY)


class TestTransport:
    def test_open_resource_switches_nagle_off(self, bench):
        res = open_resource(bench.digitiser_resource, timeout_s=2.0)
        try:
            sock = backend_socket(res)
            assert sock.getpeername()[0] == "127.0.0.1"
            assert _nodelay(sock) != 0
            # a fresh TCP socket has Nagle on (RFC 1122, 4.2.3.4), so the check above can fail
            with socket.create_connection(sock.getpeername()[:2], timeout=2.0) as plain:
                assert _nodelay(plain) == 0
            assert res.query("*IDN?") == bench.digitiser.identity()
        finally:
            res.close()

    def test_bench_opener_socket_has_nagle_off(self, bench):
        config = InstrumentConfig(resource=bench.digitiser_resource,
                                  profile=str(bench.digitiser_profile_path), timeout_s=2.0)
        link = digitiser_opener(config, SETTINGS)()
        try:
            assert _nodelay(backend_socket(link.link.resource)) != 0
        finally:
            link.link.close()


class TestDigitiser:
    def test_identify_configure_acquire(self, bench):
        dig = _digitiser(bench)
        assert dig.identity == bench.digitiser.identity()
        state = bench.digitiser.state
        assert state.points == 2000 and state.trigger_source == "EXT"
        assert state.channels[1].range_v == pytest.approx(0.1)
        raw = dig.acquire(7, trigger_timeout_s=1.0)
        assert raw.seq == 7 and raw.n == 2000 and raw.codes.dtype == np.int16
        assert raw.codes.dtype.byteorder in ("=", "|", "<")
        assert raw.dt_s == pytest.approx(4e-9)
        # Peak of the default scene is about 37 mV (simulators/bench.py BENCH_DEFAULTS note).
        assert 0.01 < np.abs(raw.volts()).max() < 0.05
        assert raw.clipped == 0 and raw.range_v == pytest.approx(0.1)
        assert abs(raw.time_s - time.time()) < 5
        dig.link.close()

    def test_codes_exactly_as_served(self, bench):
        dig = _digitiser(bench)
        raw = dig.acquire(0, trigger_timeout_s=1.0)
        served = bench.digitiser._trace[0]  # the codes the model encoded for this block
        assert np.array_equal(raw.codes, served)
        dig.link.close()

    def test_set_range_rescales_and_clips(self, bench):
        dig = _digitiser(bench)
        wide = dig.acquire(0, trigger_timeout_s=1.0)
        dig.set_range(0.02)
        assert bench.digitiser.state.channels[1].range_v == pytest.approx(0.02)
        narrow = dig.acquire(1, trigger_timeout_s=1.0)
        assert narrow.volts_per_code == pytest.approx(wide.volts_per_code * 0.2)
        assert narrow.clipped > 0 and narrow.range_v == pytest.approx(0.02)
        with pytest.raises(SettingError):
            dig.set_range(0.03)
        dig.link.close()

    def test_reset(self, bench):
        dig = _digitiser(bench)
        dig.reset()
        assert dig.settings is None
        with pytest.raises(SettingError):
            dig.acquire(0, trigger_timeout_s=0.1)
        dig.link.close()

    def test_big_endian_profile(self, bench, tmp_path):
        # The same instrument set to send MSB first, described by a profile that says so.
        text = bench.digitiser_profile_path.read_text().replace(
            'byte_order = "little"', 'byte_order = "big"')
        path = tmp_path / "sim-big.toml"
        path.write_text(text)
        session = ScpiLink.open(bench.digitiser_resource, timeout_s=2.0)
        session.write_step("WAV:BORD MSBF")
        dig = Digitiser(session, load_profile(path))
        dig.configure(SETTINGS)
        raw = dig.acquire(0, trigger_timeout_s=1.0)
        assert np.array_equal(raw.codes, bench.digitiser._trace[0])
        session.close()


    def test_setup_lines_after_connecting_and_after_reopen(self, bench, tmp_path):
        # Setup asks the simulated digitiser for MSB-first blocks and the profile reads
        # them as big-endian: codes come out as served only when the line was sent.
        text = bench.digitiser_profile_path.read_text().replace(
            "[commands]\n", '[commands]\nsetup = ["WAV:BORD MSBF"]\n', 1).replace(
            'byte_order = "little"', 'byte_order = "big"')
        path = tmp_path / "sim-setup.toml"
        path.write_text(text)
        config = InstrumentConfig(resource=bench.digitiser_resource, profile=str(path),
                                  timeout_s=2.0)
        opened = digitiser_opener(config, SETTINGS)()
        try:
            assert bench.digitiser.state.byte_order == "big"
            raw = opened.device.acquire(0, trigger_timeout_s=1.0)
            assert np.array_equal(raw.codes, bench.digitiser._trace[0])
            bench.digitiser.reset()                 # as a power cycle would
            bench.digitiser.state.byte_order = "little"
            opened.link.reopen()
            assert bench.digitiser.state.byte_order == "big"
            raw = opened.device.acquire(1, trigger_timeout_s=1.0)
            assert np.array_equal(raw.codes, bench.digitiser._trace[0])
        finally:
            opened.link.close()


    def _fixed_rate_profile(self, bench, tmp_path):
        text = "\n".join(ln for ln in bench.digitiser_profile_path.read_text().splitlines()
                         if not ln.startswith(("set_sample_rate", "query_sample_rate")))
        path = tmp_path / "sim-fixed-rate.toml"
        path.write_text(text + "\n")
        return str(path)

    def test_rate_left_to_the_instrument_is_its_own(self, bench, tmp_path):
        config = InstrumentConfig(resource=bench.digitiser_resource,
                                  profile=self._fixed_rate_profile(bench, tmp_path),
                                  timeout_s=2.0)
        bench.digitiser.state.divider = 8          # the model's clock: 1 GS/s / 8
        opened = digitiser_opener(config, SETTINGS.replace(sample_rate_hz=None))()
        try:
            raw = opened.device.acquire(0, trigger_timeout_s=1.0)
            assert raw.dt_s == pytest.approx(bench.digitiser.time_step_s, rel=1e-12)
            assert raw.state["sample_rate_hz"] == pytest.approx(
                bench.digitiser.sample_rate_hz, rel=1e-12)
        finally:
            opened.link.close()
        with pytest.raises(SettingError, match=r"1e\+08 Hz.*8e-09 s \(1\.25e\+08 Hz\)"):
            digitiser_opener(config, SETTINGS.replace(sample_rate_hz=100e6))()

    def test_rate_the_instrument_rounds_is_refused(self, bench):
        # 123 MS/s asked: the model takes the nearest divider of its 1 GS/s clock (8),
        # so its time step says 125 MS/s, 1.6 % away.
        config = InstrumentConfig(resource=bench.digitiser_resource,
                                  profile=str(bench.digitiser_profile_path), timeout_s=2.0)
        with pytest.raises(SettingError, match=r"1\.23e\+08 Hz.*8e-09 s"):
            digitiser_opener(config, SETTINGS.replace(sample_rate_hz=123e6))()
        assert bench.digitiser.sample_rate_hz == 125e6


    @pytest.mark.parametrize("kind, extra", [("span", ""), ("peak", ""),
                                             ("per_division", "divisions = 8\n")])
    def test_range_kinds_record_the_true_span(self, bench, tmp_path, kind, extra):
        bench.digitiser.range_kind = kind
        bench.digitiser.range_divisions = 8
        text = bench.digitiser_profile_path.read_text().replace(
            "[ranges]\n", f'[ranges]\nkind = "{kind}"\n{extra}', 1)
        path = tmp_path / f"sim-{kind}.toml"
        path.write_text(text)
        session = ScpiLink.open(bench.digitiser_resource, timeout_s=2.0)
        dig = Digitiser(session, load_profile(path))
        dig.configure(SETTINGS)                      # asks for a 0.1 V span
        raw = dig.acquire(0, trigger_timeout_s=1.0)
        # The model's own full scale, span p-p; the share of it in use computed here
        # from the volts the model quantised (its last_codes and state), not the driver's.
        real_span = bench.digitiser.state.channels[1].range_v
        assert real_span == pytest.approx(0.1)
        assert raw.range_v == pytest.approx(real_span, rel=0.01)
        assert raw.full_scale_v == pytest.approx(real_span, rel=0.01)
        served = bench.digitiser.last_codes.astype(float) * real_span / 65536
        share = np.abs(served).max() / (real_span / 2)
        assert 0.2 < share < 1.0                   # the scene's ~37 mV pulse on 0.1 V
        assert raw.fraction_of_full_scale() == pytest.approx(share, rel=0.01)
        assert dig.take_warnings() == []
        session.close()

    def test_range_kind_not_the_instruments_is_warned_once(self, bench):
        # The instrument takes peak volts; the profile says span: 0.1 sent sets a 0.2 V
        # span. The read-back says 0.1 again, so only the scaling can tell.
        bench.digitiser.range_kind = "peak"
        dig = _digitiser(bench)
        assert bench.digitiser.state.channels[1].range_v == pytest.approx(0.2)
        raw = dig.acquire(0, trigger_timeout_s=1.0)
        assert raw.full_scale_v == pytest.approx(0.2, rel=0.01)   # the true one
        warnings = dig.take_warnings()
        assert len(warnings) == 1 and "0.1 V" in warnings[0] and "0.2 V" in warnings[0]
        dig.acquire(1, trigger_timeout_s=1.0)
        dig.set_range(0.1)
        dig.acquire(2, trigger_timeout_s=1.0)
        assert dig.take_warnings() == []
        dig.link.close()


class TestSenseFetchDialect:
    """The example profile for the invented SENSe:/FETCh: dialect, against the model
    speaking it: setup lines, +/- peak ranges, a read-only time step, swapped blocks."""

    def test_example_profile_drives_the_model(self, bench):
        bench.digitiser.range_kind = "peak"
        bench.digitiser.state.byte_order = "big"         # until the setup line swaps it
        bench.digitiser.state.divider = 2               # 500 MS/s, the model's own
        config = InstrumentConfig(resource=bench.digitiser_resource,
                                  profile="example-sense-fetch-digitiser", timeout_s=2.0)
        settings = DigitiserSettings(record_length=2000, range_v=0.1, trigger_source="EXT")
        opened = digitiser_opener(config, settings)()
        try:
            model = bench.digitiser.state
            assert model.byte_order == "little" and model.points == 2000
            assert model.channels[1].range_v == pytest.approx(0.1)   # 0.05 V peak sent
            raw = opened.device.acquire(0, trigger_timeout_s=1.0)
            assert np.array_equal(raw.codes, bench.digitiser.last_codes)
            assert raw.dt_s == pytest.approx(2e-9) and raw.state["sample_rate_hz"] == \
                pytest.approx(5e8)
            assert raw.range_v == pytest.approx(0.1) and raw.full_scale_v == pytest.approx(0.1)
            assert raw.t0_s == pytest.approx(model.trigger_delay_s)
            assert raw.state["coupling"] is None and raw.state["averages"] is None
            assert opened.device.take_warnings() == []
        finally:
            opened.link.close()

    def test_probe_reads_the_example_profile(self, bench, capsys):
        from tankside.monitor.cli import main

        bench.digitiser.range_kind = "peak"
        code = main(["probe", bench.digitiser_resource, "--profile",
                     "example-sense-fetch-digitiser", "--acquire", "--timeout", "1"])
        out = capsys.readouterr().out
        assert code == 0, out
        assert "fixed by the instrument: 2.5e+08 Hz (time step 4e-09 s)" in out
        assert "setup line 2" in out and "FORM:BORD SWAP" in out
        assert bench.digitiser.state.byte_order == "little"


class TestGenerator:
    def test_every_operation(self, bench):
        gen = _generator(bench)
        assert gen.identity == bench.generator.identity()
        gen.set_amplitude(3.0)
        assert gen.amplitude() == pytest.approx(3.0)
        gen.set_frequency(2.0e6)
        gen.set_burst(4, 0.02)
        drive = bench.scene.drive
        assert (drive.amplitude_vpp, drive.frequency_hz, drive.burst_cycles,
                drive.burst_period_s) == pytest.approx((3.0, 2.0e6, 4, 0.02))
        gen.set_output(False)
        assert not gen.output_is_on() and not bench.scene.drive.output_on
        gen.set_output(True)
        assert gen.output_is_on()
        gen.reset()
        gen.link.close()

    def test_out_of_range_amplitude_is_reported(self, bench):
        gen = _generator(bench)
        with pytest.raises(InstrumentReportedError) as info:
            gen.set_amplitude(1000.0)
        assert info.value.code == -222  # SCPI-1999 Vol. 2, 21.8: data out of range
        gen.link.close()


class TestFaults:
    def test_dropped_connection_then_reopen_reapplies_settings(self, bench):
        dig = _digitiser(bench, timeout_s=0.5)
        bench.faults.drop_connection()
        with pytest.raises(ConnectionLost):
            dig.acquire(0, trigger_timeout_s=1.0)
        bench.digitiser.state.points = 123  # forget, as a power-cycled instrument would
        assert dig.recover() == "reopen"
        assert bench.digitiser.state.points == 2000
        assert dig.acquire(1, trigger_timeout_s=1.0).n == 2000
        dig.link.close()

    def test_stall_then_resync(self, bench):
        dig = _digitiser(bench, timeout_s=0.3)
        bench.faults.stall_next_reply(0.8)
        assert _seconds_to_fail(dig, InstrumentTimeout) < 1.0
        assert dig.link.needs_resync
        raw = dig.acquire(1, trigger_timeout_s=1.0)  # resynchronises first
        assert raw.n == 2000 and dig.link.counts["resyncs"] == 1
        assert np.array_equal(raw.codes, bench.digitiser._trace[0])
        dig.link.close()

    @pytest.mark.parametrize("kind", ["bad-digit", "bad-length"])
    def test_malformed_block(self, bench, kind):
        dig = _digitiser(bench)
        bench.faults.malformed_next_block(kind)
        with pytest.raises(ProtocolError):
            dig.acquire(0, trigger_timeout_s=1.0)
        assert dig.acquire(1, trigger_timeout_s=1.0).n == 2000
        dig.link.close()

    def test_short_block_times_out_within_timeout(self, bench):
        dig = _digitiser(bench, timeout_s=0.3)
        bench.faults.short_next_block(100)
        assert _seconds_to_fail(dig, InstrumentTimeout) < 1.5
        assert dig.acquire(1, trigger_timeout_s=1.0).n == 2000
        dig.link.close()

    def test_short_block_then_close(self, bench):
        dig = _digitiser(bench, timeout_s=0.3)
        bench.faults.short_next_block(close=True)
        with pytest.raises(ConnectionLost):
            dig.acquire(0, trigger_timeout_s=1.0)
        assert dig.recover() == "reopen"
        assert dig.acquire(1, trigger_timeout_s=1.0).n == 2000
        dig.link.close()

    def test_missed_triggers(self, bench):
        dig = _digitiser(bench)
        bench.faults.miss_triggers(100)  # 100 periods of 5 ms = 0.5 s
        assert 0.2 <= _seconds_to_fail(dig, NoTrigger, trigger_timeout_s=0.2) < 1.0
        dig.link.close()

    def test_error_for_a_command_raise(self, bench):
        bench.faults.report_error("ACQ:POIN", -222)
        session = ScpiLink.open(bench.digitiser_resource, timeout_s=2.0)
        dig = Digitiser(session, load_profile(bench.digitiser_profile_path))
        with pytest.raises(InstrumentReportedError) as info:
            dig.configure(SETTINGS)
        assert info.value.code == -222 and info.value.command == "ACQ:POIN 2000"
        session.close()

    def test_error_for_a_command_record(self, bench):
        bench.faults.report_error("TRIG:SOUR", -224, execute=True)
        dig = _digitiser(bench, error_policy="record")
        assert [(e.code, e.command) for e in dig.link.recorded_errors] == [
            (-224, "TRIG:SOUR EXT")]
        dig.link.close()

    def test_error_for_a_query_times_out_and_recovers(self, bench):
        # An unexecuted query gets no reply: a timeout, then the error in the queue.
        dig = _digitiser(bench, timeout_s=0.3)
        bench.faults.report_error("WAV:DATA?", -230)
        with pytest.raises(InstrumentTimeout):
            dig.acquire(0, trigger_timeout_s=1.0)
        assert [code for code, _ in dig.link.drain_errors()] == [-230]
        assert dig.acquire(1, trigger_timeout_s=1.0).n == 2000
        dig.link.close()
