"""The IEC 62127-1 narrowband check on a flat and on a resonant response."""

import numpy as np
import pytest
import scipy.signal

from tankside.monitor.acoustics.calibration import parse_calibration
from tankside.monitor.acoustics.converter import Converter
from tankside.monitor.acoustics.loading import Loading
from tankside.monitor.acoustics.narrowband import (
    SensitivityCurve,
    check_band_hz,
    narrowband_check,
)
from tankside.monitor.acoustics.settings import ConversionSettings

M0 = 1e-7
F = np.arange(0.5e6, 45e6 + 1, 0.1e6)
DT = 4e-9
T = np.arange(4096) * DT

# resonant hydrophone model: 2nd-order band-pass at 10 MHz, Q = 5 (scipy.signal.freqs)
WN, Q = 2 * np.pi * 10e6, 5.0
B, A = [M0 * WN / Q, 0.0], [1.0, WN / Q, WN**2]


def calibration(mag, f=F):
    rows = "\n".join(f"{a!r},{b!r}" for a, b in zip(f.tolist(), mag.tolist(), strict=True))
    return parse_calibration("frequency_hz,sensitivity_v_per_pa\n" + rows)


def resonant():
    _, h = scipy.signal.freqs(B, A, worN=2 * np.pi * F)
    return calibration(np.abs(h))


def flat(f=F):
    return calibration(np.full(f.size, M0), f)


S = ConversionSettings()


@pytest.mark.parametrize(("f_awf", "band"), [(2e6, (1e6, 16e6)), (3e6, (1.5e6, 24e6)),
                                            (10e6, (5e6, 40e6)), (6e6, (3e6, 40e6))])
def test_check_band(f_awf, band):
    # IEC 62127-1 (as commonly stated): f_awf/2 to min(40 MHz, 8 f_awf)
    assert check_band_hz(f_awf, S) == pytest.approx(band)


def test_flat_response_passes():
    check = narrowband_check(5e6, SensitivityCurve.build(flat(), Loading()), S)
    assert check.ok and check.covered
    assert check.max_deviation_db == pytest.approx(0.0, abs=1e-9)


def test_resonant_response_fails_with_the_right_deviation():
    check = narrowband_check(10e6, SensitivityCurve.build(resonant(), Loading()), S)
    # reference deviation straight from scipy.signal.freqs over the check band
    f = np.linspace(5e6, 40e6, 20001)
    _, h = scipy.signal.freqs(B, A, worN=2 * np.pi * np.append(f, 10e6))
    level = 20 * np.log10(np.abs(h))
    expected = np.max(np.abs(level[:-1] - level[-1]))
    assert not check.ok
    assert check.max_deviation_db == pytest.approx(expected, abs=0.05)
    assert check.band_hz == pytest.approx((5e6, 40e6))


def test_tolerance_is_a_setting():
    prof = SensitivityCurve.build(resonant(), Loading())
    dev = narrowband_check(10e6, prof, S).max_deviation_db
    assert narrowband_check(10e6, prof, S.replace(narrowband_tolerance_db=dev + 0.1)).ok
    assert not narrowband_check(10e6, prof, S.replace(narrowband_tolerance_db=dev - 0.1)).ok


def test_band_beyond_calibration_fails():
    # the sensitivity beyond the calibration is unknown: failing is the safe verdict
    cal = flat(np.arange(1e6, 20e6 + 1, 0.5e6))
    check = narrowband_check(5e6, SensitivityCurve.build(cal, Loading()), S)
    assert not check.ok and not check.covered
    assert check.max_deviation_db == pytest.approx(0.0, abs=1e-9)
    assert "beyond the calibration" in check.reason


def test_loading_counts_in_the_check():
    # 100 pF into 50 ohm is a strong high-pass: |M_L| rises ~ f across 2.5-20 MHz
    prof = SensitivityCurve.build(flat(), Loading(100e-12, input_resistance_ohm=50.0))
    assert not narrowband_check(5e6, prof, S).ok


def pulse(fc):
    return scipy.signal.gausspulse(T - 8e-6, fc=fc, bw=0.5)


class TestAuto:
    def test_flat_uses_narrowband(self):
        v = M0 * 1e6 * pulse(5e6)
        r = Converter(flat()).process(v, DT)
        assert r.method == "narrowband" and r.narrowband.ok
        # the baseline (mean of the quiet part) of this noise-free trace is ~0: v / M0
        assert abs(r.noise.baseline_v) < 1e-12 * np.abs(v).max()
        np.testing.assert_allclose(r.pressure_pa, v / M0, rtol=1e-12, atol=1e-9)

    def test_resonant_uses_deconvolution(self):
        _, v, _ = scipy.signal.lsim((B, A), 1e6 * pulse(10e6), T)
        r = Converter(resonant()).process(v, DT)
        assert r.method == "deconvolve" and not r.narrowband.ok

    def test_forced_narrowband_divides_by_sensitivity_at_awf(self):
        _, v, _ = scipy.signal.lsim((B, A), 1e6 * pulse(10e6), T)
        r = Converter(resonant(), settings=S.replace(method="narrowband")).process(v, DT)
        _, h = scipy.signal.freqs(B, A, worN=[2 * np.pi * r.acoustic_working_frequency_hz])
        assert r.method == "narrowband" and not r.narrowband.ok
        # 0.1 MHz calibration steps interpolated near the resonance: within 0.2 %
        peak = np.abs(v).max() / abs(h[0])
        np.testing.assert_allclose(r.pressure_pa, v / abs(h[0]), rtol=2e-3, atol=1e-9 * peak)
