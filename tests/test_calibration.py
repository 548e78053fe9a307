"""Calibration loader: units, phase convention, minimum-phase estimate, typed errors."""

import hashlib

import numpy as np
import pytest
import scipy.signal
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from tankside.monitor.acoustics.calibration import (
    db_re_1v_per_upa_to_v_per_pa,
    load_calibration,
    minimum_phase_rad,
    parse_calibration,
    v_per_pa_to_db_re_1v_per_upa,
)
from tankside.monitor.errors import CalibrationError

GOOD = """# invented test hydrophone
frequency_hz,sensitivity_db_re_1v_per_upa,phase_deg
1e6,-260,0
2e6,-259,-10

3e6,-258,-20
"""


class TestUnits:
    def test_minus_260_db_is_100_nv_per_pa(self):
        # dB re 1 V/uPa: 20 log10(M / (1 V/uPa)); 1 V/uPa = 1e6 V/Pa (IEC 60565 usage)
        assert db_re_1v_per_upa_to_v_per_pa(-260.0) == pytest.approx(100e-9, rel=1e-12)
        assert v_per_pa_to_db_re_1v_per_upa(100e-9) == pytest.approx(-260.0, abs=1e-9)

    def test_db_column_parsed_to_v_per_pa(self):
        cal = parse_calibration(GOOD)
        assert cal.magnitude_v_per_pa[0] == pytest.approx(100e-9, rel=1e-12)
        assert cal.magnitude_v_per_pa[2] == pytest.approx(100e-9 * 10 ** (2 / 20), rel=1e-12)
        assert cal.phase_source == "measured"
        assert cal.band_hz == (1e6, 3e6)

    def test_columns_in_any_order_and_radians(self):
        cal = parse_calibration("phase_rad,sensitivity_v_per_pa,frequency_hz\n"
                                "0,1e-7,1e6\n-0.5,2e-7,2e6\n-1.0,3e-7,3e6\n")
        np.testing.assert_allclose(cal.magnitude_v_per_pa, [1e-7, 2e-7, 3e-7])
        np.testing.assert_allclose(cal.phase_rad, [0, -0.5, -1.0])


class TestPhase:
    def test_wrapped_delay_phase_is_unwrapped(self):
        # convention: a pure delay tau has phase -360 f tau degrees (exp(+j w t))
        tau = 0.3e-6  # 53 degrees per calibration step: unwrapping is unambiguous
        f = np.linspace(1e6, 20e6, 40)
        wrapped = (-360 * f * tau + 180) % 360 - 180
        text = "frequency_hz,sensitivity_v_per_pa,phase_deg\n" + "\n".join(
            f"{a},1e-7,{p}" for a, p in zip(f, wrapped, strict=True))
        cal = parse_calibration(text)
        np.testing.assert_allclose(np.rad2deg(cal.phase_rad), -360 * f * tau + wrapped[0]
                                   - (-360 * f[0] * tau), atol=1e-9)

    def test_convention_matches_numpy_rfft_of_a_delay(self):
        # numpy.fft.rfft of a delayed impulse has phase -2 pi f tau: same sign convention
        n, dt, k = 256, 1e-8, 5
        x = np.zeros(n)
        x[k] = 1.0
        f = np.fft.rfftfreq(n, dt)[1:20]
        measured = np.unwrap(np.angle(np.fft.rfft(x)))[1:20]
        text = "frequency_hz,sensitivity_v_per_pa,phase_deg\n" + "\n".join(
            f"{float(a)!r},1.0,{float(-360 * a * k * dt)!r}" for a in f)
        np.testing.assert_allclose(parse_calibration(text).phase_rad, measured, atol=1e-9)

    def test_minimum_phase_of_resonant_bandpass(self):
        # reference: scipy.signal.freqs of a 2nd-order bandpass (zeros at s=0, LHP poles:
        # minimum phase); estimate within 5 degrees over the calibrated band
        wn, q = 2 * np.pi * 10e6, 2.0
        f = np.linspace(1e6, 40e6, 79)
        _, h = scipy.signal.freqs([wn / q, 0], [1, wn / q, wn**2], worN=2 * np.pi * f)
        est = minimum_phase_rad(f, np.abs(h))
        assert np.max(np.abs(np.rad2deg(est - np.unwrap(np.angle(h))))) < 5.0

    def test_minimum_phase_of_first_order_lowpass(self):
        # reference: scipy.signal.freqs of 1/(1 + s/wc); phase -atan(f/fc)
        wc = 2 * np.pi * 5e6
        f = np.linspace(0.1e6, 20e6, 100)
        _, h = scipy.signal.freqs([1], [1 / wc, 1], worN=2 * np.pi * f)
        est = minimum_phase_rad(f, np.abs(h))
        assert np.max(np.abs(np.rad2deg(est - np.angle(h)))) < 2.5

    def test_magnitude_only_file_says_minimum_phase(self):
        cal = parse_calibration("frequency_hz,sensitivity_v_per_pa\n1e6,1e-7\n2e6,1e-7\n3e6,1e-7\n")
        assert cal.phase_source == "minimum-phase"
        # flat magnitude: minimum phase is zero
        np.testing.assert_allclose(cal.phase_rad, 0.0, atol=1e-9)


class TestFile:
    def test_load_keeps_text_and_sha256(self, tmp_path):
        path = tmp_path / "cal.csv"
        path.write_bytes(GOOD.encode())
        cal = load_calibration(path)
        assert cal.text == GOOD
        assert cal.sha256 == hashlib.sha256(GOOD.encode()).hexdigest()
        assert cal.source == str(path)

    def test_missing_file(self, tmp_path):
        with pytest.raises(CalibrationError, match="cannot read"):
            load_calibration(tmp_path / "absent.csv")

    def test_not_utf8(self, tmp_path):
        path = tmp_path / "cal.csv"
        path.write_bytes(b"frequency_hz,sensitivity_v_per_pa\n\xff\xfe\n")
        with pytest.raises(CalibrationError, match="UTF-8"):
            load_calibration(path)


HEADER = "frequency_hz,sensitivity_v_per_pa\n"


@pytest.mark.parametrize(
    ("text", "line", "words"),
    [
        ("", None, "empty"),
        ("# only a comment\n\n", None, "empty"),
        (HEADER + "1e6,1e-7\n3e6,1e-7\n2e6,1e-7\n", 4, "strictly increasing"),
        (HEADER + "1e6,1e-7\n1e6,1e-7\n2e6,1e-7\n", 3, "strictly increasing"),
        (HEADER + "1e6,1e-7\n2e6,0\n3e6,1e-7\n", 3, "positive"),
        (HEADER + "1e6,1e-7\n2e6,-1e-7\n3e6,1e-7\n", 3, "positive"),
        (HEADER + "1e6,1e-7\n2e6,nan\n3e6,1e-7\n", 3, "finite"),
        (HEADER + "1e6,1e-7\n2e6,inf\n3e6,1e-7\n", 3, "finite"),
        (HEADER + "1e6,1e-7\n2e6,abc\n3e6,1e-7\n", 3, "not a number"),
        (HEADER + "1e6,1e-7\n2e6\n3e6,1e-7\n", 3, "fields"),
        (HEADER + "1e6,1e-7\n2e6,1e-7\n", None, "too few points"),
        ("sensitivity_v_per_pa\n1e-7\n1e-7\n1e-7\n", 1, "missing column"),
        ("frequency_hz\n1\n2\n3\n", 1, "magnitude column"),
        ("frequency_hz,sensitivity_v_per_pa,colour\n1,1,1\n", 1, "unknown column"),
        ("frequency_hz,frequency_hz,sensitivity_v_per_pa\n", 1, "more than once"),
        ("frequency_hz,sensitivity_v_per_pa,sensitivity_db_re_1v_per_upa\n", 1, "exactly one"),
        ("frequency_hz,sensitivity_v_per_pa,phase_deg,phase_rad\n", 1, "not both"),
        ("frequency_hz,sensitivity_v_per_pa,phase_deg\n1,1,0\n2,1,nan\n3,1,0\n", 3, "phase"),
        (HEADER + "-1e6,1e-7\n2e6,1e-7\n3e6,1e-7\n", 2, ">= 0"),
        ("frequency_hz,sensitivity_db_re_1v_per_upa\n1,-260\n2,-9000\n3,-260\n", 3, "positive"),
    ],
)
def test_bad_files_name_line_and_problem(text, line, words):
    with pytest.raises(CalibrationError) as info:
        parse_calibration(text, source="bad.csv")
    err = info.value
    assert err.source == "bad.csv"
    assert err.line == line
    assert words in err.problem
    assert str(err).startswith("bad.csv")


_TOKENS = st.sampled_from([
    "frequency_hz", "sensitivity_v_per_pa", "sensitivity_db_re_1v_per_upa", "phase_deg",
    "phase_rad", "1e6", "2e6", "-1", "0", "nan", "inf", "-260", "1e-7", "x", "", " ",
    "1e400", "#", "3e6", "1_0", "0x10",
])
_LINE = st.one_of(st.lists(_TOKENS, max_size=5).map(",".join), st.text(max_size=20))


@settings(max_examples=300, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.lists(_LINE, max_size=8))
def test_any_file_parses_or_gives_calibration_error(lines):
    # property: the loader never fails with anything but its typed error
    try:
        cal = parse_calibration("\n".join(lines))
    except CalibrationError:
        return
    assert np.all(np.diff(cal.frequency_hz) > 0)
    assert np.all(np.isfinite(cal.sensitivity_v_per_pa))
    assert np.all(np.abs(cal.sensitivity_v_per_pa) > 0)


@settings(max_examples=200, deadline=None)
@given(st.integers(0, len(GOOD) - 1), st.text(max_size=3), st.integers(0, 3))
def test_mutated_good_file_parses_or_gives_calibration_error(pos, insert, cut):
    # property: a good file with a few characters changed still gives only the typed error
    text = GOOD[:pos] + insert + GOOD[pos + cut:]
    try:
        parse_calibration(text)
    except CalibrationError:
        pass


def test_very_narrow_band_stays_bounded():
    # a (useless) calibration 1 uHz wide must not make the phase estimate explode
    cal = parse_calibration(HEADER + "1e6,1e-7\n1.000000000001e6,2e-7\n1.000000000002e6,1e-7\n")
    assert np.all(np.isfinite(cal.phase_rad))


# -- plausibility: a mistyped row is refused, not divided by ----------------------------

def _typo_table(bad_row: int | None = 4, bad_value: str = "-51.6") -> str:
    rows = ["# invented test hydrophone, flat at -251.6 dB re 1 V/uPa",
            "frequency_hz,sensitivity_db_re_1v_per_upa,phase_deg"]
    for i in range(8):
        level = bad_value if i == bad_row else "-251.6"
        rows.append(f"{(i + 1) * 1e6!r},{level},{-10.0 * i!r}")
    return "\n".join(rows) + "\n"


class TestPlausibility:
    def test_typo_of_200_db_is_refused_naming_file_line_and_values(self, tmp_path):
        path = tmp_path / "cal.csv"
        path.write_text(_typo_table())
        with pytest.raises(CalibrationError) as info:
            load_calibration(path)
        err = info.value
        # data rows start on line 3: the fifth row (index 4) is line 7
        assert err.source == str(path) and err.line == 7
        assert "-51.6 dB re 1 V/uPa" in err.problem
        assert "-251.6 dB re 1 V/uPa on line 6" in err.problem
        assert "back to -251.6 dB re 1 V/uPa on line 8" in err.problem
        assert "+200.0 dB" in err.problem and "at most 20 dB" in err.problem
        assert "max_step_db" in err.problem
        assert str(err).startswith(f"{path}, line 7:")

    def test_the_step_limit_is_inclusive_and_settable(self):
        text = HEADER + "1e6,1e-7\n2e6,1e-6\n3e6,1e-6\n"   # one 20 dB step
        assert parse_calibration(text).magnitude_v_per_pa[1] == pytest.approx(1e-6)
        with pytest.raises(CalibrationError, match="steps by \\+20.0 dB"):
            parse_calibration(text, max_step_db=19.9)
        step = HEADER + "1e6,1e-7\n2e6,1e-5\n3e6,1e-5\n"   # 40 dB
        with pytest.raises(CalibrationError) as info:
            parse_calibration(step, source="s.csv")
        assert info.value.line == 3 and "1e-05 V/Pa" in info.value.problem
        assert "1e-07 V/Pa on line 2" in info.value.problem
        assert parse_calibration(step, max_step_db=40.5).band_hz == (1e6, 3e6)

    def test_relaxed_check_loads_the_typo(self, tmp_path):
        path = tmp_path / "cal.csv"
        path.write_text(_typo_table())
        cal = load_calibration(path, max_step_db=float("inf"))
        levels = v_per_pa_to_db_re_1v_per_upa(cal.magnitude_v_per_pa)
        assert levels[4] == pytest.approx(-51.6) and levels[3] == pytest.approx(-251.6)

    def test_a_bad_end_row_is_caught(self):
        with pytest.raises(CalibrationError) as info:
            parse_calibration(_typo_table(bad_row=7))
        assert info.value.line == 10 and "-51.6" in info.value.problem
        with pytest.raises(CalibrationError) as info:
            parse_calibration(_typo_table(bad_row=0))
        assert info.value.line == 4 and "-51.6 dB re 1 V/uPa on line 3" in info.value.problem

    def test_step_limit_must_be_positive(self):
        with pytest.raises(ValueError, match="max_step_db"):
            parse_calibration(GOOD, max_step_db=0.0)

    def test_wrapped_phase_steps_are_wraps(self):
        # a delay of 0.2 us: -72 degrees per MHz, written wrapped into -180..180
        f = np.arange(1, 9) * 1e6
        wrapped = np.rad2deg(np.angle(np.exp(-2j * np.pi * f * 0.2e-6)))
        rows = "".join(f"{a!r},1e-7,{b!r}\n" for a, b in zip(f.tolist(), wrapped.tolist(),
                                                               strict=True))
        cal = parse_calibration("frequency_hz,sensitivity_v_per_pa,phase_deg\n" + rows)
        assert np.diff(np.rad2deg(cal.phase_rad)) == pytest.approx(np.full(7, -72.0))
        # the same wraps written in 0..360
        rows = "".join(f"{a!r},1e-7,{b % 360.0!r}\n" for a, b in zip(f.tolist(), wrapped.tolist(),
                                                                       strict=True))
        cal = parse_calibration("frequency_hz,sensitivity_v_per_pa,phase_deg\n" + rows)
        assert np.diff(np.rad2deg(cal.phase_rad)) == pytest.approx(np.full(7, -72.0))

    def test_unwrapped_phase_that_jumps_more_than_half_a_turn_is_refused(self):
        # unwrapped phase (it leaves -180..180), with one row mistyped by 250 degrees
        text = ("frequency_hz,sensitivity_v_per_pa,phase_deg\n"
                "1e6,1e-7,-100\n2e6,1e-7,-200\n3e6,1e-7,-550\n4e6,1e-7,-400\n")
        with pytest.raises(CalibrationError) as info:
            parse_calibration(text, source="p.csv")
        assert info.value.line == 4
        assert "phase_deg = -550.0 steps by -350.0 degrees from -200.0 on line 3" in \
            info.value.problem
        assert "check_phase_steps" in info.value.problem
        # without the check, unwrapping quietly reads -550 as -190 (a wrap of one turn)
        cal = parse_calibration(text, check_phase_steps=False)
        assert np.rad2deg(cal.phase_rad)[2] == pytest.approx(-190.0)

    def test_unwrapped_phase_in_radians_is_checked_too(self):
        text = ("frequency_hz,sensitivity_v_per_pa,phase_rad\n"
                "1e6,1e-7,-3.0\n2e6,1e-7,-4.0\n3e6,1e-7,-8.0\n")
        with pytest.raises(CalibrationError, match="phase_rad = -8.0 steps by -229.2 degrees"):
            parse_calibration(text)
        smooth = ("frequency_hz,sensitivity_v_per_pa,phase_rad\n"
                  "1e6,1e-7,-3.0\n2e6,1e-7,-4.0\n3e6,1e-7,-5.0\n")
        assert parse_calibration(smooth).phase_source == "measured"
class TestDeclaredLoad:
    ROWS = "frequency_hz,sensitivity_v_per_pa\n1e6,1e-7\n2e6,1e-7\n3e6,1e-7\n"

    def test_nothing_declared_is_open_circuit(self):
        load = parse_calibration("# from the certificate\n" + self.ROWS).load
        assert load.kind == "open-circuit" and not load.declared

    def test_end_of_cable_with_its_input(self):
        text = ("# calibration_kind = end-of-cable\n"
                "#calibration_input_resistance_ohm=1e6\n"
                "# calibration_input_capacitance_f = 20e-12\n" + self.ROWS)
        load = parse_calibration(text).load
        assert load.kind == "end-of-cable" and load.declared
        assert load.input_resistance_ohm == 1e6 and load.input_capacitance_f == 20e-12

    @pytest.mark.parametrize(("line", "words"), [
        ("# calibration_kind = loaded", "open-circuit"),
        ("# calibration_input_resistance = 1e6", "unknown declaration"),
        ("# calibration_input_capacitance_f = twenty", "not a number"),
        ("# calibration_input_resistance_ohm = -5", "positive"),
    ])
    def test_bad_declarations_name_the_line(self, line, words):
        with pytest.raises(CalibrationError, match=words) as info:
            parse_calibration(line + "\n" + self.ROWS)
        assert info.value.line == 1

    def test_declared_twice(self):
        text = "# calibration_kind = open-circuit\n# calibration_kind = end-of-cable\n"
        with pytest.raises(CalibrationError, match="declared twice"):
            parse_calibration(text + self.ROWS)

    def test_declaration_reaches_the_conversion(self):
        # into the certificate's own input an end-of-cable calibration is used as it stands
        from tankside.monitor.acoustics.deconvolve import loaded_sensitivity
        from tankside.monitor.acoustics.loading import Loading

        text = ("# calibration_kind = end-of-cable\n# calibration_input_resistance_ohm = 1e6\n"
                + self.ROWS)
        cal = parse_calibration(text)
        same = Loading(100e-12, input_resistance_ohm=1e6)
        f = np.array([1.5e6, 2.5e6])
        np.testing.assert_allclose(loaded_sensitivity(cal, same, f), 1e-7, rtol=1e-12)
        assert abs(loaded_sensitivity(parse_calibration(self.ROWS), same, f)[0]) < 1e-7
