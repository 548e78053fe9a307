"""The example profiles beside the template, each against the simulated digitiser speaking
its dialect over TCP on 127.0.0.1 (pyvisa-py).

The simulator's dialects (simulators/dialects.py) are written apart from the profiles, so
a wrong word, byte order or range kind in a profile shows here as an error or a wrong
value. Values are checked against the device model's state and its scene, not against
numbers taken from the driver.
"""

import os
import signal
import subprocess
import sys
import tomllib

import numpy as np
import pytest

from tankside.drivers.digitiser import Digitiser, DigitiserSettings
from tankside.drivers.errors import InstrumentReportedError, ProfileError, SettingError
from tankside.drivers.profile import (
    KINDS,
    PROFILE_DIR,
    builtin_profiles,
    load_profile,
    parse_profile,
)
from tankside.drivers.scpi import ScpiLink
from tankside.monitor.commands.simulate import DIALECT_PROFILES
from tankside.monitor.live.benchfile import InstrumentConfig, load_bench
from tankside.monitor.live.instruments import digitiser_opener
from tankside.simulators.bench import SimulatedBench
from tankside.simulators.dialects import DIALECTS
from tankside.simulators.digitiser import SimulatedDigitiser
from tankside.simulators.scene import Drive, Scene

TEMPLATE = "generic-scpi-digitiser"
SENSE_FETCH = "example-sense-fetch-digitiser"
CHANNEL_WAVEFORM = "example-channel-waveform-digitiser"

SETTINGS = DigitiserSettings(record_length=2000, sample_rate_hz=250e6, range_v=0.1,
                             trigger_source="EXT", trigger_level_v=1.0)


# ---------------------------------------------------------------- loading


@pytest.mark.parametrize("name", builtin_profiles())
def test_every_shipped_profile_loads(name):
    profile = load_profile(name)
    assert profile.kind in KINDS
    assert profile.source == str(PROFILE_DIR / f"{name}.toml")


def test_the_template_and_both_examples_are_shipped():
    assert {TEMPLATE, SENSE_FETCH, CHANNEL_WAVEFORM} <= set(builtin_profiles())


def test_the_two_examples_are_two_different_dialects():
    first, second = load_profile(SENSE_FETCH), load_profile(CHANNEL_WAVEFORM)
    # what each file's header comment promises, read through the loader
    assert (first.data_format, first.byte_order, first.range_kind) == ("int16", "little", "peak")
    assert not first.has("set_sample_rate")
    assert (second.data_format, second.byte_order) == ("float32", "big")
    assert (second.range_kind, second.range_divisions) == ("per_division", 8)
    assert second.has("set_sample_rate") and len(second.setup) == 2
    # a 0.1 V span is sent as 0.0125 V per division and read back as a span again
    assert second.instrument_range(0.1) == pytest.approx(0.0125)
    assert second.span_of(0.0125) == pytest.approx(0.1)
    shared = {second.commands[k] for k in second.commands} & {
        first.commands[k] for k in first.commands}
    assert shared <= {"*IDN?", "*RST", "SYST:ERR?"}       # generic IEEE 488.2 / SCPI only


def test_a_broken_copy_of_the_second_example_is_refused_by_key():
    text = (PROFILE_DIR / f"{CHANNEL_WAVEFORM}.toml").read_text()
    with pytest.raises(ProfileError, match=r"my-scope\.toml: \[ranges\] divisions"):
        parse_profile(text.replace("divisions = 8", "divisions = 0"), source="my-scope.toml")


# ---------------------------------------------------------------- the model's dialects


def _model(dialect):
    return SimulatedDigitiser(Scene(), clock=lambda: 0.0, sleep=lambda s: True,
                              dialect=dialect)


def _ask(model, line):
    reply = model.handle(line)
    return None if reply is None else reply.decode("ascii").strip()


@pytest.mark.parametrize("dialect, own, foreign", [
    ("simdig", "ACQ:POIN 100", "CAPT:LENG 100"),
    ("sense-fetch", "SENS:SWE:POIN 100", "ACQ:POIN 100"),
    ("channel-waveform", "CAPT:LENG 100", "ACQ:POIN 100"),
])
def test_each_dialect_answers_its_own_words_only(dialect, own, foreign):
    model = _model(dialect)
    assert _ask(model, own) is None and model.state.points == 100
    assert _ask(model, "SYST:ERR?") == '0,"No error"'
    _ask(model, foreign.replace("100", "200"))
    assert model.state.points == 100
    # SCPI 1999.0 vol. 2, 21.8.9: -113 undefined header
    assert _ask(model, "SYST:ERR?").startswith("-113,")


def test_an_unknown_dialect_is_refused_with_the_known_ones():
    with pytest.raises(ValueError, match="simdig, sense-fetch, channel-waveform"):
        _model("oscilloscope")


def test_simulate_offers_every_dialect_of_the_simulator():
    assert set(DIALECT_PROFILES) == set(DIALECTS)
    for name, path in DIALECT_PROFILES.items():
        if path is not None:
            assert load_profile(path).kind == "digitiser", name


# ---------------------------------------------------------------- over TCP


@pytest.fixture
def bench():
    # No noise and no jitter: the trace is the scene's voltage, quantised.
    with SimulatedBench(seed=3, trigger_period_s=0.005, drive=Drive(),
                        dialect="channel-waveform", noise_v_rms=0.0, jitter_s=0.0) as b:
        yield b


def _config(bench, profile=CHANNEL_WAVEFORM):
    return InstrumentConfig(resource=bench.digitiser_resource, profile=profile, timeout_s=2.0)


def _driver(bench, settings=SETTINGS):
    link = ScpiLink.open(bench.digitiser_resource, timeout_s=2.0)
    dig = Digitiser(link, load_profile(CHANNEL_WAVEFORM))
    dig.send_setup()
    dig.configure(settings)
    return dig


class TestChannelWaveformDialect:
    """The second example profile against the model speaking the channel-waveform dialect:
    setup lines, a settable rate, volts-per-division ranges, float32 blocks MSB first."""

    def test_open_identifies_sends_setup_and_configures(self, bench):
        model = bench.digitiser.state
        assert (model.data_format, model.byte_order) == ("int16", "little")   # power-on
        opened = digitiser_opener(_config(bench), SETTINGS)()
        try:
            assert opened.identity == bench.digitiser.identity() == "TANKSIDE,SIMDIG-2CW,0001,1.0"
            assert (model.data_format, model.byte_order) == ("grid", "big")  # the setup lines
            assert model.points == 2000 and model.trigger_source == "EXT"
            assert model.trigger_level_v == pytest.approx(1.0)
            # no coupling, slope or averages words in this dialect: not sent, not recorded
            assert opened.device.skipped == ("coupling", "trigger_slope", "averages")
            assert opened.device.take_warnings() == []
        finally:
            opened.link.close()

    def test_rate_is_set_and_read_back(self, bench):
        dig = _driver(bench, SETTINGS.replace(sample_rate_hz=125e6))
        try:
            assert bench.digitiser.sample_rate_hz == 125e6       # 1 GS/s / 8 in the model
            assert float(dig.read_settings()["sample_rate_hz"]) == 125e6
            raw = dig.acquire(0, trigger_timeout_s=1.0)
            assert raw.dt_s == pytest.approx(8e-9, rel=1e-12)
            assert raw.state["sample_rate_hz"] == pytest.approx(125e6, rel=1e-12)
        finally:
            dig.link.close()

    @pytest.mark.parametrize("rate_hz, error, words", [
        # SCPI 1999.0 vol. 2, 21.8: -222 data out of range (the model takes 1 MS/s..1 GS/s)
        (5e9, InstrumentReportedError, "-222"),
        # 123 MS/s: the model takes the nearest divider of its clock (8, 125 MS/s), 1.6 %
        # from the rate asked, so the time step read back refuses it
        (123e6, SettingError, r"1\.23e\+08 Hz.*8e-09 s"),
    ])
    def test_a_bad_rate_is_refused(self, bench, rate_hz, error, words):
        with pytest.raises(error, match=words):
            digitiser_opener(_config(bench), SETTINGS.replace(sample_rate_hz=rate_hz))()

    def test_range_is_set_in_volts_per_division_and_read_back_as_a_span(self, bench):
        dig = _driver(bench)
        try:
            channel = bench.digitiser.state.channels[1]
            assert channel.range_v == pytest.approx(0.1)
            # the instrument's own word on the wire: 0.1 V over 8 divisions
            assert float(dig.link.query("PORT1:GRID?")) == pytest.approx(0.0125)
            assert dig.settings is not None and dig.settings.range_v == pytest.approx(0.1)
            dig.set_range(0.5)
            assert channel.range_v == pytest.approx(0.5)
            assert float(dig.link.query("PORT1:GRID?")) == pytest.approx(0.0625)
            raw = dig.acquire(0, trigger_timeout_s=1.0)
            assert raw.range_v == pytest.approx(0.5) and raw.full_scale_v == pytest.approx(0.5)
            assert raw.volts_per_code == pytest.approx(0.0625)     # one sample unit, a division
        finally:
            dig.link.close()

    def test_trace_volts_match_the_scene_within_the_quantisation_step(self, bench):
        dig = _driver(bench)
        try:
            raw = dig.acquire(0, trigger_timeout_s=1.0)
            model, scene = bench.digitiser, bench.scene
            st = model.state
            times = st.trigger_delay_s + model.time_step_s * np.arange(st.points)
            expected = (scene.hydrophone.load_factor(st.channels[1].impedance_ohm)
                        * scene.hydrophone_voltage_v(times))
            step_v = st.channels[1].range_v / 4096        # the model's 12-bit converter
            assert raw.codes.dtype == np.float32 and raw.n == st.points
            assert np.allclose(raw.times(), times, rtol=0, atol=1e-15)
            assert np.abs(expected).max() > 1000 * step_v             # a pulse, not zeros
            assert np.abs(raw.volts() - expected).max() <= step_v / 2 * (1 + 1e-6)
            assert raw.clipped == 0
            # the block on the wire is big-endian float32 (numpy's '>f4' reads it as sent)
            payload = dig.link.query_block("PORT1:WAVE?")
            assert np.array_equal(np.frombuffer(payload, ">f4"), model.last_codes)
            assert np.array_equal(raw.codes, model.last_codes)
        finally:
            dig.link.close()

    def test_clipping_is_counted_at_the_profiles_rails(self, bench):
        # the scene's ~37 mV pulse on a 0.05 V span (+/- 25 mV) reaches both rails
        dig = _driver(bench, SETTINGS.replace(range_v=0.05))
        try:
            raw = dig.acquire(0, trigger_timeout_s=1.0)
            served = bench.digitiser.last_codes
            low, high = int(np.sum(served == -4.0)), int(np.sum(served == 2047 / 512))
            assert low > 0 and high > 0
            assert (raw.clipped_low, raw.clipped_high) == (low, high)
            assert raw.fraction_of_full_scale() == pytest.approx(1.0, abs=1 / 4096)
        finally:
            dig.link.close()

    def test_without_the_setup_lines_the_blocks_are_not_what_data_says(self, bench, tmp_path):
        # the setup lines make [data] true: without them the model sends 2000 int16 codes
        # (4000 bytes), which read as float32 are 1000 samples of nonsense
        text = (PROFILE_DIR / f"{CHANNEL_WAVEFORM}.toml").read_text()
        path = tmp_path / "no-setup.toml"
        path.write_text(text.replace('setup = ["WAVE:KIND GRID", "WAVE:ORDER HIGH"]\n', ""))
        link = ScpiLink.open(bench.digitiser_resource, timeout_s=2.0)
        try:
            dig = Digitiser(link, load_profile(path))
            dig.send_setup()
            dig.configure(SETTINGS)
            raw = dig.acquire(0, trigger_timeout_s=1.0)
            assert bench.digitiser.state.data_format == "int16"
            assert raw.n == SETTINGS.record_length // 2
        finally:
            link.close()

    def test_probe_reads_the_second_example(self, bench, capsys):
        from tankside.monitor.cli import main

        code = main(["probe", bench.digitiser_resource, "--profile", CHANNEL_WAVEFORM,
                     "--acquire", "--timeout", "1"])
        out = capsys.readouterr().out
        assert code == 0, out
        assert "setup line 2" in out and "WAVE:ORDER HIGH" in out
        assert "fetch_waveform" in out and "(float32)" in out
        assert bench.digitiser.state.byte_order == "big"


def test_first_example_drives_the_model_speaking_only_its_dialect():
    # the sense-fetch dialect alone: its ranges are +/- peak by the dialect's own table,
    # and no word of the model's own dialect is there to lean on
    with SimulatedBench(seed=3, trigger_period_s=0.005, drive=Drive(),
                        dialect="sense-fetch") as bench:
        assert bench.digitiser.range_kind == "peak"
        settings = DigitiserSettings(record_length=2000, range_v=0.1, trigger_source="EXT")
        opened = digitiser_opener(_config(bench, SENSE_FETCH), settings)()
        try:
            model = bench.digitiser.state
            assert model.byte_order == "little" and model.points == 2000
            assert model.channels[1].range_v == pytest.approx(0.1)   # 0.05 V peak sent
            raw = opened.device.acquire(0, trigger_timeout_s=1.0)
            assert np.array_equal(raw.codes, bench.digitiser.last_codes)
            assert raw.range_v == pytest.approx(0.1) and raw.full_scale_v == pytest.approx(0.1)
            assert raw.dt_s == pytest.approx(bench.digitiser.time_step_s, rel=1e-12)
            assert opened.device.take_warnings() == []
        finally:
            opened.link.close()


def test_simulate_dialect_option_serves_and_names_the_second_example(tmp_path):
    path = tmp_path / "bench.toml"
    env = dict(os.environ, PYTHONUNBUFFERED="1")
    proc = subprocess.Popen([sys.executable, "-m", "tankside.monitor.cli", "simulate",
                             "--dialect", "channel-waveform", "--bench-file", str(path)],
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=env)
    try:
        lines: list[str] = []
        while not any("running" in ln for ln in lines):
            line = proc.stdout.readline()
            assert line, proc.stderr.read()
            lines.append(line)
        table = tomllib.loads(path.read_text())["digitiser"]
        assert table["profile"] == str(PROFILE_DIR / f"{CHANNEL_WAVEFORM}.toml")
        config = load_bench(path)
        opened = digitiser_opener(config.digitiser, config.digitiser_settings())()
        try:
            assert opened.identity.startswith("TANKSIDE,SIMDIG-2CW,")
            raw = opened.device.acquire(0, trigger_timeout_s=2.0)
            assert raw.data_format == "float32" and raw.n == table["record_length"]
            assert raw.range_v == pytest.approx(table["range_v"])
        finally:
            opened.link.close()
        proc.send_signal(signal.SIGTERM)
        _, err = proc.communicate(timeout=10)
    finally:
        if proc.poll() is None:
            proc.kill()
    assert proc.returncode == 0 and "Traceback" not in err
