"""The simulated acoustic scene: Fubini harmonics, beam, drive, hydrophone filtering."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.optimize import brentq
from scipy.special import jv

from tankside.simulators.hydrophone import HydrophoneModel
from tankside.simulators.scene import (
    Drive,
    Scene,
    SceneParameters,
    acoustic_pressure_pa,
    beam_factor,
    beam_truth,
    burst_envelope,
    filter_by_response,
    fubini_coefficients,
    shock_distance_m,
)


def implicit_simple_wave(theta, sigma):
    """Lossless plane simple wave y = sin(theta + sigma y), solved point by point.

    Fubini's series is the Fourier series of this implicit (Poisson/Earnshaw) solution
    below the shock distance (Hamilton and Blackstock, Nonlinear Acoustics, 1998, ch. 4).
    """
    return np.array([brentq(lambda y, t=t: y - np.sin(t + sigma * y), -1.0, 1.0, xtol=1e-14)
                     for t in theta])


class TestFubini:
    @pytest.mark.parametrize("sigma", [0.05, 0.3, 0.7, 1.0])
    def test_coefficients_against_scipy_special_jv(self, sigma):
        n = np.arange(1, 16)
        expected = 2 * jv(n, n * sigma) / (n * sigma)  # Fubini (1935); Blackstock (1966)
        np.testing.assert_allclose(fubini_coefficients(sigma, 15), expected, rtol=1e-12)

    def test_small_sigma_limit(self):
        b = fubini_coefficients(np.array([0.0, 1e-3]), 4)
        np.testing.assert_allclose(b[:, 0], [1, 0, 0, 0])
        # Quasi-linear growth of the second harmonic, p2/p1 = sigma/2 for sigma << 1
        # (Hamilton and Blackstock 1998, ch. 4).
        assert b[1, 1] / b[0, 1] == pytest.approx(0.5e-3, rel=1e-3)

    def test_fundamental_at_the_shock_distance(self):
        # B_1(1) = 2 J_1(1) = 0.880101... (J_1(1) = 0.4400505857, Abramowitz and Stegun
        # table 9.1; value recalled from memory).
        assert fubini_coefficients(1.0, 1)[0] == pytest.approx(0.8801011714, abs=1e-9)

    @pytest.mark.parametrize("sigma", [0.2, 0.6, 0.9])
    def test_series_sums_to_the_implicit_solution(self, sigma):
        theta = np.linspace(0, 2 * np.pi, 41)
        n = np.arange(1, 201).reshape(-1, 1)
        series = np.sum(fubini_coefficients(sigma, 200)[:, None] * np.sin(n * theta), axis=0)
        np.testing.assert_allclose(series, implicit_simple_wave(theta, sigma), atol=2e-4)

    def test_rejects_sigma_beyond_shock(self):
        with pytest.raises(ValueError):
            fubini_coefficients(1.2, 3)

    def test_shock_distance(self):
        # x_bar = rho c^3 / (beta w p): 1 MPa at 3.5 MHz in water ~ 42 mm (hand calculation).
        x = shock_distance_m(1e6, 3.5e6, beta=3.5, density_kg_per_m3=998.2,
                             sound_speed_m_per_s=1482.0)
        assert x == pytest.approx(998.2 * 1482.0**3 / (3.5 * 2 * np.pi * 3.5e6 * 1e6))
        assert 0.040 < x < 0.044


class TestPulse:
    params = SceneParameters()

    def test_steady_part_of_a_long_burst_follows_fubini(self):
        # At the beam's axial maximum, at the source's centre frequency, the amplitude is
        # exactly pressure_per_vpp_pa * Vpp; sigma = d / x_bar with d the distance there.
        p = self.params
        drive = Drive(amplitude_vpp=5.0, frequency_hz=p.source_centre_hz, burst_cycles=30)
        focus = (0.0, 0.0, beam_truth(drive.frequency_hz, p).focus_z_m)
        amp = p.pressure_per_vpp_pa * 5.0
        distance = p.focal_distance_m + focus[2]
        sigma = distance / shock_distance_m(
            amp, drive.frequency_hz, beta=p.nonlinearity_beta,
            density_kg_per_m3=p.density_kg_per_m3, sound_speed_m_per_s=p.sound_speed_m_per_s)
        assert 0.3 < sigma < 0.6
        arrival = distance / p.sound_speed_m_per_s
        period = 1 / drive.frequency_hz
        t = arrival + 10 * period + np.linspace(0, period, 50, endpoint=False)
        got = acoustic_pressure_pa(t, drive, focus, p)
        expected = amp * implicit_simple_wave(2 * np.pi * drive.frequency_hz * (t - arrival), sigma)
        np.testing.assert_allclose(got, expected, atol=2e-3 * amp)

    def test_harmonic_content_grows_with_drive(self):
        ratios = []
        dt = 1e-9
        t = 30e-6 + dt * np.arange(20000)
        for vpp in (1.0, 4.0, 9.0):
            drive = Drive(amplitude_vpp=vpp, burst_cycles=20)
            spec = np.abs(np.fft.rfft(acoustic_pressure_pa(t, drive, (0, 0, 0), self.params)))
            f = np.fft.rfftfreq(t.size, dt)
            second = spec[(f > 6e6) & (f < 8e6)].max()
            first = spec[(f > 2.5e6) & (f < 4.5e6)].max()
            ratios.append(second / first)
        assert ratios[0] < ratios[1] < ratios[2]

    def test_output_off_is_silence(self):
        t = np.linspace(0, 60e-6, 1000)
        assert not np.any(acoustic_pressure_pa(t, Drive(output_on=False), (0, 0, 0), self.params))

    def test_arrival_time_and_envelope(self):
        drive = Drive(burst_cycles=3)
        t = np.arange(0, 60e-6, 2e-9)
        p = acoustic_pressure_pa(t, drive, (0, 0, 0.002), self.params)
        nonzero = t[p != 0]
        arrival = (self.params.focal_distance_m + 0.002) / self.params.sound_speed_m_per_s
        assert nonzero[0] == pytest.approx(arrival, abs=4e-9)
        assert nonzero[-1] == pytest.approx(arrival + 3 / drive.frequency_hz, abs=4e-9)

    def test_envelope_bounds(self):
        tau = np.linspace(-1e-6, 3e-6, 4001)
        env = burst_envelope(tau, 2e6, 4)
        assert env.min() == 0 and env.max() == pytest.approx(1.0)
        assert np.all(env[(tau < 0) | (tau > 2e-6)] == 0)


class TestBeam:
    params = SceneParameters()

    def test_pressure_scales_with_the_beam_factor(self):
        # the scene's amplitude is pressure_per_vpp * Vpp * beam factor (the beam itself
        # is checked in tests/test_sim_beam.py); at 0.2 Vpp the Fubini distortion of the
        # peak is below 1e-3
        drive = Drive(amplitude_vpp=0.2, burst_cycles=20)
        f = drive.frequency_hz
        t_rel = np.arange(0, 20 / f, 1 / (64 * f))
        peaks = {}
        for point in ((0.0, 0.0, 0.0), (0.6e-3, 0.0, 0.0), (0.0, 0.6e-3, -2e-3)):
            arrival = (self.params.focal_distance_m + point[2]) / self.params.sound_speed_m_per_s
            peaks[point] = np.abs(acoustic_pressure_pa(arrival + t_rel, drive, point,
                                                       self.params)).max()
        ref = (0.0, 0.0, 0.0)
        for point, peak in peaks.items():
            ratio = beam_factor(point, f, self.params) / beam_factor(ref, f, self.params)
            assert peak / peaks[ref] == pytest.approx(ratio, rel=1e-3), point
        assert peaks[(0.6e-3, 0.0, 0.0)] < peaks[(0.0, 0.6e-3, -2e-3)] < peaks[ref]

    def test_position_moves_the_amplitude(self):
        scene = Scene()
        t = scene.arrival_time_s() + np.arange(0, 2e-6, 2e-9)
        on_axis = np.abs(scene.pressure_pa(t)).max()
        scene.set_position_m(0.5e-3, 0.0, 0.0)
        off_axis = np.abs(scene.pressure_pa(t)).max()
        assert off_axis < on_axis * 0.9


class TestHydrophoneFiltering:
    def test_integer_delay_response_shifts_the_signal(self):
        # A delay of k samples is e^{-j w k dt} under the e^{j w t} convention; compare with
        # a numpy shift.
        rng = np.random.default_rng(3)
        x = np.zeros(256)
        x[20:60] = rng.normal(size=40)
        dt, k = 1e-8, 7
        y = filter_by_response(x, dt, lambda f: np.exp(-2j * np.pi * f * k * dt))
        np.testing.assert_allclose(y, np.concatenate([np.zeros(k), x[:-k]]), atol=1e-12)

    def test_flat_hydrophone_scales_pressure(self):
        flat = HydrophoneModel(sensitivity_v_per_pa=1e-7, highpass_hz=1.0, resonance_hz=1e13)
        scene = Scene(hydrophone=flat)
        t = scene.arrival_time_s() - 1e-6 + 2e-9 * np.arange(2000)
        v = scene.hydrophone_voltage_v(t)
        p = scene.pressure_pa(t)
        np.testing.assert_allclose(v, 1e-7 * p, atol=1e-3 * np.abs(1e-7 * p).max())

    def test_windowed_computation_equals_the_whole_record(self):
        # The scene filters only the stretch the pulse and its ringing occupy; the same
        # pressure filtered over the whole record (numpy FFT, generous padding) agrees.
        scene = Scene()
        dt = 4e-9
        t = scene.arrival_time_s() - 3e-6 + dt * np.arange(20000)
        p = scene.pressure_pa(t)
        nfft = 1 << 16
        whole = np.fft.irfft(np.fft.rfft(p, nfft)
                             * scene.hydrophone.response(np.fft.rfftfreq(nfft, dt)), nfft)[:t.size]
        v = scene.hydrophone_voltage_v(t)
        np.testing.assert_allclose(v, whole, atol=1e-5 * np.abs(whole).max())

    def test_pulse_starting_before_the_record_rings_into_it(self):
        scene = Scene()
        dt = 4e-9
        t = scene.arrival_time_s() + 0.5e-6 + dt * np.arange(2000)
        v = scene.hydrophone_voltage_v(t)
        assert np.abs(v[:50]).max() > 1e-3

    def test_output_off_gives_zero_volts(self):
        scene = Scene(drive=Drive(output_on=False))
        assert not np.any(scene.hydrophone_voltage_v(np.arange(1000) * 4e-9 + 30e-6))

    def test_drive_changes_bump_version(self):
        scene = Scene()
        v0 = scene.version
        scene.set_drive(amplitude_vpp=3.0)
        assert scene.version == v0 + 1 and scene.drive.amplitude_vpp == 3.0
        assert scene.trigger_period_s == Drive().burst_period_s
