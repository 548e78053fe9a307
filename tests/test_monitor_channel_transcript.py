"""Hydrophone channel and monitor channel: the exact bytes the digitiser driver sends.

The hydrophone is on channel 3 and a monitor on channel 2 of a profile whose every
command that may name a channel does, so each ``{channel}`` placeholder is seen filled
with the right number. Scaling relation volts = code * YINC + YOFF and sample i at
XOR + i * XINC is the usual waveform-preamble convention of SCPI digitisers (common
practice).
"""

import numpy as np
import pytest
from transcript import FakeResource

from tankside.drivers import ieee488
from tankside.drivers.digitiser import (
    MAX_CHANNEL,
    Digitiser,
    DigitiserSettings,
)
from tankside.drivers.errors import InstrumentReportedError, ProtocolError, SettingError
from tankside.drivers.profile import PROFILE_DIR, parse_profile
from tankside.drivers.scpi import ScpiLink

GENERIC = (PROFILE_DIR / "generic-scpi-digitiser.toml").read_text()
# every command the profile format lets name a channel names it
CHANNEL_WORDS = {
    'arm_single = "INIT"': 'arm_single = "INIT{channel}"',
    'acquisition_done = "ACQ:DONE?"': 'acquisition_done = "ACQ{channel}:DONE?"',
    'set_trigger_level = "TRIG:LEV {level_v}"': 'set_trigger_level = "TRIG{channel}:LEV {level_v}"',
    'get_time_step = "WAV:XINC?"': 'get_time_step = "WAV:XINC? CHAN{channel}"',
    'get_time_origin = "WAV:XOR?"': 'get_time_origin = "WAV:XOR? CHAN{channel}"',
    'get_volts_per_code = "WAV:YINC?"': 'get_volts_per_code = "WAV:YINC? CHAN{channel}"',
    'get_offset = "WAV:YOFF?"': 'get_offset = "WAV:YOFF? CHAN{channel}"',
}


def _profile_text(changes: dict[str, str]) -> str:
    text = GENERIC
    for old, new in changes.items():
        assert old in text, old
        text = text.replace(old, new)
    return text


PROFILE = parse_profile(_profile_text(CHANNEL_WORDS), source="every-channel.toml")
PLAIN = parse_profile(GENERIC, source="generic-scpi-digitiser.toml")
NO_RANGE_READBACK = parse_profile(_profile_text(
    {**CHANNEL_WORDS, 'query_range = "CHAN{channel}:RANG?"': ""}), source="no-readback.toml")
OK = (b"SYST:ERR?\n", b'0,"No error"\n')

SETTINGS = DigitiserSettings(record_length=4, sample_rate_hz=1e8, range_v=0.5, channel=3,
                             monitor_channel=2, monitor_range_v=2.0)
CODES = np.array([-32768, -1, 10, 32767], dtype="<i2")
MONITOR_CODES = np.array([0, 100, -100, 32767], dtype="<i2")


def scaling(ch: int, yinc: bytes, yoff: bytes, named: bool = True):
    tail = f" CHAN{ch}".encode() if named else b""
    return [(b"WAV:XINC?" + tail + b"\n", b"1E-08\n"),
            (b"WAV:XOR?" + tail + b"\n", b"-2.0E-06\n"),
            (b"WAV:YINC?" + tail + b"\n", yinc), (b"WAV:YOFF?" + tail + b"\n", yoff)]


HYDROPHONE_SCALING = scaling(3, b"7.62939453125E-06\n", b"0.001\n")
MONITOR_SCALING = scaling(2, b"3.0517578125E-05\n", b"0\n")


def configure_steps(s: DigitiserSettings, *, readback=True, named=True):
    steps = []
    for cmd in (f"ACQ:POIN {s.record_length}", f"ACQ:SRAT {s.sample_rate_hz}",
                f"CHAN3:RANG {s.range_v}", f"CHAN3:OFFS {s.offset_v}",
                f"CHAN3:COUP {s.coupling}", f"CHAN3:IMP {s.impedance_ohm}",
                f"TRIG:SOUR {s.trigger_source}",
                f"TRIG{3 if named else ''}:LEV {s.trigger_level_v}",
                f"TRIG:SLOP {s.trigger_slope}", f"ACQ:AVER {s.averages}"):
        steps += [(cmd.encode() + b"\n", None), OK]
        if cmd.startswith("CHAN3:RANG") and readback:
            steps.append((b"CHAN3:RANG?\n", f"{s.range_v}\n".encode()))
    # the monitor's range, once, after the hydrophone's settings
    steps += [(f"CHAN2:RANG {s.monitor_range_v}\n".encode(), None), OK]
    if readback:
        steps.append((b"CHAN2:RANG?\n", f"{s.monitor_range_v}\n".encode()))
    return steps + scaling(3, b"7.62939453125E-06\n", b"0.001\n", named)


def block(codes) -> bytes:
    return ieee488.encode_block(codes.tobytes()) + b"\n"


def acquire_steps(*, first: bool, named=True, monitor_reply=None):
    steps = [(b"INIT3\n" if named else b"INIT\n", None),
             (b"ACQ3:DONE?\n" if named else b"ACQ:DONE?\n", b"1\n"),
             (b"WAV:DATA? CHAN3\n", block(CODES))]
    if first:       # configure read the hydrophone's scaling; with a monitor it is re-read
        steps += scaling(3, b"7.62939453125E-06\n", b"0.001\n", named)
    steps += [OK, (b"WAV:DATA? CHAN2\n", block(MONITOR_CODES) if monitor_reply is None
                   else monitor_reply)]
    if monitor_reply is None:
        if first:
            steps += scaling(2, b"3.0517578125E-05\n", b"0\n", named)
        steps.append(OK)
    return steps


class TestChannelPlaceholders:
    def test_hydrophone_channel_3_and_monitor_channel_2_exact_bytes(self):
        steps = configure_steps(SETTINGS) + acquire_steps(first=True) + acquire_steps(
            first=False)
        with FakeResource(steps) as fake:
            dig = Digitiser(ScpiLink(fake), PROFILE, poll_interval_s=0)
            dig.configure(SETTINGS)
            raw = dig.acquire(0, trigger_timeout_s=1.0)
            again = dig.acquire(1, trigger_timeout_s=1.0)
        assert np.array_equal(raw.codes, CODES) and raw.volts_per_code == 7.62939453125e-06
        assert raw.offset_v == 0.001 and raw.monitor_error is None
        mon = raw.monitor
        assert mon is not None and mon.channel == 2
        assert np.array_equal(mon.codes, MONITOR_CODES) and mon.codes.dtype == np.dtype("=i2")
        assert (mon.volts_per_code, mon.offset_v, mon.dt_s, mon.t0_s) == (
            3.0517578125e-05, 0.0, 1e-8, -2e-6)
        assert mon.range_v == 2.0 and (mon.clipped_low, mon.clipped_high) == (0, 1)
        np.testing.assert_array_equal(mon.volts(), MONITOR_CODES * 3.0517578125e-05)
        np.testing.assert_allclose(mon.times(), -2e-6 + 1e-8 * np.arange(4), rtol=1e-12)
        # the second trace reuses both scalings (no queries: the transcript has none)
        assert again.monitor is not None and again.monitor.volts_per_code == 3.0517578125e-05
        assert raw.state["channel"] == 3 and raw.state["monitor_channel"] == 2
        assert raw.state["monitor_range_v"] == 2.0

    def test_scaling_queries_without_a_channel_are_read_after_each_block(self):
        """The generic profile's scaling queries name no channel: they describe the channel
        last fetched, so the hydrophone's is read after its own block, not at configure
        (where the monitor's block may have come last, after a reconnect)."""
        plain = SETTINGS.replace(channel=3)
        steps = (configure_steps(plain, named=False)
                 + acquire_steps(first=True, named=False))
        with FakeResource(steps) as fake:
            dig = Digitiser(ScpiLink(fake), PLAIN, poll_interval_s=0)
            dig.configure(plain)
            raw = dig.acquire(0, trigger_timeout_s=1.0)
        assert raw.volts_per_code == 7.62939453125e-06
        assert raw.monitor is not None and raw.monitor.volts_per_code == 3.0517578125e-05

    def test_configuring_again_after_a_monitor_block_takes_no_monitor_scale(self):
        """Configured again (as after a reconnect) when the monitor's block came last, the
        channel-less scaling queries answer for the monitor (a 2 V full scale against the
        hydrophone's 0.5 V): only the time step is taken then, so no false scale warning,
        and the hydrophone's trace gets its own scale."""
        plain = SETTINGS.replace(channel=3)
        again = configure_steps(plain, named=False)
        again[-4:] = scaling(2, b"3.0517578125E-05\n", b"0\n", named=False)
        steps = (configure_steps(plain, named=False) + acquire_steps(first=True, named=False)
                 + again + acquire_steps(first=True, named=False))
        with FakeResource(steps) as fake:
            dig = Digitiser(ScpiLink(fake), PLAIN, poll_interval_s=0)
            dig.configure(plain)
            dig.acquire(0, trigger_timeout_s=1.0)
            dig.configure(plain)
            raw = dig.acquire(1, trigger_timeout_s=1.0)
        assert dig.take_warnings() == []
        assert raw.volts_per_code == 7.62939453125e-06
        assert raw.monitor is not None and raw.monitor.volts_per_code == 3.0517578125e-05

    def test_monitor_range_without_readback_is_the_span_sent(self):
        steps = configure_steps(SETTINGS, readback=False) + acquire_steps(first=True)
        with FakeResource(steps) as fake:
            dig = Digitiser(ScpiLink(fake), NO_RANGE_READBACK, poll_interval_s=0)
            dig.configure(SETTINGS)
            raw = dig.acquire(0, trigger_timeout_s=1.0)
        assert raw.monitor is not None and raw.monitor.range_v == 2.0

    def test_no_monitor_range_leaves_the_channel_as_it_is(self):
        s = SETTINGS.replace(monitor_range_v=None)
        steps = configure_steps(s)
        steps = [st for st in steps if not st[0].startswith(b"CHAN2:")]
        # (the OK after the dropped CHAN2:RANG goes too: one OK per write)
        steps = _drop_one_ok_after_chan3_averages(steps)
        with FakeResource(steps + acquire_steps(first=True)) as fake:
            dig = Digitiser(ScpiLink(fake), PROFILE, poll_interval_s=0)
            dig.configure(s)
            raw = dig.acquire(0, trigger_timeout_s=1.0)
        assert raw.monitor is not None and raw.monitor.range_v is None
        assert raw.state["monitor_range_v"] is None


def _drop_one_ok_after_chan3_averages(steps):
    i = next(k for k, st in enumerate(steps) if st[0].startswith(b"ACQ:AVER"))
    assert steps[i + 1] == OK and steps[i + 2] == OK
    return steps[:i + 2] + steps[i + 3:]


class TestMonitorFailure:
    def test_a_malformed_monitor_block_keeps_the_hydrophone_trace(self):
        odd = ieee488.encode_block(b"\x01\x02\x03") + b"\n"    # 3 bytes: not int16 samples
        steps = configure_steps(SETTINGS) + acquire_steps(first=True, monitor_reply=odd)
        with FakeResource(steps) as fake:
            dig = Digitiser(ScpiLink(fake), PROFILE, poll_interval_s=0)
            dig.configure(SETTINGS)
            raw = dig.acquire(0, trigger_timeout_s=1.0)
        assert np.array_equal(raw.codes, CODES)
        assert raw.monitor is None and isinstance(raw.monitor_error, ProtocolError)
        assert "monitor channel 2" in str(raw.monitor_error)

    def test_an_error_the_instrument_reports_after_the_monitor_fetch(self):
        steps = configure_steps(SETTINGS) + acquire_steps(first=True)
        steps[-1] = (b"SYST:ERR?\n", b'-222,"Data out of range"\n')
        steps.append(OK)                  # the queue is drained to its end
        with FakeResource(steps) as fake:
            dig = Digitiser(ScpiLink(fake), PROFILE, poll_interval_s=0)
            dig.configure(SETTINGS)
            raw = dig.acquire(0, trigger_timeout_s=1.0)
        assert np.array_equal(raw.codes, CODES) and raw.monitor is None
        assert isinstance(raw.monitor_error, InstrumentReportedError)


class TestSettings:
    @pytest.mark.parametrize("changes, word", [
        ({"channel": 0}, "channel must be"), ({"channel": MAX_CHANNEL + 1}, "channel must be"),
        ({"channel": True}, "channel must be"), ({"channel": 1.0}, "channel must be"),
        ({"monitor_channel": 0}, "monitor_channel must be"),
        ({"monitor_channel": 17}, "monitor_channel must be"),
        ({"monitor_channel": 1}, "hydrophone's channel"),
        ({"monitor_channel": None, "monitor_range_v": 1.0}, "without a monitor_channel"),
        ({"monitor_range_v": -1.0}, "monitor_range_v must be"),
        ({"monitor_range_v": float("nan")}, "monitor_range_v must be"),
    ])
    def test_refused(self, changes, word):
        base = {"monitor_channel": 2}
        with pytest.raises(SettingError, match=word):
            DigitiserSettings(**{**base, **changes})

    def test_the_highest_channel_is_accepted(self):
        assert DigitiserSettings(channel=MAX_CHANNEL, monitor_channel=1).channel == 16

    def test_monitor_range_must_be_one_of_the_profile_ranges(self):
        s = SETTINGS.replace(monitor_range_v=0.3)
        with FakeResource([]) as fake:       # refused before anything is sent
            dig = Digitiser(ScpiLink(fake), PROFILE)
            with pytest.raises(SettingError, match="range 0.3 V is not one of"):
                dig.configure(s)
