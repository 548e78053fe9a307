"""The simulated digitiser and generator as pure device models (no sockets, fake clock)."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from tankside.simulators.digitiser import RANGES_V, SimulatedDigitiser, quantise
from tankside.simulators.generator import SimulatedGenerator
from tankside.simulators.scene import Drive, Scene


class FakeClock:
    def __init__(self, t=100.0):
        self.t = t

    def __call__(self):
        return self.t

    def sleep(self, s):
        self.t += s
        return False


def ask(dev, line):
    reply = dev.handle(line)
    return None if reply is None else reply.rstrip(b"\n").decode("latin-1")


def errors(dev):
    out = []
    while (entry := ask(dev, "SYST:ERR?")) != '0,"No error"':
        out.append(int(entry.split(",")[0]))
    return out


def parse_block(reply: bytes) -> bytes:
    assert reply[:1] == b"#"
    n = int(reply[1:2])
    length = int(reply[2:2 + n])
    assert reply[2 + n + length:] == b"\n"
    return reply[2 + n:2 + n + length]


def make(period=0.05, **kw):
    clock = FakeClock()
    scene = Scene(drive=Drive(burst_period_s=period))
    dig = SimulatedDigitiser(scene, seed=1, clock=clock, sleep=clock.sleep, **kw)
    return clock, scene, dig


def fetch(dig, dtype="<i2"):
    return np.frombuffer(parse_block(dig.handle("WAV:DATA? CHAN1")), dtype)


def acquire(clock, dig, dtype="<i2"):
    ask(dig, "INIT")
    assert ask(dig, "*OPC?") == "1"
    assert ask(dig, "ACQ:DONE?") == "1"
    return fetch(dig, dtype)


class TestQuantise:
    def test_int16_codes_and_scale(self):
        codes, scale, offset = quantise(np.array([0.0, 0.1, -0.1, 1e-6]), 0.5, 0.0)
        assert scale == 0.5 / 65536 and offset == 0.0
        np.testing.assert_array_equal(codes, [0, round(0.1 / scale), -round(0.1 / scale), 0])
        assert codes.dtype == np.int16

    def test_clips_at_the_rails(self):
        codes, _, _ = quantise(np.array([10.0, -10.0, 0.25, -0.25]), 0.5, 0.0)
        np.testing.assert_array_equal(codes, [32767, -32768, 32767, -32768])
        codes8, scale8, _ = quantise(np.array([1.0, -1.0]), 0.5, 0.0, "int8")
        np.testing.assert_array_equal(codes8, [127, -128])
        assert scale8 == 0.5 / 256
        f32, s, o = quantise(np.array([1.0, 0.1]), 0.5, 0.1, "float32")
        np.testing.assert_allclose(f32, [0.35, 0.1], rtol=1e-6)
        assert (s, o) == (1.0, 0.0)

    def test_offset_and_error_bound(self):
        rng = np.random.default_rng(0)
        v = rng.uniform(-0.24, 0.24, 5000) + 0.01
        codes, scale, offset = quantise(v, 0.5, 0.01)
        # Rounding quantiser: |error| <= half a step (common practice).
        assert np.max(np.abs(codes * scale + offset - v)) <= scale / 2 + 1e-15


class TestDigitiserSettings:
    def test_identity_and_defaults(self):
        _, _, dig = make()
        assert ask(dig, "*IDN?").startswith("TANKSIDE,SIMDIG-2")
        assert ask(dig, "ACQ:POIN?;SRAT?") == "10000;250000000.0"
        assert ask(dig, "WAV:XINC?") == "4e-09"

    def test_sample_rate_is_a_divided_clock(self):
        _, _, dig = make()
        ask(dig, "ACQ:SRAT 3e8")
        assert float(ask(dig, "ACQ:SRAT?")) == pytest.approx(1e9 / 3)
        ask(dig, "ACQ:SRAT 2e9")
        assert errors(dig) == [-222]

    def test_range_rounds_up_and_scaling_follows(self):
        _, _, dig = make()
        ask(dig, "CHAN1:RANG 0.3;OFFS 0.05")
        assert float(ask(dig, "CHAN1:RANG?")) == 0.5
        assert float(ask(dig, "WAV:YINC?")) == 0.5 / 65536
        assert float(ask(dig, "WAV:YOFF?")) == 0.05
        for r in RANGES_V:
            ask(dig, f"CHAN1:RANG {r}")
            assert float(ask(dig, "CHAN1:RANG?")) == r
        ask(dig, "CHAN1:RANG 10")
        ask(dig, "CHAN1:OFFS 3")
        assert errors(dig) == [-222, -222]

    def test_channel_settings_and_bad_values(self):
        _, _, dig = make()
        ask(dig, "CHAN2:COUP AC;IMP 50")
        assert ask(dig, "CHAN2:COUP?;IMP?") == "AC;50.0"
        assert ask(dig, "CHAN1:COUP?") == "DC"
        ask(dig, "CHAN1:IMP 75")
        ask(dig, "CHAN3:RANG 1")
        ask(dig, "TRIG:SOUR CHAN5")
        assert errors(dig) == [-224, -113, -224]

    def test_trigger_settings(self):
        _, _, dig = make()
        ask(dig, "TRIG:SOUR external;LEV 0.8;SLOP NEG")
        assert ask(dig, "TRIG:SOUR?;LEV?;SLOP?") == "EXT;0.8;NEG"
        ask(dig, "TRIG:LEV 6")
        assert errors(dig) == [-222]

    def test_rst_restores_defaults(self):
        _, _, dig = make()
        ask(dig, "ACQ:POIN 500;:CHAN1:RANG 2")
        ask(dig, "*RST")
        assert ask(dig, "ACQ:POIN?;:CHAN1:RANG?") == "10000;0.5"


class TestAcquisition:
    def test_done_waits_for_the_next_trigger(self):
        clock, _, dig = make(period=0.05)
        ask(dig, "INIT")
        assert ask(dig, "ACQ:DONE?") == "0"
        clock.t += 0.051
        assert ask(dig, "ACQ:DONE?") == "1"

    def test_averages_take_that_many_triggers(self):
        clock, _, dig = make(period=0.05)
        ask(dig, "ACQ:AVER 4;:INIT")
        clock.t += 0.051 + 2 * 0.05
        assert ask(dig, "ACQ:DONE?") == "0"
        clock.t += 0.05
        assert ask(dig, "ACQ:DONE?") == "1"

    def test_missed_triggers_leave_done_at_zero(self):
        missed = iter([3, 0])
        clock = FakeClock()
        dig = SimulatedDigitiser(Scene(), clock=clock, sleep=clock.sleep,
                                 missed_triggers=lambda: next(missed))
        ask(dig, "INIT")
        clock.t += 0.051 + 2 * 0.05
        assert ask(dig, "ACQ:DONE?") == "0"
        clock.t += 0.05
        assert ask(dig, "ACQ:DONE?") == "1"

    def test_rearming_does_not_end_a_stretch_of_missed_triggers(self):
        # A client that gives up waiting and arms again must still see no trigger until
        # the missed stretch is over (so "no trigger for N s" can be observed live).
        missed = iter([10, 0, 0])
        clock = FakeClock()
        dig = SimulatedDigitiser(Scene(), clock=clock, sleep=clock.sleep,
                                 missed_triggers=lambda: next(missed))
        ask(dig, "INIT")
        clock.t += 0.2
        assert ask(dig, "ACQ:DONE?") == "0"
        ask(dig, "ABOR;:INIT")          # re-arm 0.2 s into a 0.55 s stretch
        clock.t += 0.3
        assert ask(dig, "ACQ:DONE?") == "0"
        clock.t += 0.1                  # past the 11th trigger period
        assert ask(dig, "ACQ:DONE?") == "1"

    def test_trigger_level_above_sync_never_triggers(self):
        clock, _, dig = make()
        ask(dig, "TRIG:LEV 4.0;:INIT")
        clock.t += 10
        assert ask(dig, "ACQ:DONE?") == "0"
        ask(dig, "WAV:DATA?")
        assert errors(dig) == [-230]

    def test_opc_query_gives_no_reply_when_the_trigger_never_comes(self):
        clock, _, dig = make()
        ask(dig, "TRIG:LEV 4.0;:INIT")
        t = clock.t
        assert dig.handle("*OPC?") is None
        assert clock.t - t >= 600.0   # gave up after MAX_WAIT_S of (fake) waiting
        ask(dig, "ABORt")
        assert ask(dig, "*OPC?") == "1"

    def test_immediate_trigger_and_fetch_before_arm(self):
        _, _, dig = make()
        assert dig.handle("WAV:DATA?") is None
        assert errors(dig) == [-230]
        ask(dig, "TRIG:SOUR IMM;:INIT")
        assert ask(dig, "ACQ:DONE?") == "1"

    def test_free_running_records_rarely_hold_the_pulse(self):
        clock, _, dig = make(period=0.05)
        ask(dig, "TRIG:SOUR IMM;:CHAN1:RANG 0.1")
        peaks = [np.abs(acquire(clock, dig)).max() * float(ask(dig, "WAV:YINC?"))
                 for _ in range(20)]
        # A 40 us record at a random moment of a 50 ms cycle: noise only, nearly always.
        assert sum(p > 5e-3 for p in peaks) <= 1

    def test_pulse_is_where_the_scene_puts_it(self):
        clock, scene, dig = make()
        ask(dig, "CHAN1:RANG 0.1")
        codes = acquire(clock, dig)
        np.testing.assert_array_equal(codes, dig.last_codes)
        scale = float(ask(dig, "WAV:YINC?"))
        t0 = float(ask(dig, "WAV:XOR?"))
        dt = float(ask(dig, "WAV:XINC?"))
        assert codes.size == 10000
        peak_t = t0 + dt * np.argmax(np.abs(codes))
        burst = scene.drive.burst_cycles / scene.drive.frequency_hz
        assert scene.arrival_time_s() < peak_t < scene.arrival_time_s() + burst + 0.3e-6
        assert 0.02 < np.abs(codes).max() * scale < 0.05   # about 37 mV at the default drive

    def test_output_off_gives_noise_only(self):
        clock, scene, dig = make(noise_v_rms=0.3e-3)
        ask(dig, "CHAN1:RANG 0.02")
        scene.set_drive(output_on=False)
        v = acquire(clock, dig) * float(ask(dig, "WAV:YINC?"))
        assert v.std() == pytest.approx(0.3e-3, rel=0.05)
        assert abs(v.mean()) < 3 * 0.3e-3 / np.sqrt(v.size) + 0.02 / 65536
        # Gaussian noise: nothing beyond 6 sigma in 10^4 samples (common practice).
        assert np.abs(v).max() < 6 * 0.3e-3

    def test_fifty_ohm_input_halves_the_hydrophone_signal(self):
        # A 50 ohm source into a 50 ohm load gives half the open-circuit voltage; into
        # 1 MOhm almost all of it (voltage divider, common practice).
        peaks = {}
        for imp in ("1e6", "50"):
            clock, _, dig = make(noise_v_rms=0.0, jitter_s=0.0)
            ask(dig, f"CHAN1:RANG 0.1;IMP {imp}")
            peaks[imp] = np.abs(acquire(clock, dig)).max()
        assert peaks["50"] / peaks["1e6"] == pytest.approx(0.5 * (1e6 + 50) / 1e6, abs=2e-4)

    def test_small_range_clips_at_the_rails(self):
        clock, scene, dig = make()
        scene.set_drive(amplitude_vpp=10.0)
        ask(dig, "CHAN1:RANG 0.02")
        codes = acquire(clock, dig)
        assert np.count_nonzero(codes == 32767) > 10
        assert np.count_nonzero(codes == -32768) > 10
        assert codes.max() == 32767 and codes.min() == -32768

    def test_formats_and_byte_order(self):
        clock, _, dig = make()
        ask(dig, "ACQ:POIN 1000;:WAV:BORD MSBF")
        big = acquire(clock, dig, ">i2")
        ask(dig, "WAV:BORD LSBF")
        little = fetch(dig, "<i2")
        np.testing.assert_array_equal(big, little)  # the same trace, two byte orders
        ask(dig, "WAV:FORM INT8")
        assert ask(dig, "WAV:CMIN?;CMAX?") == "-128;127"
        assert acquire(clock, dig, "i1").size == 1000
        ask(dig, "WAV:FORM FLOAT32")
        v = acquire(clock, dig, "<f4")
        assert np.abs(v).max() <= 0.25 + 1e-7

    def test_averaging_reduces_noise(self):
        clock, scene, dig = make(noise_v_rms=1e-3)
        scene.set_drive(output_on=False)
        ask(dig, "CHAN1:RANG 0.02;:ACQ:AVER 16")
        v = acquire(clock, dig) * float(ask(dig, "WAV:YINC?"))
        assert v.std() == pytest.approx(1e-3 / 4, rel=0.1)

    def test_same_seed_same_trace(self):
        traces = []
        for _ in range(2):
            clock, _, dig = make()
            traces.append(acquire(clock, dig))
        np.testing.assert_array_equal(traces[0], traces[1])

    def test_precomputed_true_means_eight_traces(self):
        _, _, dig = make(precomputed=True)
        ask(dig, "ACQ:POIN 100;:INIT")
        blocks = [dig.handle("WAV:DATA?") for _ in range(9)]
        assert blocks[0] == blocks[8] and len(set(blocks)) == 8

    def test_precomputed_cycles_through_fixed_traces(self):
        clock, _, dig = make(precomputed=3)
        ask(dig, "ACQ:POIN 2000;:INIT")
        assert ask(dig, "ACQ:DONE?") == "1"
        blocks, served = [], []
        for _ in range(6):
            blocks.append(dig.handle("WAV:DATA?"))
            served.append(dig.last_codes)
        assert blocks[0] == blocks[3] and blocks[1] == blocks[4]
        assert blocks[0] != blocks[1]
        np.testing.assert_array_equal(np.frombuffer(parse_block(blocks[2]), "<i2"), served[2])


class TestGenerator:
    def make(self):
        scene = Scene(drive=Drive(output_on=True))
        return scene, SimulatedGenerator(scene)

    def test_settings_reach_the_scene(self):
        scene, gen = self.make()
        assert ask(gen, "*IDN?").startswith("TANKSIDE,SIMGEN-1")
        ask(gen, "OUTP OFF;:VOLT 4.5;:FREQ 2.5e6;:BURS:NCYC 5;PER 0.01")
        assert scene.drive == Drive(False, 4.5, 2.5e6, 5, 0.01)
        assert ask(gen, "OUTP?;:VOLT?;:FREQ?;:BURS:NCYC?;PER?") == "0;4.5;2500000.0;5;0.01"
        ask(gen, "SOURce:VOLTage:AMPLitude 1.5;:OUTPut:STATe ON")
        assert scene.drive.amplitude_vpp == 1.5 and scene.drive.output_on

    @pytest.mark.parametrize("line", ["VOLT 10.5", "VOLT 0.001", "FREQ 30e6", "BURS:NCYC 0",
                                      "BURS:PER 1e-5"])
    def test_out_of_range_is_222_and_changes_nothing(self, line):
        scene, gen = self.make()
        before = scene.drive
        ask(gen, line)
        assert errors(gen) == [-222]
        assert scene.drive == before

    def test_burst_longer_than_period_is_a_conflict(self):
        scene, gen = self.make()
        ask(gen, "BURS:PER 1e-4;:BURS:NCYC 1000")
        assert errors(gen) == [-221]
        assert scene.drive.burst_cycles == 3

    def test_rst_returns_to_power_on_state(self):
        scene, gen = self.make()
        ask(gen, "OUTP 0;:VOLT 7")
        ask(gen, "*RST")
        assert scene.drive == Drive(output_on=True)


class TestAgainstTheSignalChain:
    """The simulated trace, converted by tankside.monitor with the shipped calibration,
    gives back the scene's own pressure. Both sides are written independently, so this
    catches a sign, phase-convention or scaling slip on either side."""

    @pytest.mark.parametrize("vpp, range_v, tolerance", [(2.0, 0.1, 0.01), (6.0, 0.5, 0.02)])
    def test_deconvolved_peaks_match_the_scene(self, vpp, range_v, tolerance):
        from tankside.monitor.acoustics.calibration import load_calibration
        from tankside.monitor.acoustics.converter import Converter
        from tankside.simulators.hydrophone import DEMO_CALIBRATION_PATH

        clock = FakeClock()
        scene = Scene(drive=Drive(amplitude_vpp=vpp))
        dig = SimulatedDigitiser(scene, seed=4, clock=clock, sleep=clock.sleep)
        ask(dig, f"CHAN1:RANG {range_v}")
        codes = acquire(clock, dig)
        scale, offset = float(ask(dig, "WAV:YINC?")), float(ask(dig, "WAV:YOFF?"))
        dt, t0 = float(ask(dig, "WAV:XINC?")), float(ask(dig, "WAV:XOR?"))
        truth = scene.pressure_pa(t0 + dt * np.arange(codes.size))
        result = Converter(load_calibration(DEMO_CALIBRATION_PATH)).with_method(
            "deconvolve").process(codes * scale + offset, dt)
        assert result.peak_compressional_pa == pytest.approx(truth.max(), rel=tolerance)
        assert result.peak_rarefactional_pa == pytest.approx(-truth.min(), rel=tolerance)
        assert result.acoustic_working_frequency_hz == pytest.approx(3.5e6, rel=0.02)


_WORDS = ["ACQ:POIN", "ACQ:SRAT", "CHAN1:RANG", "CHAN2:OFFS", "TRIG:SOUR", "TRIG:LEV",
          "WAV:DATA", "WAV:FORM", "INIT", "*RST", "*IDN", "SYST:ERR", "OUTP", "VOLT", "FREQ",
          "BURS:PER", "BURS:NCYC", "CHAN3:IMP", "ACQ:AVER", "WAV:SOUR", "TRIG:SLOP", "*ESE"]
_ARGS = st.one_of(st.just(""), st.text(alphabet="0123456789.eE-+ ,;:?\"'ABCXYZMINAX",
                                       max_size=12))
_COMMAND = st.builds(lambda w, q, a: w + ("?" if q else "") + (" " + a if a else ""),
                     st.sampled_from(_WORDS), st.booleans(), _ARGS)
_LINE = st.one_of(st.lists(_COMMAND, max_size=4).map(";".join), st.text(max_size=30),
                  st.binary(max_size=30))


@settings(max_examples=300, deadline=None)
@given(st.lists(_LINE, max_size=5))
def test_any_message_gives_a_reply_line_or_none_never_an_exception(lines):
    scene = Scene()
    dig = SimulatedDigitiser(scene, clock=lambda: 0.0, sleep=lambda s: True)
    gen = SimulatedGenerator(scene)
    for line in lines:
        for dev in (dig, gen):
            reply = dev.handle(line)
            assert reply is None or reply.endswith(b"\n")
            assert reply is None or b"#" in reply or reply.isascii()
    for dev in (dig, gen):
        entry = ask(dev, "SYST:ERR?")
        assert int(entry.split(",")[0]) <= 0
