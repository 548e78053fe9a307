"""Baseline, noise level and spectrum, arrivals and the pulse gate, on traces of known make-up.

Noise is numpy's Gaussian generator; coloured noise is that noise through a Butterworth
filter whose power response comes from scipy.signal.sosfreqz; the expected periodogram
level of white noise, E|X_k|^2 = m sigma^2 for m samples, is Parseval's relation.
"""

import numpy as np
import pytest
import scipy.signal

from tankside.monitor.acoustics.noise import explicit_gate, measure_trace

DT = 4e-9
N = 20000
T = np.arange(N) * DT
OPTS = dict(threshold_sigma=2.5, gap_cycles=5.0, margin_cycles=2.0, segment_samples=256)


def pulse(centre, amplitude=1.0, fc=5e6):
    return amplitude * scipy.signal.gausspulse(T - centre, fc=fc, bw=0.6)


def measure(v, **kw):
    return measure_trace(v, DT, 1 / 5e6, **{**OPTS, **kw})


class TestNoiseLevel:
    @pytest.mark.parametrize("seed", range(3))
    def test_white_noise_rms_and_baseline(self, seed):
        sigma, offset = 0.01, 0.05
        rng = np.random.default_rng(seed)
        v = pulse(40e-6) + offset + sigma * rng.standard_normal(N)
        noise, gate = measure(v)
        # the quiet part is ~19,000 samples: RMS within 2 %, mean within 4 standard errors
        assert noise.rms_v == pytest.approx(sigma, rel=0.02)
        assert noise.baseline_v == pytest.approx(offset, abs=4 * sigma / np.sqrt(19000))
        assert noise.quiet_samples > 15000 and noise.segments == 8

    def test_white_noise_spectrum_is_flat_at_its_level(self):
        # one-sided PSD of white noise: 2 sigma^2 dt (Parseval)
        sigma = 0.01
        v = pulse(40e-6) + sigma * np.random.default_rng(5).standard_normal(N)
        noise, _ = measure(v)
        inner = noise.psd_v2_per_hz[3:-3]
        assert np.median(inner) == pytest.approx(2 * sigma ** 2 * DT, rel=0.1)
        # S(f) = PSD / (2 dt) is sigma^2 on average (8 segments, 5-bin smoothing: each
        # frequency within about +/-25 %)
        s = noise.variance_density(np.linspace(1e6, 100e6, 200), DT)
        assert np.mean(s) == pytest.approx(sigma ** 2, rel=0.1)
        assert np.std(s) < 0.35 * sigma ** 2

    def test_coloured_noise_spectrum_follows_the_filter(self):
        # white noise through a 4th-order Butterworth low-pass at 20 MHz: the measured
        # spectrum follows |H|^2 within 2 dB where it is within 20 dB of its top
        sos = scipy.signal.butter(4, 20e6, fs=1 / DT, output="sos")
        w = np.random.default_rng(7).standard_normal(N + 2000)
        coloured = scipy.signal.sosfilt(sos, w)[2000:] * 0.01
        noise, _ = measure(pulse(40e-6) + coloured)
        f, h = scipy.signal.sosfreqz(sos, worN=noise.psd_freqs_hz, fs=1 / DT)
        want = 2 * DT * 1e-4 * np.abs(h) ** 2
        sel = (want > 0.01 * want.max()) & (f > 0) & (f < 0.45 / DT)
        ratio_db = 10 * np.log10(noise.psd_v2_per_hz[sel] / want[sel])
        assert np.max(np.abs(ratio_db)) < 2.0

    def test_echo_is_not_counted_as_noise(self):
        sigma = 0.01
        v = pulse(20e-6) + pulse(50e-6, -0.3) + sigma * np.random.default_rng(2).standard_normal(N)
        noise, gate = measure(v)
        assert noise.rms_v == pytest.approx(sigma, rel=0.03)
        assert len(gate.left_out) == 1
        assert gate.left_out[0].start * DT == pytest.approx(50e-6, abs=1e-6)

    def test_quantised_quiet_record_is_floored_at_the_code_step(self):
        # noise within one code: the MAD is 0; the floor is resolution / sqrt(12)
        code = 1e-3
        rng = np.random.default_rng(1)
        v = np.round((pulse(40e-6) + 1e-5 * rng.standard_normal(N)) / code) * code
        noise, _ = measure(v, resolution_v=code)
        assert noise.rms_v == pytest.approx(code / np.sqrt(12), rel=1e-9)


class TestGate:
    def test_gate_holds_the_pulse_with_its_margin(self):
        v = pulse(40e-6) + 1e-3 * np.random.default_rng(0).standard_normal(N)
        _, gate = measure(v)
        # the envelope at 3.5 sigma of noise is at about +/-0.37 us; 2 cycles margin
        assert 38.8e-6 < gate.start_s < 39.7e-6
        assert 40.3e-6 < gate.end_s < 41.2e-6
        assert gate.automatic and not gate.at_record_edge and gate.left_out == ()

    def test_pulse_at_the_start_touches_the_edge(self):
        v = pulse(0.2e-6) + 1e-3 * np.random.default_rng(0).standard_normal(N)
        _, gate = measure(v)
        assert gate.at_record_edge and gate.start == 0

    def test_explicit_gate(self):
        v = pulse(40e-6) + 1e-3 * np.random.default_rng(0).standard_normal(N)
        _, gate = measure(v, gate_s=(30e-6, 45e-6))
        assert not gate.automatic
        assert gate.start_s == pytest.approx(30e-6) and gate.end_s == pytest.approx(45e-6)

    def test_explicit_gate_outside_the_record(self):
        with pytest.raises(ValueError, match="fewer than two samples"):
            explicit_gate(100, DT, 1.0, 2.0)

    def test_noise_only_finds_no_arrival(self):
        _, gate = measure(1e-3 * np.random.default_rng(3).standard_normal(N))
        assert not gate.arrival_found
