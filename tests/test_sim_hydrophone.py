"""The invented demo hydrophone and its shipped calibration file."""

from __future__ import annotations

import numpy as np
from scipy import signal

from tankside.simulators.hydrophone import (
    CSV_HEADER,
    DEMO_CALIBRATION_PATH,
    HydrophoneModel,
    calibration_csv_text,
    calibration_frequencies_hz,
    write_calibration_csv,
)


def _read(path):
    lines = path.read_text(encoding="utf-8").splitlines()
    comments = [ln for ln in lines if ln.startswith("#")]
    body = [ln for ln in lines if not ln.startswith("#")]
    data = np.array([[float(x) for x in ln.split(",")] for ln in body[1:]])
    return comments, body[0], data


class TestShippedFile:
    def test_file_matches_the_model(self):
        comments, header, data = _read(DEMO_CALIBRATION_PATH)
        assert header == CSV_HEADER
        model = HydrophoneModel()
        f = data[:, 0]
        np.testing.assert_array_equal(f, calibration_frequencies_hz())
        np.testing.assert_allclose(data[:, 1], model.sensitivity_db_re_1v_per_upa(f), atol=6e-5)
        np.testing.assert_allclose(data[:, 2], model.phase_deg(f), atol=6e-4)

    def test_file_is_exactly_what_the_writer_writes(self, tmp_path):
        out = write_calibration_csv(tmp_path / "cal.csv")
        assert out.read_text() == DEMO_CALIBRATION_PATH.read_text()

    def test_marked_invented_with_phase_convention(self):
        comments, _, _ = _read(DEMO_CALIBRATION_PATH)
        text = "\n".join(comments)
        assert "INVENTED" in text
        assert "e^{j w t}" in text

    def test_band_and_plausible_level(self):
        _, _, data = _read(DEMO_CALIBRATION_PATH)
        assert data[0, 0] == 0.5e6 and data[-1, 0] == 40e6
        # Needle hydrophones with preamplifiers sit around -260 .. -250 dB re 1 V/uPa
        # (common practice).
        assert np.all((data[:, 1] > -260) & (data[:, 1] < -248))


class TestModel:
    def test_response_equals_scipy_freqs_of_the_same_analog_filter(self):
        # Reference: scipy.signal.freqs evaluates b(s)/a(s) at s = j w (the e^{j w t} convention).
        m = HydrophoneModel()
        wh = 2 * np.pi * m.highpass_hz
        wr = 2 * np.pi * m.resonance_hz
        b = [m.sensitivity_v_per_pa / wh, 0.0]
        a = np.polymul([1 / wh, 1.0], [1 / wr**2, 1 / (m.quality * wr), 1.0])
        f = np.linspace(0.1e6, 60e6, 300)
        _, h = signal.freqs(b, a, worN=2 * np.pi * f)
        np.testing.assert_allclose(m.response(f), h, rtol=1e-10)

    def test_causal_phase_falls_through_the_resonance(self):
        m = HydrophoneModel()
        # A second-order resonance lags by 90 degrees at its natural frequency (common
        # practice); the high-pass adds a small lead, atan(f_hp / f).
        lead = np.degrees(np.arctan(m.highpass_hz / m.resonance_hz))
        assert np.isclose(m.phase_deg(np.array([m.resonance_hz]))[0], -90 + lead, atol=1e-9)

    def test_db_conversion(self):
        m = HydrophoneModel(sensitivity_v_per_pa=1e-6, highpass_hz=1.0, resonance_hz=1e12)
        # 1 uV/Pa = 1e-12 V/uPa = -240 dB re 1 V/uPa.
        assert np.isclose(m.sensitivity_db_re_1v_per_upa(np.array([1e6]))[0], -240.0, atol=1e-6)

    def test_conjugate_symmetry(self):
        m = HydrophoneModel()
        f = np.array([1e6, 5e6])
        np.testing.assert_allclose(m.response(-f), np.conj(m.response(f)))

    def test_both_magnitude_forms_load_to_the_same_sensitivity(self, tmp_path):
        # Cross-check with the monitor's own calibration loader (written independently).
        from tankside.monitor.acoustics.calibration import load_calibration

        db = load_calibration(write_calibration_csv(tmp_path / "db.csv"))
        vpa = load_calibration(write_calibration_csv(tmp_path / "v.csv", magnitude="v_per_pa"))
        model = HydrophoneModel().response(db.frequency_hz)
        np.testing.assert_allclose(vpa.sensitivity_v_per_pa, db.sensitivity_v_per_pa, rtol=2e-5)
        np.testing.assert_allclose(db.sensitivity_v_per_pa, model, rtol=2e-5)

    def test_text_for_custom_grid(self):
        text = calibration_csv_text(frequency_hz=np.array([1e6, 2e6]))
        assert text.splitlines()[-2].startswith("1000000,")
