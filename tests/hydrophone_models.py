"""Known pressure through analytic hydrophone models, for the conversion tests against the world.

Everything here is built from scipy.signal and numpy, apart from the code under test:

- four unlike hydrophone models as analog transfer functions (scipy.signal), their
  calibrations evaluated with ``scipy.signal.freqs``;
- pressure pulses as analytic functions of time;
- the hydrophone voltage by time-domain simulation (``scipy.signal.lsim``) on a grid 16
  times finer than the record wherever the pressure is not zero (``lsim`` takes its input
  as piecewise linear, which at the record's own step would be a low-pass of its own:
  -7 % at 36 MHz for 4 ns steps), and by exact zero-input steps elsewhere;
- the true pulse parameters from the analytic pressure on a 0.05 ns grid (trapezoid rule,
  the IEC 62127-1 definitions written out here independently of tankside).

The models are invented for the tests; they span the shapes a metrologist meets: a
resonant needle, a flat membrane, a non-minimum-phase needle with a falling low end,
and a steeply band-limited one.
"""

from __future__ import annotations

import functools
import math

import numpy as np
import scipy.signal

from tankside.monitor.acoustics.calibration import parse_calibration

DT = 4e-9          # 250 MS/s
N = 8192           # 32.8 us
M0 = 1e-7          # V/Pa, about -260 dB re 1 V/uPa
FINE = 16          # simulation sub-steps per record step while the pressure is on
RHO_C = 998.2067 * 1482.38   # water at 20 degC (the converter's default temperature)


def _w(f):
    return 2 * np.pi * f


def _mul(*tfs):
    b, a = np.array([1.0]), np.array([1.0])
    for bb, aa in tfs:
        b, a = np.polymul(b, bb), np.polymul(a, aa)
    return b, a


def resonant():
    """2nd-order band-pass at 10 MHz, Q = 2 (minimum phase; |M| goes as f below it)."""
    wn, q = _w(10e6), 2.0
    return [M0 * wn / q, 0.0], [1.0, wn / q, wn ** 2]


def membrane():
    """Flat (+1.2 dB at 40 MHz), a Q = 1 resonance at 60 MHz and a first-order electrical
    high-pass at 0.2 MHz: flat enough for the narrowband approximation at 5 MHz."""
    wr = _w(60e6)
    b, a = _mul(([wr ** 2], [1.0, wr / 1.0, wr ** 2]), ([1.0, 0.0], [1.0, _w(0.2e6)]))
    return M0 * b, a


def needle():
    """First-order high-pass at 3 MHz, 2nd-order low-pass at 25 MHz, and an all-pass
    section with a right-half-plane zero at 20 MHz: not minimum phase."""
    wr = _w(25e6)
    b, a = _mul(([1.0, 0.0], [1.0, _w(3e6)]), ([wr ** 2], [1.0, wr, wr ** 2]),
                ([1.0, -_w(20e6)], [1.0, _w(20e6)]))
    return M0 * b, a


def band_limited():
    """4th-order Bessel low-pass at 15 MHz and 2nd-order Butterworth high-pass at 1.5 MHz
    (34 dB down at 40 MHz: deconvolution there divides by a small number)."""
    lp = scipy.signal.bessel(4, _w(15e6), analog=True, norm="phase")
    hp = scipy.signal.butter(2, _w(1.5e6), "highpass", analog=True)
    b, a = _mul(lp, hp)
    return M0 * b, a


MODELS = {"resonant": resonant, "membrane": membrane, "needle": needle,
          "band-limited": band_limited}


@functools.cache
def calibration(model: str, *, phase: bool = True, top_hz: float = 40e6, low_hz: float = 1e6):
    """The model's sensitivity from scipy.signal.freqs, every 0.5 MHz, as a calibration."""
    f = np.arange(low_hz, top_hz + 1.0, 0.5e6)
    _, h = scipy.signal.freqs(*MODELS[model](), worN=_w(f))
    if phase:
        rows = [f"{a!r},{abs(x)!r},{math.degrees(np.angle(x))!r}"
                for a, x in zip(f.tolist(), h.tolist(), strict=True)]
        return parse_calibration("frequency_hz,sensitivity_v_per_pa,phase_deg\n"
                                 + "\n".join(rows), f"{model} model")
    rows = [f"{a!r},{abs(x)!r}" for a, x in zip(f.tolist(), h.tolist(), strict=True)]
    return parse_calibration("frequency_hz,sensitivity_v_per_pa\n" + "\n".join(rows),
                             f"{model} model, magnitude only")


# -- pressure pulses: functions of time, Pa -----------------------------------------------

def gauss(t, centre=8e-6, fc=5e6, amplitude=1e6):
    """scipy.signal.gausspulse, 5 MHz, 60 % bandwidth at -6 dB; f_awf = fc (its spectrum
    is a Gaussian about fc, so the -3 dB points are symmetric about it)."""
    return amplitude * scipy.signal.gausspulse(t - centre, fc=fc, bw=0.6)


def one_cycle(t, centre=8e-6, f0=5e6, amplitude=1e6):
    """One cycle of a sine under a Hann window (zero mean, a broad flat-topped spectrum)."""
    x = t - centre
    on = np.abs(x) < 0.5 / f0
    return np.where(on, amplitude * np.sin(_w(f0) * x) * np.cos(np.pi * f0 * x) ** 2, 0.0)


def burst(t, centre=8e-6, f0=3e6, cycles=20, ramp_cycles=2, amplitude=1e6):
    """``cycles`` cycles of a sine with raised-cosine ramps of ``ramp_cycles`` (a
    transducer's ring-up); f_awf = f0 (symmetric line)."""
    length = cycles / f0
    x = t - centre + 0.5 * length
    on = (x >= 0) & (x < length)
    ramp = np.clip(np.minimum(x, length - x) * f0 / ramp_cycles, 0.0, 1.0)
    return np.where(on, amplitude * np.sin(0.5 * np.pi * ramp) ** 2 * np.sin(_w(f0) * x), 0.0)


_PEAKED_HARMONICS = 12
_PEAKED_POWER = 1.2


def _peaked_shape(x):
    s = sum(k ** -_PEAKED_POWER * np.cos(_w(k * 3e6) * x) for k in range(1, _PEAKED_HARMONICS + 1))
    return np.exp(-(x / 0.6e-6) ** 2) * s


_PEAKED_SCALE = float(np.abs(_peaked_shape(np.arange(-1e-6, 1e-6, 0.01e-9))).max())


def peaked(t, centre=8e-6, amplitude=1e6):
    """A strongly distorted pulse: 12 in-phase harmonics of 3 MHz (to 36 MHz) falling as
    n^-1.2 under a Gaussian envelope; p_c = amplitude, p_r about 0.27 p_c (the shape of a
    focused nonlinear field's pulse; a harmonic series, not a solution of a wave
    equation). f_awf = 3 MHz: the fundamental's line is the only one within 3 dB."""
    return amplitude * _peaked_shape(t - centre) / _PEAKED_SCALE


PULSES = {"gauss": gauss, "one-cycle": one_cycle, "burst": burst, "peaked": peaked}
TRUE_AWF_HZ = {"gauss": 5e6, "burst": 3e6, "peaked": 3e6}


def with_echo(pulse, delay_s=10e-6, gain=-0.3):
    def pressure(t):
        return pulse(t) + gain * pulse(t - delay_s)
    return pressure


# -- the hydrophone voltage -----------------------------------------------------------------

def simulate(b, a, pressure, n=N, dt=DT):
    """Voltage of the analog system ``(b, a)`` driven by ``pressure(t)`` on ``n`` samples."""
    t = np.arange(n) * dt
    p = pressure(t)
    on = np.abs(p) > 1e-12 * np.abs(p).max()
    on[1:] |= on[:-1]
    on[:-1] |= on[1:]
    sys = scipy.signal.lti(b, a).to_ss()
    x = np.zeros(sys.A.shape[0])
    v = np.zeros(n)
    flips = np.flatnonzero(np.diff(np.concatenate(([0], on.astype(np.int8), [0]))))
    pos = 0
    for r0, r1 in zip(flips[0::2].tolist(), flips[1::2].tolist(), strict=True):
        if r0 > pos:           # zero input from pos to r0 (exact)
            tt = np.arange(r0 - pos + 1) * dt
            _, y, xs = scipy.signal.lsim(sys, np.zeros(tt.size), tt, X0=x)
            v[pos:r0] = y[:-1]
            x = xs[-1]
        tf = t[r0] + np.arange((r1 - r0 - 1) * FINE + 1) * (dt / FINE)
        _, y, xs = scipy.signal.lsim(sys, pressure(tf), tf - tf[0], X0=x)
        v[r0:r1] = y[::FINE]
        x = xs[-1]
        if r1 < n:             # one more step to the next record sample, input off
            _, _, xs = scipy.signal.lsim(sys, np.zeros(2), np.array([0.0, dt]), X0=x)
            x = xs[-1]
        pos = r1
    if pos < n:
        tt = np.arange(n - pos) * dt
        if tt.size >= 2:
            _, y, _ = scipy.signal.lsim(sys, np.zeros(tt.size), tt, X0=x)
            v[pos:] = y
        else:
            v[pos] = (sys.C @ x)[0]
    return v


@functools.cache
def clean_voltage(model: str, pulse: str, *, echo: bool = False, n: int = N,
                  centre_s: float = 8e-6) -> np.ndarray:
    """The noise-free voltage of ``pulse`` (centred at ``centre_s``) through ``model``."""
    base = PULSES[pulse]

    def fn(t):
        return base(t, centre=centre_s)
    v = simulate(*MODELS[model](), with_echo(fn) if echo else fn, n=n)
    v.setflags(write=False)
    return v


def noisy(v, snr_db, seed, *, offset_fraction=0.0):
    """``v`` plus white Gaussian noise of RMS ``peak|v| / 10^(snr_db/20)`` (numpy's
    default generator, ``seed``) and a DC offset of ``offset_fraction`` of the peak."""
    peak = float(np.abs(v).max())
    rng = np.random.default_rng(seed)
    return v + peak * 10 ** (-snr_db / 20) * rng.standard_normal(v.size) + offset_fraction * peak


# -- the true parameters ------------------------------------------------------------------

@functools.cache
def truth(pulse: str, centre_s: float = 8e-6) -> dict:
    """p_c, p_r (Pa), PII (J/m^2), pulse duration (s) of the analytic pulse (IEC 62127-1:
    PII = int p^2 dt / (rho c); pulse duration 1.25 (t90 - t10) of the running integral
    of p^2), on a 0.05 ns grid by the trapezoid rule; and f_awf (Hz) where known."""
    dt = 0.05e-9
    t = centre_s + np.arange(-4e-6, 4e-6, dt)
    p = PULSES[pulse](t, centre=centre_s)
    sq = p * p
    cum = np.concatenate(([0.0], np.cumsum(0.5 * (sq[1:] + sq[:-1])) * dt))
    energy = float(cum[-1])
    t10, t90 = np.interp([0.1 * energy, 0.9 * energy], cum, t)
    out = {"p_c": float(p.max()), "p_r": float(-p.min()), "pii": energy / RHO_C,
           "pd": 1.25 * float(t90 - t10)}
    if pulse in TRUE_AWF_HZ:
        out["f_awf"] = TRUE_AWF_HZ[pulse]
    else:
        out["f_awf"] = _awf_of_dense_spectrum(p, dt)
    return out


def _awf_of_dense_spectrum(p, dt):
    # IEC 62127-1 arithmetic-mean frequency on a zero-padded spectrum, written out here
    # (one hump: f1 its lowest -3 dB point, f2 its highest but no higher than 3 f1)
    mag = np.abs(np.fft.rfft(p, 8 * p.size))
    f = np.fft.rfftfreq(8 * p.size, dt)
    above = np.flatnonzero(mag >= mag.max() / math.sqrt(2))
    assert above[-1] - above[0] + 1 == above.size
    f1 = float(f[above[0]])
    return 0.5 * (f1 + min(float(f[above[-1]]), 3 * f1))


def errors(result, pulse: str, centre_s: float = 8e-6) -> dict:
    """Relative errors of a TraceResult against the truth of ``pulse``."""
    want = truth(pulse, centre_s)
    p = result.parameters
    got = {"p_c": p.peak_compressional_pa, "p_r": p.peak_rarefactional_pa,
           "f_awf": p.acoustic_working_frequency_hz,
           "pii": p.pulse_intensity_integral_j_per_m2, "pd": p.pulse_duration_s}
    return {k: got[k] / want[k] - 1.0 for k in want}
