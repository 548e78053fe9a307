"""Digitiser driver: the exact bytes each operation writes and the replies it accepts.

Scaling relation volts = code * YINC + YOFF and sample i at XOR + i * XINC is the usual
waveform-preamble convention of SCPI digitisers (common practice).
"""

import numpy as np
import pytest
from transcript import CLEAR, FakeResource

from tankside.drivers import ieee488
from tankside.drivers.digitiser import Digitiser, DigitiserSettings, decode_codes
from tankside.drivers.errors import NoTrigger, ProtocolError, SettingError
from tankside.drivers.profile import load_profile
from tankside.drivers.scpi import ScpiLink

PROFILE = load_profile("generic-scpi-digitiser")
OK = (b"SYST:ERR?\n", b'0,"No error"\n')
IDN = b"Tankside Labs,Bench Digitiser,0001,1.0\n"


def configure_steps(s: DigitiserSettings, scaling=None):
    steps = []
    for cmd in (f"ACQ:POIN {s.record_length}", f"ACQ:SRAT {s.sample_rate_hz}",
                f"CHAN1:RANG {s.range_v}", f"CHAN1:OFFS {s.offset_v}",
                f"CHAN1:COUP {s.coupling}", f"CHAN1:IMP {s.impedance_ohm}",
                f"TRIG:SOUR {s.trigger_source}", f"TRIG:LEV {s.trigger_level_v}",
                f"TRIG:SLOP {s.trigger_slope}", f"ACQ:AVER {s.averages}"):
        steps += [(cmd.encode() + b"\n", None), OK]
        if cmd.startswith("CHAN1:RANG"):       # read back (query_range)
            steps.append((b"CHAN1:RANG?\n", f"{s.range_v}\n".encode()))
    return steps + (SCALING if scaling is None else scaling)


SETTINGS = DigitiserSettings(record_length=4, sample_rate_hz=1e8, range_v=0.5)
CODES = np.array([-32768, -1, 10, 32767], dtype="<i2")
SCALING = [(b"WAV:XINC?\n", b"1E-08\n"), (b"WAV:XOR?\n", b"-2.0E-06\n"),
           (b"WAV:YINC?\n", b"1.52587890625E-05\n"), (b"WAV:YOFF?\n", b"0.001\n")]


def acquire_steps(payload=None, polls=(b"0\n", b"1\n"), scaling=False):
    payload = CODES.tobytes() if payload is None else payload
    steps = [(b"INIT\n", None)] + [(b"ACQ:DONE?\n", p) for p in polls]
    steps.append((b"WAV:DATA? CHAN1\n", ieee488.encode_block(payload) + b"\n"))
    return steps + (SCALING if scaling else []) + [OK]


def test_configure_exact_bytes():
    with FakeResource(configure_steps(SETTINGS)) as fake:
        dig = Digitiser(ScpiLink(fake), PROFILE)
        dig.configure(SETTINGS)
    assert dig.settings == SETTINGS and dig.skipped == ()


def test_acquire_record():
    with FakeResource(configure_steps(SETTINGS) + acquire_steps()) as fake:
        dig = Digitiser(ScpiLink(fake), PROFILE, poll_interval_s=0)
        dig.configure(SETTINGS)
        raw = dig.acquire(5, trigger_timeout_s=1.0)
    assert np.array_equal(raw.codes, CODES) and raw.codes.dtype == np.dtype("=i2")
    assert (raw.dt_s, raw.t0_s, raw.volts_per_code, raw.offset_v) == (
        1e-8, -2e-6, 1.52587890625e-05, 0.001)
    assert (raw.clipped_low, raw.clipped_high) == (1, 1)
    assert raw.seq == 5 and raw.range_v == 0.5 and raw.data_format == "int16"
    assert raw.state["record_length"] == 4
    np.testing.assert_allclose(raw.volts(), CODES * 1.52587890625e-05 + 0.001)


def test_scaling_reused_until_range_changes():
    steps = (configure_steps(SETTINGS) + acquire_steps(polls=(b"1\n",))
             + acquire_steps(polls=(b"1\n",))
             + [(b"CHAN1:RANG 1.0\n", None), OK, (b"CHAN1:RANG?\n", b"1.0\n")]
             + acquire_steps(polls=(b"1\n",), scaling=True))
    with FakeResource(steps) as fake:
        dig = Digitiser(ScpiLink(fake), PROFILE)
        dig.configure(SETTINGS)
        dig.acquire(0, trigger_timeout_s=1.0)
        dig.acquire(1, trigger_timeout_s=1.0)
        dig.set_range(1.0)
        assert dig.acquire(2, trigger_timeout_s=1.0).range_v == 1.0


def test_big_endian_codes(tmp_path):
    text = open(PROFILE.source).read().replace(
        'byte_order = "little"', 'byte_order = "big"')
    path = tmp_path / "big.toml"
    path.write_text(text)
    profile = load_profile(path)
    with FakeResource(configure_steps(SETTINGS)
                      + acquire_steps(payload=CODES.astype(">i2").tobytes())) as fake:
        dig = Digitiser(ScpiLink(fake), profile, poll_interval_s=0)
        dig.configure(SETTINGS)
        raw = dig.acquire(0, trigger_timeout_s=1.0)
    assert np.array_equal(raw.codes, CODES)


def test_no_trigger():
    steps = configure_steps(SETTINGS) + [(b"INIT\n", None)] + [(b"ACQ:DONE?\n", b"0\n")] * 200
    fake = FakeResource(steps)
    dig = Digitiser(ScpiLink(fake), PROFILE, poll_interval_s=0.01)
    dig.configure(SETTINGS)
    with pytest.raises(NoTrigger):
        dig.acquire(0, trigger_timeout_s=0.05)
    assert fake.position < len(steps)  # it stopped polling at the deadline


def test_wait_complete_timeout_is_no_trigger(tmp_path):
    text = open(PROFILE.source).read().replace('acquisition_done = "ACQ:DONE?"', "")
    path = tmp_path / "opc.toml"
    path.write_text(text)
    steps = configure_steps(SETTINGS) + [(b"INIT\n", None), (b"*OPC?\n", None),
                                         CLEAR, (b"*IDN?\n", IDN), (b"*OPC?\n", b"1\n")]
    with FakeResource(steps) as fake:
        session = ScpiLink(fake)
        dig = Digitiser(session, load_profile(path))
        dig.configure(SETTINGS)
        with pytest.raises(NoTrigger):
            dig.acquire(0, trigger_timeout_s=0.05)
        assert fake.timeout == 1000  # restored after the wait
        session.opc()


def test_range_not_in_profile():
    dig = Digitiser(ScpiLink(FakeResource([])), PROFILE)
    with pytest.raises(SettingError, match="not one of"):
        dig.configure(SETTINGS.replace(range_v=0.3))
    with pytest.raises(SettingError, match="configure"):
        dig.set_range(0.5)


def test_odd_payload_is_protocol_error():
    with pytest.raises(ProtocolError):
        decode_codes(b"\x00\x01\x02", np.dtype("<i2"))


def test_reopen_reapplies_settings():
    first = FakeResource(configure_steps(SETTINGS))
    second = FakeResource(configure_steps(SETTINGS))
    session = ScpiLink(first, reopen=lambda: second)
    dig = Digitiser(session, PROFILE)
    dig.configure(SETTINGS)
    session.reopen()
    first.verify()
    second.verify()


def test_settings_validated():
    with pytest.raises(SettingError):
        DigitiserSettings(record_length=0)
    with pytest.raises(SettingError):
        DigitiserSettings(sample_rate_hz=-1.0)
    with pytest.raises(SettingError):
        DigitiserSettings(averages=0)


@pytest.mark.parametrize("name, value", [("coupling", "DC;:CHAN1:RANG 5"),
                                         ("trigger_slope", "POS;*RST"),
                                         ("trigger_source", "EXT\n"),
                                         ("coupling", 5)])
def test_settings_refuse_words_that_are_not_one_command(name, value):
    with pytest.raises(SettingError, match=name):
        SETTINGS.replace(**{name: value})


def test_a_chained_command_never_reaches_the_wire():
    # Settings that got past every check before the driver (built here by going round
    # the dataclass's own check): configure refuses them before writing anything, and
    # the empty transcript shows that nothing was sent.
    bad = SETTINGS.replace()
    object.__setattr__(bad, "coupling", "DC;:CHAN1:RANG 5")
    with FakeResource([]) as fake:
        dig = Digitiser(ScpiLink(fake), PROFILE)
        with pytest.raises(SettingError, match="coupling = 'DC;:CHAN1:RANG 5' contains ';'"):
            dig.configure(bad)
    assert dig.settings is None


@pytest.mark.parametrize("query, reply, field", [
    (b"WAV:XINC?\n", b"1E-320\n", "dt_s"),            # once made the session die at once
    (b"WAV:XINC?\n", b"0\n", "dt_s"),
    (b"WAV:XINC?\n", b"9.9E37\n", "dt_s"),            # SCPI's "not a number" value
    (b"WAV:YINC?\n", b"0\n", "volts_per_code"),
    (b"WAV:YOFF?\n", b"1E308\n", "offset_v"),
])
def test_scaling_replies_no_instrument_could_give_are_protocol_errors(query, reply, field):
    scaling = [(q, reply if q == query else r) for q, r in SCALING]
    with FakeResource(configure_steps(SETTINGS, scaling=scaling)) as fake:
        dig = Digitiser(ScpiLink(fake), PROFILE, poll_interval_s=0)
        with pytest.raises(ProtocolError, match=field):
            dig.configure(SETTINGS)


def _setup_profile(tmp_path):
    text = open(PROFILE.source).read().replace(
        "[commands]\n", '[commands]\nsetup = ["WAV:FORM INT16", "WAV:BORD LSBF"]\n', 1)
    path = tmp_path / "setup.toml"
    path.write_text(text)
    return load_profile(path)


SETUP_STEPS = [(b"WAV:FORM INT16\n", None), OK, (b"WAV:BORD LSBF\n", None), OK]


def test_setup_lines_sent_in_order_each_checked_and_again_after_reopen(tmp_path):
    profile = _setup_profile(tmp_path)
    first = FakeResource(SETUP_STEPS + configure_steps(SETTINGS))
    second = FakeResource(SETUP_STEPS + configure_steps(SETTINGS))
    link = ScpiLink(first, reopen=lambda: second)
    dig = Digitiser(link, profile)
    dig.send_setup()
    dig.configure(SETTINGS)
    link.reopen()
    first.verify()
    second.verify()


def test_setup_line_refused_by_the_instrument_is_an_error(tmp_path):
    from tankside.drivers.errors import InstrumentReportedError

    steps = [(b"WAV:FORM INT16\n", None), (b"SYST:ERR?\n", b'-113,"Undefined header"\n'),
             OK]
    with FakeResource(steps) as fake:
        dig = Digitiser(ScpiLink(fake), _setup_profile(tmp_path))
        with pytest.raises(InstrumentReportedError, match="-113"):
            dig.send_setup()


def _without(lines: tuple[str, ...], tmp_path, name="edited.toml"):
    text = "\n".join(ln for ln in open(PROFILE.source).read().splitlines()
                     if not ln.startswith(lines))
    path = tmp_path / name
    path.write_text(text + "\n")
    return load_profile(path)


def test_without_set_sample_rate_the_instruments_step_is_used_and_recorded(tmp_path):
    profile = _without(("set_sample_rate", "query_sample_rate"), tmp_path)
    settings = SETTINGS.replace(sample_rate_hz=None)
    steps = configure_steps(settings)     # each write is followed by its error check
    at = steps.index((b"ACQ:SRAT None\n", None))
    del steps[at:at + 2]
    with FakeResource(steps + acquire_steps()) as fake:
        dig = Digitiser(ScpiLink(fake), profile, poll_interval_s=0)
        dig.configure(settings)
        raw = dig.acquire(0, trigger_timeout_s=1.0)
    # XINC 1E-08 s is 100 MHz (1 / 1e-8)
    assert raw.state["sample_rate_hz"] == pytest.approx(1e8, rel=1e-12)
    assert dig.skipped == ()


@pytest.mark.parametrize("asked_hz, xinc, fails", [
    (1e8, b"4E-09\n", True),          # the 100 MS/s bench rate against a 4 ns step
    (1e8, b"1.0009E-08\n", False),    # 0.09 % apart: inside the 0.1 % tolerance
    (1e8, b"1.0011E-08\n", True),     # 0.11 % apart
])
def test_bench_rate_against_the_step_the_instrument_reports(asked_hz, xinc, fails):
    scaling = [(q, xinc if q == b"WAV:XINC?\n" else r) for q, r in SCALING]
    settings = SETTINGS.replace(sample_rate_hz=asked_hz)
    with FakeResource(configure_steps(settings, scaling=scaling)) as fake:
        dig = Digitiser(ScpiLink(fake), PROFILE)
        if fails:
            with pytest.raises(SettingError) as info:
                dig.configure(settings)
            step = float(xinc)
            assert f"{asked_hz:g} Hz" in str(info.value)
            assert f"{step:g} s ({1 / step:g} Hz)" in str(info.value)
        else:
            dig.configure(settings)


def test_bench_rate_checked_also_without_set_sample_rate(tmp_path):
    profile = _without(("set_sample_rate",), tmp_path)
    settings = SETTINGS.replace(sample_rate_hz=2.5e8)
    steps = configure_steps(settings)
    at = steps.index((b"ACQ:SRAT 250000000.0\n", None))
    del steps[at:at + 2]
    with FakeResource(steps) as fake:
        dig = Digitiser(ScpiLink(fake), profile)
        with pytest.raises(SettingError, match=r"2\.5e\+08 Hz.*1e-08 s \(1e\+08 Hz\)"):
            dig.configure(settings)
    assert dig.skipped == ("sample_rate_hz",)


def _range_kind_profile(tmp_path, kind_lines: str):
    text = open(PROFILE.source).read().replace('kind = "span"\n', kind_lines, 1)
    path = tmp_path / "kind.toml"
    path.write_text(text)
    return load_profile(path)


@pytest.mark.parametrize("kind_lines, sent, read_back, recorded", [
    ('kind = "span"\n', b"0.5", b"0.5", 0.5),
    ('kind = "peak"\n', b"0.25", b"0.25", 0.5),                     # +/- 0.25 V is 0.5 V p-p
    ('kind = "per_division"\ndivisions = 10\n', b"0.05", b"0.05", 0.5),  # 10 x 50 mV
    ('kind = "peak"\n', b"0.25", b"0.5", 1.0),     # the instrument rounded up: its span is kept
])
def test_range_kinds_converted_both_ways(tmp_path, kind_lines, sent, read_back, recorded):
    profile = _range_kind_profile(tmp_path, kind_lines)
    steps = configure_steps(SETTINGS)
    at = steps.index((b"CHAN1:RANG 0.5\n", None))
    steps[at] = (b"CHAN1:RANG " + sent + b"\n", None)
    steps[at + 2] = (b"CHAN1:RANG?\n", read_back + b"\n")
    with FakeResource(steps + acquire_steps()) as fake:
        dig = Digitiser(ScpiLink(fake), profile, poll_interval_s=0)
        dig.configure(SETTINGS)
        raw = dig.acquire(0, trigger_timeout_s=1.0)
    assert raw.range_v == recorded and raw.state["range_v"] == recorded


def test_share_of_full_scale_from_volts_per_code_and_rails():
    # YINC = 2**-16 V per code over the 65536 int16 codes is a 1 V full scale; the
    # profile's range says 0.5 V: the share follows the codes and a warning says why.
    with FakeResource(configure_steps(SETTINGS) + acquire_steps()) as fake:
        dig = Digitiser(ScpiLink(fake), PROFILE, poll_interval_s=0)
        dig.configure(SETTINGS)
        raw = dig.acquire(0, trigger_timeout_s=1.0)
    assert raw.full_scale_v == 1.0
    # The top rail code 32767 sits half a code below full scale above mid-scale -0.5:
    # (32767 + 0.5) / 32768 of half the full scale.
    assert raw.fraction_of_full_scale() == pytest.approx(32767.5 / 32768, rel=1e-12)
    half = raw.volts()[2:3]                      # code 10 alone: (10 + 0.5) / 32768
    assert raw.fraction_of_full_scale(half) == pytest.approx(10.5 / 32768, rel=1e-9)
    (warning,) = dig.take_warnings()
    assert "0.5 V" in warning and "full scale of 1 V" in warning
    assert dig.take_warnings() == []


def test_recorded_state_holds_only_what_was_sent_or_read_back(tmp_path):
    unset = ("set_offset", "set_coupling", "set_impedance", "set_trigger_level",
             "set_trigger_slope", "set_averages")
    profile = _without(unset, tmp_path)
    steps = [st for st in configure_steps(SETTINGS)]
    for word in (b"CHAN1:OFFS ", b"CHAN1:COUP ", b"CHAN1:IMP ", b"TRIG:LEV ", b"TRIG:SLOP ",
                 b"ACQ:AVER "):
        at = next(i for i, st in enumerate(steps) if st is not CLEAR and st[0].startswith(word))
        del steps[at:at + 2]                       # the write and its error check
    with FakeResource(steps + acquire_steps()) as fake:
        dig = Digitiser(ScpiLink(fake), profile, poll_interval_s=0)
        dig.configure(SETTINGS)
        raw = dig.acquire(0, trigger_timeout_s=1.0)
    for name in ("offset_v", "coupling", "impedance_ohm", "trigger_level_v", "trigger_slope",
                 "averages"):
        assert raw.state[name] is None, name
    assert raw.state["trigger_source"] == "EXT" and raw.state["record_length"] == 4
    assert raw.state["range_v"] == 0.5 and raw.state["sample_rate_hz"] == pytest.approx(1e8)
    from tankside.drivers.digitiser import unapplied_settings
    assert unapplied_settings(profile, ["coupling", "range_v", "averages"]) == [
        "coupling", "averages"]


def test_a_trigger_delay_is_sent_after_the_slope_only_when_given():
    """None (the default) leaves the instrument's own delay: no TRIG:DEL at all; a value is
    sent in its place in the order of the settings, and recorded as sent."""
    delayed = SETTINGS.replace(trigger_delay_s=2.5e-5)
    steps = configure_steps(delayed)
    slope = steps.index((f"TRIG:SLOP {delayed.trigger_slope}\n".encode(), None))
    steps[slope + 2:slope + 2] = [(b"TRIG:DEL 2.5e-05\n", None), OK]
    with FakeResource(steps) as fake:
        dig = Digitiser(ScpiLink(fake), PROFILE)
        dig.configure(delayed)
    assert dig.settings.trigger_delay_s == 2.5e-5
    assert dig.recorded_state({"dt_s": 1e-8})["trigger_delay_s"] == 2.5e-5
    with FakeResource(configure_steps(SETTINGS)) as fake:      # no TRIG:DEL in the script
        dig = Digitiser(ScpiLink(fake), PROFILE)
        dig.configure(SETTINGS)
    assert dig.recorded_state({"dt_s": 1e-8})["trigger_delay_s"] is None


@pytest.mark.parametrize("delay", [float("nan"), 11.0, True, "1e-5"])
def test_a_trigger_delay_that_is_no_time_is_refused(delay):
    with pytest.raises(SettingError, match="trigger_delay_s"):
        DigitiserSettings(trigger_delay_s=delay)
