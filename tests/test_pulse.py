"""Pulse parameters (IEC 62127-1) and mechanical index (IEC 62359) on analytic pulses."""

import math

import numpy as np
import pytest
import scipy.signal

from tankside.monitor.acoustics.pulse import (
    UnusableTraceError,
    awf_spectrum_hz,
    awf_zero_crossing_hz,
    derated_pa,
    mechanical_index,
    pulse_bounds_s,
    pulse_parameters,
)

DT = 1e-9  # 200 samples per 5 MHz cycle
RHO_C = 998.2 * 1482.4


def tone_burst(cycles=10, f0=5e6, amplitude=1e6, n=8192, start=1e-6):
    t = np.arange(n) * DT
    on = (t >= start) & (t < start + cycles / f0)
    return np.where(on, amplitude * np.sin(2 * np.pi * f0 * (t - start)), 0.0)


class TestToneBurst:
    # 10 cycles of 5 MHz at 1 MPa (worked example in the project's issue 2):
    # int p^2 dt = (1e6 Pa)^2 / 2 * 2e-6 s = 1e6 Pa^2 s; the running integral of sin^2
    # reaches 10 % after exactly 1 cycle and 90 % after 9, so PD = 1.25 * 1.6 us = 2.0 us
    def setup_method(self):
        self.p = tone_burst()
        f = np.fft.rfftfreq(self.p.size, DT)
        self.f_awf = awf_spectrum_hz(f, np.abs(np.fft.rfft(self.p)))
        self.params = pulse_parameters(self.p, DT, self.f_awf, impedance_rayl=RHO_C)

    def test_energy_and_pii(self):
        _, _, energy = pulse_bounds_s(self.p, DT)
        assert energy == pytest.approx(1e6, rel=1e-3)
        assert self.params.pulse_intensity_integral_j_per_m2 == pytest.approx(1e6 / RHO_C,
                                                                              rel=1e-3)

    def test_pulse_duration(self):
        assert self.params.pulse_duration_s == pytest.approx(2.0e-6, rel=2e-3)

    def test_pulse_average_intensity(self):
        p = self.params
        assert p.pulse_average_intensity_w_per_m2 == pytest.approx(
            p.pulse_intensity_integral_j_per_m2 / p.pulse_duration_s, rel=1e-12)

    def test_peaks(self):
        assert self.params.peak_compressional_pa == pytest.approx(1e6, rel=1e-4)
        assert self.params.peak_rarefactional_pa == pytest.approx(1e6, rel=1e-4)

    def test_awf_spectrum_near_5_mhz(self):
        assert self.f_awf == pytest.approx(5e6, rel=0.01)

    def test_awf_zero_crossing(self):
        b = self.params
        assert awf_zero_crossing_hz(self.p, DT, b.pulse_start_s, b.pulse_end_s) == \
            pytest.approx(5e6, rel=0.005)


def test_awf_of_gaussian_pulse_from_scipy():
    # scipy.signal.gausspulse with bw=0.5 at bwr=-3 dB has its -3 dB points at
    # fc (1 -/+ 0.25): their mean is fc (reference: scipy.signal.gausspulse)
    t = (np.arange(8192) - 4096) * DT
    p = scipy.signal.gausspulse(t, fc=4e6, bw=0.5, bwr=-3)
    mag = np.abs(np.fft.rfft(p))
    assert awf_spectrum_hz(np.fft.rfftfreq(t.size, DT), mag) == pytest.approx(4e6, rel=0.005)


def test_awf_upper_point_limited_to_three_times_f1():
    # IEC 62127-1 (as commonly stated): f2 is sought no higher than 3 f1
    f = np.linspace(0, 100e6, 1001)
    mag = np.exp(-(((f - 2e6) / 0.5e6) ** 2)) + np.exp(-(((f - 30e6) / 0.5e6) ** 2))
    assert awf_spectrum_hz(f, mag) == pytest.approx(2e6, rel=0.01)


class TestMechanicalIndex:
    # worked example (project issue 2; IEC 62359 derating 0.3 dB/cm/MHz):
    # p_r 2 MPa at 6 cm, 4 MHz -> 7.2 dB -> 0.873 MPa; MI = 0.873 / sqrt(4) = 0.437
    def test_derating(self):
        assert derated_pa(2e6, 4e6, 0.06) == pytest.approx(0.873e6, abs=0.5e3)

    def test_mi(self):
        assert mechanical_index(derated_pa(2e6, 4e6, 0.06), 4e6) == pytest.approx(0.437, abs=5e-4)

    def test_mi_from_parameters_uses_derated_p_r(self):
        t = np.arange(4000) * DT
        p = -2e6 * np.exp(-(((t - 2e-6) / 0.2e-6) ** 2)) * np.cos(2 * np.pi * 4e6 * (t - 2e-6))
        params = pulse_parameters(p, DT, 4e6, impedance_rayl=RHO_C, derating_depth_m=0.06)
        assert params.peak_rarefactional_pa == pytest.approx(2e6, rel=1e-6)
        assert params.mechanical_index == pytest.approx(0.437, abs=5e-4)


def test_p_r_is_a_positive_magnitude():
    p = np.abs(tone_burst())
    params = pulse_parameters(p, DT, 5e6, impedance_rayl=RHO_C)
    assert params.peak_rarefactional_pa == 0.0
    neg = pulse_parameters(-p, DT, 5e6, impedance_rayl=RHO_C)
    assert neg.peak_rarefactional_pa == pytest.approx(1e6, rel=1e-4)
    assert neg.peak_compressional_pa <= 0


def test_zero_and_non_finite_are_unusable():
    with pytest.raises(UnusableTraceError):
        pulse_bounds_s(np.zeros(100), DT)
    with pytest.raises(UnusableTraceError):
        awf_spectrum_hz(np.arange(51.0), np.zeros(51))
    with pytest.raises(UnusableTraceError):
        awf_spectrum_hz(np.arange(51.0), np.full(51, math.nan))
    with pytest.raises(UnusableTraceError):
        awf_zero_crossing_hz(np.ones(100), DT, 0.0, 1e-7)


class TestAwfStability:
    # IEC 62127-1 arithmetic-mean f_awf of two Gaussian humps (3 and 6 MHz, -3 dB
    # half-widths 0.5 MHz): the plain threshold jumps when the 6 MHz hump's top crosses
    # -3 dB; with the blending band the result moves continuously, and away from the
    # threshold it is the standard's value.
    F = np.linspace(0, 20e6, 4001)

    def spectrum(self, ratio):
        hump = lambda fc: np.exp(-np.log(2) / 2 * ((self.F - fc) / 0.5e6) ** 2)  # noqa: E731
        return hump(3e6) + ratio * hump(6e6)

    def sweep(self, blend_db):
        ratios = np.arange(0.60, 0.80, 0.01)
        return np.array([awf_spectrum_hz(self.F, self.spectrum(r), blend_db=blend_db)
                         for r in ratios])

    def test_plain_threshold_jumps(self):
        f = self.sweep(0.0)
        assert np.max(np.abs(np.diff(f)) / f[1:]) > 0.2

    def test_blended_rule_moves_in_small_steps(self):
        f = self.sweep(2.0)
        # 1 % steps of the hump's height move f_awf by at most 3 % (against 40 %)
        assert np.max(np.abs(np.diff(f)) / f[1:]) < 0.03

    @pytest.mark.parametrize(("ratio", "expected"), [(0.5, 3e6), (0.97, 0.5 * (2.5e6 + 6.5e6))])
    def test_away_from_the_threshold_it_is_the_standard(self, ratio, expected):
        # one hump: its -3 dB points 2.5 and 3.5 MHz; both humps fully (the second's top
        # above -1 dB): f1 = 2.5 MHz and f2 = 6.5 MHz (within 3 f1)
        got = awf_spectrum_hz(self.F, self.spectrum(ratio), blend_db=2.0)
        assert got == pytest.approx(expected, rel=0.01)

    def test_near_equal_humps_swap_the_peak_smoothly(self):
        f = [awf_spectrum_hz(self.F, self.spectrum(r), blend_db=2.0) for r in (0.98, 1.0, 1.02)]
        assert max(f) - min(f) < 0.01 * f[1]


class TestZeroCrossingHysteresis:
    # a 10-cycle 5 MHz burst in a window with 2 us of noise on each side
    def burst_with_noise(self, seed=0):
        p = tone_burst(start=3e-6)
        return p + 0.01e6 * np.random.default_rng(seed).standard_normal(p.size)

    def test_noise_adds_crossings_without_hysteresis(self):
        f = awf_zero_crossing_hz(self.burst_with_noise(), DT, 1e-6, 7e-6)
        assert abs(f / 5e6 - 1) > 0.5

    @pytest.mark.parametrize("seed", range(3))
    def test_hysteresis_counts_only_the_pulse(self, seed):
        # 4 noise sigmas: one noise sample in ~16,000 reaches it
        f = awf_zero_crossing_hz(self.burst_with_noise(seed), DT, 1e-6, 7e-6,
                                 hysteresis_pa=0.05e6)
        assert f == pytest.approx(5e6, rel=0.005)

    def test_one_cycle_has_too_few_half_cycles(self):
        p = tone_burst(cycles=1)
        with pytest.raises(UnusableTraceError, match="too few half cycles"):
            awf_zero_crossing_hz(p, DT, 0.5e-6, 2e-6, hysteresis_pa=0.05e6)
