"""Pulse parameters of a pressure waveform (IEC 62127-1; mechanical index of IEC 62359).

Pure functions on numpy arrays; pressure in Pa, time in s, frequency in Hz.

References
----------
IEC 62127-1, Ultrasonics - Hydrophones - Part 1: Measurement and characterization of
medical ultrasonic fields (definitions of peak-compressional and peak-rarefactional
acoustic pressure, acoustic working frequency, pulse-intensity integral, pulse duration,
pulse-average intensity).
IEC 62359, Ultrasonics - Field characterization - Test methods for the determination of
thermal and mechanical indices (mechanical index, derating by 0.3 dB cm^-1 MHz^-1).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ..errors import TanksideError

_SQRT_HALF = math.sqrt(0.5)


class UnusableTraceError(TanksideError):
    """A trace from which no pressure or pulse parameters can be had (all zero, not finite)."""


@dataclass(frozen=True)
class PulseParameters:
    """The pulse parameters of one pressure waveform (SI units).

    ``pulse_start_s`` and ``pulse_end_s`` bound the pulse duration, measured from the
    first sample.
    """

    peak_compressional_pa: float
    peak_rarefactional_pa: float
    acoustic_working_frequency_hz: float
    pulse_intensity_integral_j_per_m2: float
    pulse_duration_s: float
    pulse_average_intensity_w_per_m2: float
    mechanical_index: float
    derated_peak_rarefactional_pa: float
    pulse_start_s: float
    pulse_end_s: float


def awf_spectrum_hz(freqs_hz: np.ndarray, magnitude: np.ndarray) -> float:
    """Acoustic working frequency from a magnitude spectrum: mean of the -3 dB frequencies.

    ``f1`` is the lowest and ``f2`` the highest frequency, no higher than ``3 f1``, at
    which the magnitude is 3 dB below its peak (linear interpolation between bins). The
    0 Hz bin is ignored.

    Parameters
    ----------
    freqs_hz : numpy.ndarray
        Uniform frequency grid from 0 Hz (as from ``numpy.fft.rfftfreq``), Hz.
    magnitude : numpy.ndarray
        Spectrum magnitude on ``freqs_hz`` (any unit).

    Returns
    -------
    float
        ``(f1 + f2) / 2``, Hz.

    References
    ----------
    IEC 62127-1, definition of acoustic working frequency (spectrum method, -3 dB).
    """
    mag = magnitude[1:]
    if mag.size == 0:
        raise UnusableTraceError("trace too short for a spectrum")
    k = int(mag.argmax())
    peak = float(mag[k])
    if not (peak > 0 and math.isfinite(peak)):
        raise UnusableTraceError("the spectrum is zero or not finite")
    thr = peak * _SQRT_HALF
    df = float(freqs_hz[1] - freqs_hz[0])
    # lowest -3 dB point: first bin at or above the threshold (the peak is one)
    above = mag >= thr
    i1 = int(above.argmax())
    f1 = (i1 + 1) * df
    if i1 > 0:
        f1 -= df * (mag[i1] - thr) / (mag[i1] - mag[i1 - 1])
    lim = min(mag.size, int(3.0 * f1 / df))   # bins with frequency <= 3 f1
    lim = max(lim, k + 1)
    i2 = lim - 1 - int(above[lim - 1::-1].argmax())
    f2 = (i2 + 1) * df
    if i2 + 1 < mag.size and mag[i2 + 1] < thr:
        f2 += df * (mag[i2] - thr) / (mag[i2] - mag[i2 + 1])
    return float(0.5 * (f1 + f2))


def awf_zero_crossing_hz(pressure_pa: np.ndarray, dt_s: float, start_s: float,
                         end_s: float) -> float:
    """Acoustic working frequency by the zero-crossing method.

    The number of half cycles between the first and last zero crossing inside
    ``[start_s, end_s]`` (times from the first sample), divided by twice that time.

    References
    ----------
    IEC 62127-1, definition of acoustic working frequency (zero-crossing method).
    """
    n = pressure_pa.shape[0]
    i0 = max(0, int(math.floor(start_s / dt_s)))
    i1 = min(n, int(math.ceil(end_s / dt_s)) + 1)
    seg = pressure_pa[i0:i1]
    sign = seg < 0
    idx = np.flatnonzero(sign[1:] != sign[:-1])
    if idx.size < 2:
        raise UnusableTraceError("fewer than two zero crossings in the pulse: no "
                                 "zero-crossing acoustic working frequency")
    a, b = seg[idx], seg[idx + 1]
    times = (i0 + idx + a / (a - b)) * dt_s
    return float((idx.size - 1) / (2.0 * (times[-1] - times[0])))


def pulse_bounds_s(pressure_pa: np.ndarray, dt_s: float) -> tuple[float, float, float]:
    """Times at 10 % and 90 % of the cumulative integral of p^2, and that integral.

    Returns
    -------
    t10_s, t90_s : float
        From the first sample, s (linear interpolation of the running integral).
    energy_pa2_s : float
        ``int p^2 dt``, Pa^2 s.
    """
    sq = pressure_pa * pressure_pa
    n = sq.shape[0]
    # running sums by blocks: a full cumsum is the slowest step of the parameters
    cum_blocks = np.add.reduceat(sq, np.arange(0, n, _BLOCK)).cumsum()
    total = float(cum_blocks[-1])
    if not (total > 0 and math.isfinite(total)):
        raise UnusableTraceError("the pressure is zero or not finite everywhere")
    t10 = _crossing(sq, cum_blocks, 0.1 * total)
    t90 = _crossing(sq, cum_blocks, 0.9 * total)
    return t10 * dt_s, t90 * dt_s, total * dt_s


_BLOCK = 64


def _crossing(sq: np.ndarray, cum_blocks: np.ndarray, target: float) -> float:
    """Fractional sample index where the running sum of ``sq`` reaches ``target``.

    The running sum after sample k is the integral up to the end of that sample's
    interval, at time (k + 0.5) dt; it is interpolated linearly within the interval.
    """
    b = min(int(cum_blocks.searchsorted(target)), cum_blocks.size - 1)
    before = float(cum_blocks[b - 1]) if b > 0 else 0.0
    start = b * _BLOCK
    inner = sq[start:start + _BLOCK].cumsum()
    inner += before
    i = min(int(inner.searchsorted(target)), inner.size - 1)
    prev = float(inner[i - 1]) if i > 0 else before
    step = float(inner[i]) - prev
    frac = (target - prev) / step if step > 0 else 0.0
    return start + i - 0.5 + min(max(frac, 0.0), 1.0)


def derated_pa(pressure_pa: float, frequency_hz: float, depth_m: float,
               db_per_cm_mhz: float = 0.3) -> float:
    """Pressure derated for attenuation ``db_per_cm_mhz * depth * f`` (IEC 62359).

    Example: 2 MPa, 6 cm, 4 MHz, 0.3 dB cm^-1 MHz^-1 -> 7.2 dB -> 0.873 MPa.
    """
    loss_db = db_per_cm_mhz * (depth_m * 100.0) * (frequency_hz * 1e-6)
    return pressure_pa * 10.0 ** (-loss_db / 20.0)


def mechanical_index(peak_rarefactional_pa: float, frequency_hz: float) -> float:
    """``p_r [MPa] / sqrt(f_awf [MHz])`` (IEC 62359); pass the derated p_r."""
    return (peak_rarefactional_pa * 1e-6) / math.sqrt(frequency_hz * 1e-6)


def pulse_parameters(pressure_pa: np.ndarray, dt_s: float, acoustic_working_frequency_hz: float,
                     *, impedance_rayl: float, derating_depth_m: float = 0.0,
                     derating_db_per_cm_mhz: float = 0.3,
                     bounds: tuple[float, float, float] | None = None) -> PulseParameters:
    """All pulse parameters of one pressure waveform, given its acoustic working frequency.

    Parameters
    ----------
    pressure_pa : numpy.ndarray
        Pressure waveform, Pa, uniform time step ``dt_s`` (s).
    acoustic_working_frequency_hz : float
        f_awf, Hz (from :func:`awf_spectrum_hz` or :func:`awf_zero_crossing_hz`).
    impedance_rayl : float
        Characteristic impedance of water rho*c, kg m^-2 s^-1.
    derating_depth_m, derating_db_per_cm_mhz : float
        Derating of p_r for the mechanical index.
    bounds : tuple of float, optional
        ``pulse_bounds_s(pressure_pa, dt_s)`` when the caller has it already (the
        zero-crossing f_awf needs the same window), so it is not searched again.
    """
    t10, t90, energy = pulse_bounds_s(pressure_pa, dt_s) if bounds is None else bounds
    p_c = float(pressure_pa.max())
    p_r = max(0.0, -float(pressure_pa.min()))
    pii = energy / impedance_rayl
    duration = 1.25 * (t90 - t10)
    centre = 0.5 * (t10 + t90)
    f = acoustic_working_frequency_hz
    p_r_derated = derated_pa(p_r, f, derating_depth_m, derating_db_per_cm_mhz)
    return PulseParameters(
        peak_compressional_pa=p_c,
        peak_rarefactional_pa=p_r,
        acoustic_working_frequency_hz=f,
        pulse_intensity_integral_j_per_m2=pii,
        pulse_duration_s=duration,
        pulse_average_intensity_w_per_m2=pii / duration if duration > 0 else math.inf,
        mechanical_index=mechanical_index(p_r_derated, f),
        derated_peak_rarefactional_pa=p_r_derated,
        pulse_start_s=centre - 0.5 * duration,
        pulse_end_s=centre + 0.5 * duration,
    )
