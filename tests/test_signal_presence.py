"""Pulse presence: the robust noise estimate and the peak-over-noise verdict.

The noise scale is the median absolute deviation times 1.4826, a consistent estimate
of a Gaussian standard deviation (Hampel 1974; Rousseeuw and Croux 1993); it is
checked against scipy.stats.median_abs_deviation(scale="normal"), the reference
implementation of the same estimator.
"""

from __future__ import annotations

import numpy as np
import pytest
import scipy.stats

from tankside.monitor.acoustics.presence import (
    MAD_TO_SIGMA,
    pulse_presence,
    robust_sigma,
)

N = 10000
DT_S = 4e-9                      # 250 MS/s
SIGMA_V = 0.3e-3


def noise(seed, n=N, sigma_v=SIGMA_V):
    return np.random.default_rng(seed).normal(0.0, sigma_v, n)


def tone_burst(n=N, *, amplitude_v, start=4000, cycles=3, f_hz=3.5e6):
    """A Hann-windowed tone burst of ``cycles`` cycles starting at sample ``start``."""
    length = int(round(cycles / f_hz / DT_S))
    t = np.arange(length) * DT_S
    burst = amplitude_v * np.sin(2 * np.pi * f_hz * t) * np.hanning(length)
    out = np.zeros(n)
    out[start:start + length] = burst
    return out


def alternating(n, a_v):
    """+a, -a, +a, ...: median 0 and MAD exactly a."""
    return a_v * np.where(np.arange(n) % 2 == 0, 1.0, -1.0)


class TestRobustSigma:
    def test_constant_is_the_gaussian_consistency_factor(self):
        # 1 / Phi^-1(3/4), scipy.stats.norm.ppf as the reference
        assert MAD_TO_SIGMA == pytest.approx(1.0 / scipy.stats.norm.ppf(0.75), rel=1e-5)

    def test_matches_scipy_median_abs_deviation_normal_scale(self):
        x = noise(1, 5001) + 0.02
        ref = scipy.stats.median_abs_deviation(x, scale="normal")
        assert robust_sigma(x) == pytest.approx(ref, rel=1e-5)

    def test_estimates_the_standard_deviation_of_gaussian_noise(self):
        # MAD's asymptotic relative efficiency is 37 % (Rousseeuw and Croux 1993): with
        # 20000 samples its relative standard error is about 0.8 %; allow 4 %.
        assert robust_sigma(noise(2, 20000)) == pytest.approx(SIGMA_V, rel=0.04)

    def test_not_moved_by_a_pulse_on_a_minority_of_samples(self):
        x = noise(3) + tone_burst(amplitude_v=100 * SIGMA_V)
        assert robust_sigma(x) == pytest.approx(robust_sigma(noise(3)), rel=0.05)
        assert np.std(x) > 5 * SIGMA_V        # where the plain standard deviation is not

    def test_empty_is_refused(self):
        with pytest.raises(ValueError, match="at least one sample"):
            robust_sigma([])


class TestPulsePresence:
    @pytest.mark.parametrize("seed", range(20))
    def test_gaussian_noise_alone_is_no_pulse(self, seed):
        verdict = pulse_presence(noise(seed) + 1e-3)       # an offset changes nothing
        assert not verdict.present
        # The largest of 10^4 Gaussian samples is about 3.5 to 4.5 sigma (common practice).
        assert 3.0 < verdict.peak_to_noise < 6.0
        assert verdict.noise_sigma_v == pytest.approx(SIGMA_V, rel=0.15)

    @pytest.mark.parametrize("start", [10, 4000, 9700])
    def test_tone_burst_at_ten_times_the_noise_is_a_pulse(self, start):
        # Wherever the burst sits (even inside one edge window), the other edge is quiet.
        verdict = pulse_presence(noise(7) + tone_burst(amplitude_v=10 * SIGMA_V, start=start))
        assert verdict.present
        assert verdict.peak_to_noise >= 8.0

    def test_weak_burst_below_the_factor_is_no_pulse(self):
        verdict = pulse_presence(noise(8) + tone_burst(amplitude_v=2 * SIGMA_V))
        assert not verdict.present

    @pytest.mark.parametrize("factor", [4.0, 8.0, 12.5])
    def test_boundary_is_inclusive_at_the_factor(self, factor):
        a_v = 1e-3
        trace = alternating(1000, a_v)
        threshold_v = factor * (MAD_TO_SIGMA * a_v)
        at = trace.copy()
        at[500] = threshold_v
        just_below = trace.copy()
        just_below[500] = float(np.nextafter(threshold_v, 0.0))
        v_at = pulse_presence(at, factor=factor)
        assert v_at.present and v_at.threshold_v == threshold_v
        assert v_at.noise_sigma_v == MAD_TO_SIGMA * a_v
        assert not pulse_presence(just_below, factor=factor).present
        # negative excursions count the same (peak of |v - median|); a -a sample is
        # replaced so that the median stays 0
        negative = trace.copy()
        negative[501] = -threshold_v
        assert pulse_presence(negative, factor=factor).present

    def test_verdict_follows_peak_to_noise_for_any_factor(self):
        x = noise(9) + tone_burst(amplitude_v=6 * SIGMA_V)
        ratio = pulse_presence(x).peak_to_noise
        for factor in (0.0, 1.0, 0.99 * ratio, ratio, 1.01 * ratio, 20.0):
            assert pulse_presence(x, factor=factor).present == (ratio >= factor), factor

    def test_quantisation_floor_keeps_one_code_steps_from_being_a_pulse(self):
        # Noise of 0.2 codes rms: almost every sample is code 0, so the MAD is 0.
        lsb_v = 1e-3
        codes = np.rint(noise(10, sigma_v=0.2))
        volts = codes * lsb_v
        assert robust_sigma(volts[:1000]) == 0.0
        assert pulse_presence(volts).present                    # without the floor
        floored = pulse_presence(volts, resolution_v=lsb_v)
        assert not floored.present
        assert floored.noise_sigma_v == pytest.approx(lsb_v / np.sqrt(12.0))
        with_burst = volts + np.rint(tone_burst(amplitude_v=10.0)) * lsb_v
        assert pulse_presence(with_burst, resolution_v=lsb_v).present

    def test_constant_trace_is_no_pulse(self):
        verdict = pulse_presence(np.full(500, 0.25))
        assert not verdict.present and verdict.peak_to_noise == 0.0
        assert not pulse_presence(np.zeros(500), factor=0.0).present

    def test_short_trace_is_estimated_as_a_whole(self):
        trace = alternating(20, 1e-3)
        trace[10] = 0.05
        verdict = pulse_presence(trace)
        assert verdict.noise_sigma_v == MAD_TO_SIGMA * 1e-3
        assert verdict.present

    def test_edge_fraction_chooses_the_noise_windows(self):
        # The first 30 % is louder noise: with 10 % edges the quiet end sets the noise.
        x = noise(11)
        x[:3000] *= 5.0
        narrow = pulse_presence(x, edge_fraction=0.1)
        assert narrow.noise_sigma_v == pytest.approx(SIGMA_V, rel=0.1)
        assert narrow.present                                     # 5x noise stands out

    @pytest.mark.parametrize("kwargs, match", [
        ({"voltage_v": []}, "non-empty 1-D"),
        ({"voltage_v": np.zeros((2, 3))}, "non-empty 1-D"),
        ({"voltage_v": [0.0, np.nan, 1.0]}, "finite"),
        ({"voltage_v": np.zeros(10), "factor": -1.0}, "factor"),
        ({"voltage_v": np.zeros(10), "edge_fraction": 0.0}, "edge_fraction"),
        ({"voltage_v": np.zeros(10), "edge_fraction": 0.6}, "edge_fraction"),
        ({"voltage_v": np.zeros(10), "resolution_v": -1e-3}, "resolution_v"),
    ])
    def test_bad_input_says_what_was_expected(self, kwargs, match):
        with pytest.raises(ValueError, match=match):
            pulse_presence(**kwargs)
