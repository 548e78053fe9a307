"""Known pressure through analytic hydrophones and back, at the shipped defaults.

The pressure pulses, the hydrophone models, their calibrations and the true parameters
come from numpy and scipy.signal (tests/hydrophone_models.py); the definitions are those
of IEC 62127-1 (peak pressures, f_awf, PII, pulse duration). The accuracy targets are
those set for the project (issue 9): at 40 dB SNR p_r and p_c within 3 %, f_awf within
2 %, PII within 6 %, pulse duration within 10 %; at 30 dB p_r within 6 %; the spread of
p_r across four unlike hydrophones at 40 dB under 3 %. SNR is the voltage peak over the
RMS of white Gaussian noise added to the hydrophone voltage.
"""

import numpy as np
import pytest
from hydrophone_models import DT, MODELS, N, calibration, clean_voltage, errors, noisy, truth

from tankside.monitor.acoustics.converter import Converter
from tankside.monitor.acoustics.doubts import WarningCode
from tankside.monitor.acoustics.settings import ConversionSettings

SEEDS = range(4)
AT_40_DB = {"p_c": 0.03, "p_r": 0.03, "f_awf": 0.02, "pii": 0.06, "pd": 0.10}


def convert(model, v, *, settings=None, **cal):
    return Converter(calibration(model, **cal), settings=settings).process(v, DT)


def codes(result):
    return {w.code for w in result.warnings}


def assert_within(err, limits, what=""):
    bad = {k: f"{100 * err[k]:+.2f} %" for k, lim in limits.items() if abs(err[k]) > lim}
    assert not bad, f"{what}: {bad} (limits {limits})"


@pytest.mark.parametrize("model", MODELS)
def test_noise_free_round_trip(model):
    r = convert(model, clean_voltage(model, "gauss"))
    assert r.method == "deconvolve"       # measured phase: auto deconvolves
    assert_within(errors(r, "gauss"), {"p_c": 0.005, "p_r": 0.005, "f_awf": 0.002,
                                       "pii": 0.005, "pd": 0.005}, model)
    assert codes(r) == {WarningCode.MI_NOT_DERATED}


@pytest.mark.parametrize("model", MODELS)
@pytest.mark.parametrize("snr_db", [60, 40])
def test_white_noise_at_60_and_40_db(model, snr_db):
    for seed in SEEDS:
        r = convert(model, noisy(clean_voltage(model, "gauss"), snr_db, seed))
        assert_within(errors(r, "gauss"), AT_40_DB, f"{model} {snr_db} dB seed {seed}")
        assert r.snr_db == pytest.approx(snr_db, abs=0.5)
        assert WarningCode.LOW_SNR not in codes(r)


@pytest.mark.parametrize("model", MODELS)
def test_white_noise_at_30_db(model):
    for seed in SEEDS:
        r = convert(model, noisy(clean_voltage(model, "gauss"), 30, seed))
        assert abs(errors(r, "gauss")["p_r"]) < 0.06, f"{model} seed {seed}"


def test_spread_across_four_hydrophones_at_40_db():
    # the same pulse seen by four unlike hydrophones must give the same p_r
    for seed in SEEDS:
        p_r = [convert(m, noisy(clean_voltage(m, "gauss"), 40, seed)).peak_rarefactional_pa
               for m in MODELS]
        spread = (max(p_r) - min(p_r)) / np.mean(p_r)
        assert spread < 0.03, f"seed {seed}: {100 * spread:.2f} %"


@pytest.mark.parametrize("model", ["resonant", "needle"])
def test_late_echo_is_gated_out(model):
    # an echo of -0.3 at +10 us (a reflection in the tank) is not part of the pulse
    v = clean_voltage(model, "gauss", echo=True)
    for seed in SEEDS:
        r = convert(model, noisy(v, 40, seed))
        assert_within(errors(r, "gauss"), AT_40_DB, f"{model} seed {seed}")
        assert WarningCode.GATED_OUT_ARRIVALS in codes(r)
        assert r.gate.end_s < 8e-6 + 10e-6 - 1e-6


@pytest.mark.parametrize("method", ["deconvolve", "narrowband"])
def test_dc_offset_is_removed(method):
    # 5 % of the voltage peak as a DC offset changes nothing (the issue saw p_r -11 % and
    # PII +38 % on the narrowband path). The membrane model is flat enough for the
    # narrowband approximation (its check passes at 5 MHz with a magnitude-only file);
    # that approximation's own error here (+1.8 % on p_r noise-free, from the phase of
    # the 0.2 MHz high-pass) is not the offset's.
    cal = {} if method == "deconvolve" else {"phase": False}
    s = ConversionSettings(method=method)
    clean = clean_voltage("membrane", "gauss")
    for seed in SEEDS:
        plain = convert("membrane", noisy(clean, 40, seed), settings=s, **cal)
        r = convert("membrane", noisy(clean, 40, seed, offset_fraction=0.05), settings=s, **cal)
        assert r.method == method
        if method == "narrowband":
            assert r.narrowband.ok
        assert r.noise.baseline_v == pytest.approx(0.05 * np.abs(clean).max(), rel=0.02)
        for key, value in errors(r, "gauss").items():
            assert value == pytest.approx(errors(plain, "gauss")[key], abs=1e-4), key
        if method == "deconvolve":
            assert_within(errors(r, "gauss"), AT_40_DB, f"seed {seed}")


def test_long_pre_trigger_stretch():
    # 240 us of noise before the pulse (a record of 65,536 samples)
    n = 65536
    centre = (n - 1500) * DT
    v = clean_voltage("resonant", "gauss", n=n, centre_s=centre)
    for seed in SEEDS[:2]:
        r = convert("resonant", noisy(v, 40, seed))
        assert_within(errors(r, "gauss", centre), AT_40_DB, f"seed {seed}")
        assert r.gate.samples < 2000


@pytest.mark.parametrize("model", MODELS)
def test_one_cycle_pulse(model):
    # a flat-topped spectrum from about 2 to 9 MHz: its -3 dB points move 0.4 MHz for
    # 0.1 dB, so f_awf is held to 10 % here; the other figures to the 40 dB targets
    for seed in SEEDS:
        r = convert(model, noisy(clean_voltage(model, "one-cycle"), 40, seed))
        assert_within(errors(r, "one-cycle"), {**AT_40_DB, "f_awf": 0.10}, f"{model} {seed}")


def test_one_cycle_pulse_zero_crossing_falls_back_to_the_spectrum():
    s = ConversionSettings(awf_method="zero-crossing")
    r = convert("resonant", noisy(clean_voltage("resonant", "one-cycle"), 40, 0), settings=s)
    assert r.awf_method == "spectrum"
    assert WarningCode.AWF_SPECTRUM_FALLBACK in codes(r)
    assert abs(errors(r, "one-cycle")["p_r"]) < 0.03


@pytest.mark.parametrize("model", MODELS)
def test_twenty_cycle_burst(model):
    s = ConversionSettings(awf_method="zero-crossing")
    for seed in SEEDS:
        v = noisy(clean_voltage(model, "burst"), 40, seed)
        r = convert(model, v)
        assert_within(errors(r, "burst"), AT_40_DB, f"{model} seed {seed}")
        zc = convert(model, v, settings=s)
        assert zc.awf_method == "zero-crossing"
        assert zc.acoustic_working_frequency_hz == pytest.approx(3e6, rel=0.005)


@pytest.mark.parametrize("model", ["resonant", "membrane", "needle"])
def test_strongly_nonlinear_pulse(model):
    # harmonics of 3 MHz to 36 MHz; calibrations to 60 MHz, as for hydrophones meant for
    # such fields. p_r is about a quarter of p_c, so 40 dB on the peak is about 29 dB on
    # p_r: held to the 30 dB figure (6 %). The band-limited model is left out: it is
    # 34 dB down at 36 MHz, so at 40 dB those harmonics are under the noise and no
    # method can restore them (its passband, reported, stops below them).
    for seed in SEEDS:
        v = noisy(clean_voltage(model, "peaked"), 40, seed)
        r = convert(model, v, top_hz=60e6)
        assert_within(errors(r, "peaked"), {**AT_40_DB, "p_r": 0.06}, f"{model} {seed}")
        assert r.passband_hz[1] > 33e6


def test_nonlinear_pulse_narrowband_is_far_off_where_deconvolution_is_not():
    # the observation: the narrowband approximation on a flat-ish hydrophone
    # misses p_c of a distorted pulse by 10-20 %; deconvolution does not
    v = noisy(clean_voltage("needle", "peaked"), 60, 0)
    nb = convert("needle", v, settings=ConversionSettings(method="narrowband"), top_hz=60e6)
    dc = convert("needle", v, top_hz=60e6)
    assert abs(errors(nb, "peaked")["p_c"]) > 0.05
    assert abs(errors(dc, "peaked")["p_c"]) < 0.01


def test_auto_deconvolves_with_a_measured_phase_and_narrowband_only_without():
    v = noisy(clean_voltage("membrane", "gauss"), 50, 0)
    assert convert("membrane", v).method == "deconvolve"
    r = convert("membrane", v, phase=False)
    assert r.method == "narrowband" and r.narrowband.ok
    assert r.phase_source == "minimum-phase" and r.phase_p_r_spread is None


def test_phase_estimated_gives_the_spread_between_assumptions():
    s = ConversionSettings(method="deconvolve")
    r = convert("resonant", noisy(clean_voltage("resonant", "gauss"), 50, 0), settings=s,
                phase=False)
    assert WarningCode.PHASE_ESTIMATED in codes(r)
    assert 0.01 < r.phase_p_r_spread < 0.5
    message = next(w.message for w in r.warnings if w.code == WarningCode.PHASE_ESTIMATED)
    assert f"{100 * r.phase_p_r_spread:.1f} %" in message
    # the model is minimum phase, so the estimate in use is close to the truth
    assert abs(errors(r, "gauss")["p_r"]) < 0.02


class TestWarnings:
    def test_low_snr_and_its_threshold(self):
        v = noisy(clean_voltage("resonant", "gauss"), 17, 0)
        r = convert("resonant", v)
        assert WarningCode.LOW_SNR in codes(r)
        r = convert("resonant", v, settings=ConversionSettings(low_snr_db=15))
        assert WarningCode.LOW_SNR not in codes(r)

    def test_mi_not_derated_and_the_depth_beside_mi(self):
        v = clean_voltage("resonant", "gauss")
        r = convert("resonant", v)
        assert WarningCode.MI_NOT_DERATED in codes(r)
        assert r.to_json_dict()["derating_depth_m"] is None
        d = convert("resonant", v, settings=ConversionSettings(derating_depth_m=0.05))
        assert WarningCode.MI_NOT_DERATED not in codes(d)
        assert d.to_json_dict()["derating_depth_m"] == 0.05
        # IEC 62359: 0.3 dB/cm/MHz at 5 cm and 5 MHz is 7.5 dB
        assert d.mechanical_index == pytest.approx(r.mechanical_index * 10 ** (-7.5 / 20),
                                                   rel=1e-3)

    def test_pulse_at_record_edge(self):
        v = noisy(clean_voltage("resonant", "gauss", centre_s=0.4e-6), 40, 0)
        r = convert("resonant", v)
        assert WarningCode.PULSE_AT_RECORD_EDGE in codes(r)
        assert r.gate.start == 0

    def test_energy_beyond_calibration(self):
        # a 5 MHz pulse (-6 dB at 3.5 MHz) with a calibration from 4 MHz only
        v = noisy(clean_voltage("membrane", "gauss"), 40, 0)
        r = convert("membrane", v, low_hz=4e6)
        assert WarningCode.ENERGY_BEYOND_CALIBRATION in codes(r)
        assert WarningCode.ENERGY_BEYOND_CALIBRATION not in codes(convert("membrane", v))

    def test_warnings_in_json(self):
        j = convert("resonant", noisy(clean_voltage("resonant", "gauss"), 17, 0)).to_json_dict()
        assert {"code": "low_snr"} .items() <= j["warnings"][0].items()
        assert all(set(w) == {"code", "message"} for w in j["warnings"])


def test_explicit_gate_is_used_and_reported():
    # a gate that leaves out the pulse's second half changes PII, and says so
    v = noisy(clean_voltage("resonant", "gauss"), 50, 0)
    full = convert("resonant", v)
    s = ConversionSettings(gate_start_s=6e-6, gate_end_s=8e-6)
    half = convert("resonant", v, settings=s)
    assert not half.gate.automatic
    assert half.gate.start_s == pytest.approx(6e-6) and half.gate.end_s == pytest.approx(8e-6)
    assert half.to_json_dict()["gate"] == {"start_s": pytest.approx(6e-6),
                                           "end_s": pytest.approx(8e-6), "automatic": False}
    ratio = half.pulse_intensity_integral_j_per_m2 / full.pulse_intensity_integral_j_per_m2
    assert 0.3 < ratio < 0.7


def test_truth_of_the_gaussian_pulse_against_its_closed_form():
    # guard on the references themselves: for p = A exp(-t^2/(2 s^2)) cos(w t) with
    # w s >> 1, int p^2 dt = A^2 s sqrt(pi) / 2 (the cos^2 term averages to 1/2); and
    # the pulse duration is 1.25 * 2 * s * erfinv(0.8) (scipy.special) up to the ripple
    from scipy.special import erfinv

    fc, bw = 5e6, 0.6
    # scipy.signal.gausspulse: envelope exp(-a t^2), a = -(pi fc bw)^2 / (4 ln(10^(-6/20)))
    a = -((np.pi * fc * bw) ** 2) / (4.0 * np.log(10 ** (-6 / 20)))
    s = 1 / np.sqrt(2 * a)
    t = truth("gauss")
    assert t["pii"] * 998.2067 * 1482.38 == pytest.approx(1e12 * s * np.sqrt(np.pi) / 2, rel=0.01)
    assert t["pd"] == pytest.approx(2.5 * s * erfinv(0.8), rel=0.05)
    assert t["p_c"] == pytest.approx(1e6)


def test_record_length_and_step_of_the_models():
    assert clean_voltage("resonant", "gauss").shape == (N,)
