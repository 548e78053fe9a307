"""Electrical loading correction M_L = M_O Z_L / (Z_L + Z_H), and preamplifier gain."""

import json
import math

import numpy as np
import pytest

from tankside.monitor.acoustics.loading import CalibrationLoad, Loading
from tankside.monitor.errors import ConfigError


class TestWorkedValues:
    # worked values given in the project's issue 2 for the capacitive divider (common
    # practice: hydrophone as a capacitive source, cable and input as a shunt load)
    def test_cable_capacitance_divider(self):
        ratio = Loading(100e-12, cable_capacitance_f=50e-12).factor(np.array([1e6]))[0]
        assert abs(ratio) == pytest.approx(0.667, abs=5e-4)
        assert abs(np.angle(ratio)) < 1e-12

    def test_into_50_ohm_at_1_mhz(self):
        ratio = Loading(100e-12, input_resistance_ohm=50.0).factor(np.array([1e6]))[0]
        assert abs(ratio) == pytest.approx(0.0314, abs=5e-5)
        assert np.rad2deg(np.angle(ratio)) == pytest.approx(88.2, abs=0.1)

    def test_into_1_megohm_parallel_15_pf(self):
        load = Loading(100e-12, input_resistance_ohm=1e6, input_capacitance_f=15e-12)
        assert abs(load.factor(np.array([1e6]))[0]) == pytest.approx(0.870, abs=5e-4)


def test_matches_impedance_divider_computed_directly():
    # the same divider written with complex impedances (exp(+j w t)): Z_C = 1/(j w C)
    f = np.array([0.1e6, 1e6, 10e6])
    w = 2 * np.pi * f
    c_h, c_c, r, c_in = 800e-12, 120e-12, 1e3, 20e-12
    z_h = 1 / (1j * w * c_h)
    z_l = 1 / (1 / r + 1j * w * (c_c + c_in))
    expected = z_l / (z_l + z_h)
    got = Loading(c_h, c_c, r, c_in).factor(f)
    np.testing.assert_allclose(got, expected, rtol=1e-12)


def test_preamp_gain_and_no_correction():
    f = np.array([1e6, 5e6])
    np.testing.assert_allclose(Loading(None, preamp_gain_db=20.0).factor(f), 10.0)
    np.testing.assert_allclose(Loading(100e-12, 50e-12, preamp_gain_db=-6.0).factor(f),
                               10 ** (-6 / 20) * 100 / 150)


def test_zero_hz_into_finite_resistance_is_zero():
    assert Loading(100e-12, input_resistance_ohm=50.0).factor(np.array([0.0]))[0] == 0


@pytest.mark.parametrize("kw", [
    {"hydrophone_capacitance_f": 0.0}, {"hydrophone_capacitance_f": -1e-12},
    {"hydrophone_capacitance_f": 1e-10, "cable_capacitance_f": -1.0},
    {"hydrophone_capacitance_f": 1e-10, "input_resistance_ohm": 0.0},
    {"preamp_gain_db": math.nan},
])
def test_bad_values_are_config_errors(kw):
    with pytest.raises(ConfigError):
        Loading(**kw)


@pytest.mark.parametrize("load", [Loading(), Loading(100e-12), Loading(100e-12, 50e-12, 1e6)])
def test_stored_form_is_strict_json_and_round_trips(load):
    text = json.dumps(load.as_dict(), allow_nan=False)  # raises on inf or NaN
    assert Loading.from_table(json.loads(text)) == load
    if math.isinf(load.input_resistance_ohm):
        assert json.loads(text)["input_resistance_ohm"] is None


def test_sessions_recorded_with_infinity_still_load():
    # the form of earlier session files: Python's json wrote inf as the token Infinity
    table = json.loads('{"hydrophone_capacitance_f": 1e-10, "input_resistance_ohm": Infinity}')
    assert Loading.from_table(table) == Loading(100e-12)


def test_from_table_round_trip_and_unknown_key():
    load = Loading(100e-12, 50e-12, 1e6, 15e-12, 6.0)
    assert Loading.from_table(load.as_dict()) == load
    assert Loading.from_table({"input_resistance_ohm": "inf"}).input_resistance_ohm == math.inf
    with pytest.raises(ConfigError, match="cable_capacitance"):
        Loading.from_table({"cable_capacitanc_f": 1e-12})


class TestEndOfCableCalibration:
    # an end-of-cable certificate measured into 1 Mohm || 20 pF, used into 50 ohm or into
    # the same input. The reference is the same divider written with complex impedances
    # (exp(+j w t), Z_C = 1/(j w C)): M_cert = M_O Z_cert/(Z_cert + Z_H), and the user's
    # M_L = M_O Z_user/(Z_user + Z_H), so M_L / M_cert = [Z_user/(Z_user + Z_H)] /
    # [Z_cert/(Z_cert + Z_H)], the cable across the hydrophone in both loads.
    f = np.array([0.5e6, 1e6, 5e6, 20e6])
    c_h, c_c = 400e-12, 100e-12

    def ratio(self, r, c_in):
        w = 2 * np.pi * self.f
        z_h = 1 / (1j * w * self.c_h)
        z_l = 1 / (1 / r + 1j * w * (self.c_c + c_in))
        return z_l / (z_l + z_h)

    def test_only_the_difference_is_applied(self):
        cert = CalibrationLoad("end-of-cable", 1e6, 20e-12, True)
        got = Loading(self.c_h, self.c_c, 50.0, 0.0).factor(self.f, cert)
        np.testing.assert_allclose(got, self.ratio(50.0, 0.0) / self.ratio(1e6, 20e-12),
                                   rtol=1e-12)

    def test_same_input_as_the_certificate_changes_nothing(self):
        # the cable is not counted twice: into the certificate's own input the factor is 1
        cert = CalibrationLoad("end-of-cable", 1e6, 20e-12, True)
        got = Loading(self.c_h, self.c_c, 1e6, 20e-12, preamp_gain_db=0.0).factor(self.f, cert)
        np.testing.assert_allclose(got, 1.0, rtol=1e-12)

    def test_open_circuit_applies_the_whole_loading(self):
        got = Loading(self.c_h, self.c_c, 50.0).factor(self.f, CalibrationLoad())
        np.testing.assert_allclose(got, self.ratio(50.0, 0.0), rtol=1e-12)

    def test_settings_override_the_file(self):
        cert = CalibrationLoad("end-of-cable", 1e6, 20e-12, True)
        load = Loading(self.c_h, self.c_c, 50.0, calibration_kind="open-circuit")
        np.testing.assert_allclose(load.factor(self.f, cert), self.ratio(50.0, 0.0), rtol=1e-12)
        load = Loading(self.c_h, self.c_c, 50.0, calibration_input_capacitance_f=0.0)
        assert load.calibration_load(cert).input_capacitance_f == 0.0
        assert load.calibration_load(cert).input_resistance_ohm == 1e6

    def test_without_hydrophone_capacitance_only_the_gain(self):
        cert = CalibrationLoad("end-of-cable", 1e6, 20e-12, True)
        np.testing.assert_allclose(Loading(None, preamp_gain_db=6.0).factor(self.f, cert),
                                   10 ** (6 / 20))

    def test_settings_round_trip_and_bad_kind(self):
        load = Loading(self.c_h, calibration_kind="end-of-cable",
                       calibration_input_resistance_ohm=math.inf)
        text = json.dumps(load.as_dict(), allow_nan=False)
        assert Loading.from_table(json.loads(text)) == load
        with pytest.raises(ConfigError, match="open-circuit"):
            Loading(self.c_h, calibration_kind="loaded")
