"""Generator driver: the exact bytes each operation writes and the replies it accepts."""

import pytest
from transcript import FakeResource

from tankside.drivers.errors import InstrumentReportedError, ProtocolError, SettingError
from tankside.drivers.generator import Generator
from tankside.drivers.profile import parse_profile
from tankside.drivers.scpi import ScpiLink

PROFILE = parse_profile("""
[instrument]
kind = "generator"
[commands]
identify = "*IDN?"
reset = "*RST"
set_output = "OUTP1 {state}"
get_output = "OUTP1?"
set_amplitude = "SOUR1:VOLT {amplitude_vpp}"
get_amplitude = "SOUR1:VOLT?"
set_frequency = "SOUR1:FREQ {frequency_hz}"
get_frequency = "SOUR1:FREQ?"
set_burst_cycles = "SOUR1:BURS:NCYC {cycles}"
get_burst_cycles = "SOUR1:BURS:NCYC?"
set_burst_period = "SOUR1:BURS:INT:PER {period_s}"
get_burst_period = "SOUR1:BURS:INT:PER?"
[values]
output_on = "1"
output_off = "0"
output_on_replies = ["1", "ON"]
""", source="gen.toml")
OK = (b"SYST:ERR?\n", b'0,"No error"\n')


def test_every_operation_exact_bytes():
    steps = [(b"*IDN?\n", b"Tankside Labs,Burst Source,7,2.1\n"),
             (b"OUTP1 1\n", None), OK, (b"OUTP1?\n", b"1\n"),
             (b"OUTP1 0\n", None), OK, (b"OUTP1?\n", b"OFF\n"),
             (b"SOUR1:VOLT 2.5\n", None), OK, (b"SOUR1:VOLT?\n", b"+2.500000E+00\n"),
             (b"SOUR1:FREQ 3500000.0\n", None), OK, (b"SOUR1:FREQ?\n", b"3.5E6\n"),
             (b"SOUR1:BURS:NCYC 5\n", None), OK, (b"SOUR1:BURS:INT:PER 0.05\n", None), OK,
             (b"SOUR1:BURS:NCYC?\n", b"5\n"), (b"SOUR1:BURS:INT:PER?\n", b"5.0E-02\n"),
             (b"*RST\n", None), OK]
    with FakeResource(steps) as fake:
        gen = Generator(ScpiLink(fake), PROFILE)
        assert gen.identity == "Tankside Labs,Burst Source,7,2.1"
        gen.set_output(True)
        assert gen.output_is_on() is True
        gen.set_output(False)
        assert gen.output_is_on() is False
        gen.set_amplitude(2.5)
        assert gen.amplitude() == 2.5
        gen.set_frequency(3.5e6)
        assert gen.frequency() == 3.5e6
        gen.set_burst(5, 0.05)
        assert gen.burst() == (5, 0.05)
        gen.reset()


def test_unknown_output_reply():
    with FakeResource([(b"OUTP1?\n", b"MAYBE\n")]) as fake:
        with pytest.raises(ProtocolError, match="get_output"):
            Generator(ScpiLink(fake), PROFILE).output_is_on()


def test_amplitude_error_raised():
    steps = [(b"SOUR1:VOLT 99\n", None), (b"SYST:ERR?\n", b'-222,"Data out of range"\n'), OK]
    with FakeResource(steps) as fake:
        with pytest.raises(InstrumentReportedError) as info:
            Generator(ScpiLink(fake), PROFILE).set_amplitude(99)
    assert info.value.code == -222


@pytest.mark.parametrize("call", [lambda g: g.set_amplitude(0), lambda g: g.set_frequency(-1),
                                  lambda g: g.set_burst(0, 0.1), lambda g: g.set_burst(2, 0)])
def test_bad_values_sent_nowhere(call):
    with FakeResource([]) as fake:
        with pytest.raises(SettingError):
            call(Generator(ScpiLink(fake), PROFILE))


def test_setup_lines_sent_in_order_each_checked():
    import dataclasses

    profile = dataclasses.replace(PROFILE, setup=("SOUR1:FUNC SIN", "OUTP1:LOAD INF"))
    steps = [(b"SOUR1:FUNC SIN\n", None), OK, (b"OUTP1:LOAD INF\n", None),
             (b"SYST:ERR?\n", b'-224,"Illegal parameter value"\n'), OK]
    with FakeResource(steps) as fake:
        with pytest.raises(InstrumentReportedError, match="-224"):
            Generator(ScpiLink(fake), profile).send_setup()
