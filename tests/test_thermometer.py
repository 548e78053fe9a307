"""Thermometer profiles and driver: unit conversion, parsing by pattern, queried and
streaming instruments, on the simulated thermometer over a real pty."""

from __future__ import annotations

import time

import pytest

from tankside.drivers.errors import InstrumentTimeout, ProfileError, ProtocolError
from tankside.drivers.profile import PROFILE_DIR
from tankside.drivers.thermometer import (
    load_thermometer_profile,
    open_thermometer,
    parse_thermometer_profile,
    to_celsius,
)
from tankside.simulators.bench import PROFILE_DIR as SIM_PROFILES
from tankside.simulators.thermometer import SimulatedThermometer

QUERIED = SIM_PROFILES / "sim-thermometer.toml"
STREAMING = SIM_PROFILES / "sim-thermometer-streaming.toml"


@pytest.mark.parametrize("value, unit, celsius", [
    # fixed points of the temperature scales (ITS-90 relations; common knowledge):
    (0.0, "degC", 0.0), (273.15, "K", 0.0), (373.15, "K", 100.0),
    (32.0, "degF", 0.0), (212.0, "degF", 100.0), (68.0, "degF", 20.0)])
def test_units(value, unit, celsius):
    assert to_celsius(value, unit) == pytest.approx(celsius, abs=1e-12)


def test_shipped_profiles_load():
    assert load_thermometer_profile(QUERIED).query == "TEMP?"
    assert load_thermometer_profile(STREAMING).streaming
    template = load_thermometer_profile(PROFILE_DIR / "line" / "generic-line-thermometer.toml")
    assert template.unit == "degC"


GOOD = QUERIED.read_text()


@pytest.mark.parametrize("old, new, key", [
    ('query = "TEMP?"\n', "", "[commands] query"),
    ('unit = "degC"', 'unit = "C"', "[reading] unit"),
    ("(?P<value>", "(?P<reading>", "[reading] pattern"),
    ("interval_s = 1.0", "interval_s = 0", "[reading] interval_s"),
    ('query = "TEMP?"', 'query = "TEMP?;RST"', "[commands] query"),
    ("[reading]", "[reading]\nevery = 2", "[reading] every"),
])
def test_a_bad_profile_names_file_and_key(old, new, key):
    assert old in GOOD
    with pytest.raises(ProfileError) as caught:
        parse_thermometer_profile(GOOD.replace(old, new, 1), "t.toml")
    assert str(caught.value).startswith(f"t.toml: {key}")


@pytest.fixture
def queried():
    with SimulatedThermometer(start_c=21.5, drift_c_per_min=0.0, noise_c=0.002) as device:
        thermometer = open_thermometer(load_thermometer_profile(QUERIED),
                                       port=device.device_path)
        yield device, thermometer
        thermometer.close()


def test_queried_reading_on_the_pty(queried):
    device, thermometer = queried
    assert thermometer.identify().startswith("SIMTHERM-1")
    readings = [thermometer.read_celsius() for _ in range(5)]
    assert all(abs(r - 21.5) < 0.02 for r in readings)     # 10 sigma of the 2 mK noise
    assert device.received[-1] == "TEMP?"


def test_kelvin_profile_converts(queried):
    device, _ = queried
    text = GOOD.replace('unit = "degC"', 'unit = "K"')
    profile = parse_thermometer_profile(text, "k.toml")
    thermometer = open_thermometer(profile, port=device.device_path)
    try:
        # the simulator says 21.5 "C"; read as kelvin that is far below freezing: refused
        with pytest.raises(ProtocolError, match="not a water temperature"):
            thermometer.read_celsius()
    finally:
        thermometer.close()


def test_garbled_and_silent_are_typed(queried):
    device, thermometer = queried
    device.garble_next_reply()
    with pytest.raises(ProtocolError):
        thermometer.read_celsius()
    thermometer.session.resync()
    device.go_silent()
    thermometer.session.timeout_s = 0.1
    with pytest.raises(InstrumentTimeout):
        thermometer.read_celsius()


def test_streaming_takes_the_latest_line():
    with SimulatedThermometer(start_c=18.0, drift_c_per_min=600.0, noise_c=0.0,
                              streaming=True, interval_s=0.05) as device:
        thermometer = open_thermometer(load_thermometer_profile(STREAMING),
                                       port=device.device_path)
        try:
            time.sleep(0.4)                     # several readings wait in the buffer
            value = thermometer.read_celsius()
            # 600 degC/min is 10 degC/s: the latest reading is within two intervals
            # (0.1 s, 1 degC) of the truth, an old one would be up to 4 degC behind
            assert abs(value - device.true_celsius()) < 1.0
            device.go_silent()
            time.sleep(0.1)
            thermometer.session.resync()
            with pytest.raises(InstrumentTimeout, match="no reading"):
                thermometer.read_celsius()
        finally:
            thermometer.close()
