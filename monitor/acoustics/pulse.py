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


def awf_spectrum_hz(freqs_hz: np.ndarray, magnitude: np.ndarray, *,
                    blend_db: float = 0.0) -> float:
    """Acoustic working frequency from a magnitude spectrum: mean of the -3 dB frequencies.

    The rule of IEC 62127-1 (arithmetic-mean acoustic working frequency): ``f1`` and
    ``f2`` are the most widely separated frequencies, ``f2`` within ``3 f1``, at which the
    magnitude is 3 dB below its peak; ``f_awf = (f1 + f2) / 2``. Crossings are
    interpolated linearly between bins; the 0 Hz bin is ignored; the limit is never below
    the peak itself.

    With several humps above the threshold the rule jumps when a secondary hump's top
    crosses -3 dB. With ``blend_db > 0`` a hump whose top lies between -3 dB and
    ``-3 + blend_db`` dB moves ``f1`` (or ``f2``) towards its own crossing in proportion to
    how far its top stands above -3 dB, so the result is continuous in the spectrum; humps
    higher than that count fully, exactly as in the standard, and lower ones not at all.
    Humps are taken from the peak's own outwards, so a fully counted farther hump still
    sets the widest crossing.

    Parameters
    ----------
    freqs_hz : numpy.ndarray
        Uniform frequency grid from 0 Hz (as from ``numpy.fft.rfftfreq``), Hz.
    magnitude : numpy.ndarray
        Spectrum magnitude on ``freqs_hz`` (any unit).
    blend_db : float, keyword-only
        Width of the blending band above -3 dB, dB (0: the plain threshold).

    Returns
    -------
    float
        ``(f1 + f2) / 2``, Hz.

    References
    ----------
    IEC 62127-1, definition of acoustic working frequency (arithmetic-mean frequency of
    the -3 dB points of the pressure spectrum, f2 no higher than 3 f1); recalled from the
    standard's wording as commonly quoted.
    """
    mag = np.asarray(magnitude)[1:]
    if mag.size == 0:
        raise UnusableTraceError("trace too short for a spectrum")
    k = int(mag.argmax())
    peak = float(mag[k])
    if not (peak > 0 and math.isfinite(peak)):
        raise UnusableTraceError("the spectrum is zero or not finite")
    thr = peak * _SQRT_HALF
    df = float(freqs_hz[1] - freqs_hz[0])
    # .nonzero()[0] of a 1-D array is np.flatnonzero without its ravel and wrapper
    idx = (mag >= thr).nonzero()[0]
    if int(idx[-1]) - int(idx[0]) + 1 == idx.shape[0]:      # one hump (the usual case)
        starts, stops = idx[:1], idx[-1:] + 1                # humps: bins [start, stop)
        tops = mag[k:k + 1]
        main = 0
    else:
        breaks = (idx[1:] - idx[:-1] > 1).nonzero()[0]
        starts = idx[np.concatenate(([0], breaks + 1))]
        stops = idx[np.concatenate((breaks, [idx.shape[0] - 1]))] + 1
        tops = np.maximum.reduceat(mag, starts)
        main = int(np.searchsorted(starts, k, side="right")) - 1

    def lower(i):
        s = int(starts[i])
        f = (s + 1) * df
        return f - df * (mag[s] - thr) / (mag[s] - mag[s - 1]) if s > 0 else f

    def upper(i, last):
        e = int(min(stops[i] - 1, last))
        f = (e + 1) * df
        if e + 1 < mag.size and mag[e + 1] < thr:
            f += df * (mag[e] - thr) / (mag[e] - mag[e + 1])
        return f

    def weight(top):
        if blend_db <= 0:
            return 1.0
        return min(max(20.0 * math.log10(top / thr) / blend_db, 0.0), 1.0)

    f1 = lower(main)
    for i in range(main - 1, -1, -1):
        f1 += weight(float(tops[i])) * (lower(i) - f1)
    last = max(min(mag.size, int(3.0 * f1 / df)) - 1, k)   # bins with frequency <= 3 f1
    f2 = upper(main, last)
    for i in range(main + 1, starts.size):
        if starts[i] > last:
            break
        top = float(mag[starts[i]:min(stops[i], last + 1)].max())
        f2 += weight(top) * (upper(i, last) - f2)
    return float(0.5 * (f1 + f2))


def awf_zero_crossing_hz(pressure_pa: np.ndarray, dt_s: float, start_s: float,
                         end_s: float, *, hysteresis_pa: float = 0.0) -> float:
    """Acoustic working frequency by the zero-crossing method.

    The number of half cycles between the first and last zero crossing inside
    ``[start_s, end_s]`` (times from the first sample), divided by twice that time. With
    ``hysteresis_pa > 0`` a zero crossing counts only between an excursion beyond
    ``+hysteresis_pa`` and one beyond ``-hysteresis_pa`` (a Schmitt trigger), so noise and
    ripple near zero add no crossings; the crossing time is the last sign change before
    the new excursion, interpolated linearly.

    Raises
    ------
    UnusableTraceError
        Fewer than three crossings (less than two half cycles) in the window.

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
    if hysteresis_pa > 0 and idx.size:
        state = np.where(seg > hysteresis_pa, 1, np.where(seg < -hysteresis_pa, -1, 0))
        nz = np.flatnonzero(state)
        s = state[nz]
        turns = nz[1:][s[1:] != s[:-1]]          # first sample of each new excursion
        # the last sign change before each new excursion
        idx = idx[np.searchsorted(idx, turns, side="left") - 1]
    if idx.size < 3:
        raise UnusableTraceError(f"{idx.size} zero crossing(s) beyond the hysteresis "
                                 f"({hysteresis_pa:.3g} Pa) in the pulse: too few half "
                                 "cycles for the zero-crossing acoustic working frequency")
    a, b = seg[idx], seg[idx + 1]
    times = (i0 + idx + a / (a - b)) * dt_s
    return float((idx.size - 1) / (2.0 * (times[-1] - times[0])))


def pulse_bounds_s(pressure_pa: np.ndarray, dt_s: float, *, start: int = 0,
                   stop: int | None = None,
                   noise_power_pa2: float = 0.0) -> tuple[float, float, float]:
    """Times at 10 % and 90 % of the running integral of p^2 over a gate, and that integral.

    Parameters
    ----------
    pressure_pa : numpy.ndarray
        Pressure, Pa, time step ``dt_s`` (s).
    start, stop : int, keyword-only
        The gate, sample indices ``[start, stop)`` (default: the whole record).
    noise_power_pa2 : float, keyword-only
        Mean square of the noise in the pressure, Pa^2: subtracted from every sample's
        ``p^2`` so the integral is that of the pulse alone (its expected value).

    Returns
    -------
    t10_s, t90_s : float
        From the first sample of the record, s (linear interpolation of the running
        integral; the first time each level is reached).
    energy_pa2_s : float
        ``int (p^2 - noise) dt`` over the gate, Pa^2 s.
    """
    seg = pressure_pa[start:stop]
    sq = seg * seg
    if noise_power_pa2 > 0:
        sq -= noise_power_pa2
    cum = np.cumsum(sq)
    total = float(cum[-1]) if cum.size else 0.0
    if not (total > 0 and math.isfinite(total)):
        if noise_power_pa2 > 0 and math.isfinite(total):
            raise UnusableTraceError("the pulse energy in the gate is not above the noise")
        raise UnusableTraceError("the pressure is zero or not finite everywhere")
    t10 = _crossing(cum, 0.1 * total)
    t90 = _crossing(cum, 0.9 * total)
    return (start + t10) * dt_s, (start + t90) * dt_s, total * dt_s


def _crossing(cum: np.ndarray, target: float) -> float:
    """Fractional sample index where the running sum ``cum`` first reaches ``target``.

    The running sum after sample k is the integral up to the end of that sample's
    interval, at time (k + 0.5) dt; it is interpolated linearly within the interval.
    """
    i = int(np.argmax(cum >= target))
    prev = float(cum[i - 1]) if i > 0 else 0.0
    step = float(cum[i]) - prev
    frac = (target - prev) / step if step > 0 else 0.0
    return i - 0.5 + min(max(frac, 0.0), 1.0)


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
                     bounds: tuple[float, float, float] | None = None,
                     gate: tuple[int, int] | None = None,
                     noise_power_pa2: float = 0.0) -> PulseParameters:
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
        ``pulse_bounds_s(...)`` for the same gate and noise when the caller has it
        already (the zero-crossing f_awf needs the same window), so it is not searched
        again.
    gate : (int, int), optional
        Sample range ``[start, stop)`` of the pulse (default: the whole record). Peaks,
        PII, pulse duration and pulse-average intensity are taken inside it.
    noise_power_pa2 : float
        Mean square of the noise in the pressure, Pa^2, subtracted inside the gate from
        the integral of p^2 (PII and the 10 %/90 % times).
    """
    start, stop = (0, pressure_pa.shape[0]) if gate is None else gate
    if bounds is None:
        bounds = pulse_bounds_s(pressure_pa, dt_s, start=start, stop=stop,
                                noise_power_pa2=noise_power_pa2)
    t10, t90, energy = bounds
    seg = pressure_pa[start:stop]
    p_c = float(seg.max())
    p_r = max(0.0, -float(seg.min()))
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
