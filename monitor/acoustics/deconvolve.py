"""Voltage to pressure: regularised deconvolution and the narrowband approximation.

Deconvolution works on one FFT grid at a time. A :class:`Plan` holds everything that
depends only on the grid (record length ``n`` and time step ``dt_s``), the calibration,
the loading and the settings, so that converting a trace costs one ``rfft``, one
multiply and one ``irfft``.

The inverse filter is ``W(f) conj(M_L) / (|M_L|^2 + (eps M_ref)^2)``: ``W`` is 1
inside the deconvolution band, falls to 0 at its edges with a raised-cosine taper, and
is 0 outside; the band is always inside the calibrated band, so no extrapolated
sensitivity is ever divided by. ``eps`` is the Tikhonov (Wiener-type) weight and
``M_ref`` the median of ``|M_L|`` over the band (:func:`regularisation_reference_v_per_pa`),
a robust in-band level: one outlying calibration row does not move it.

Time dependence ``exp(+j 2 pi f t)`` as :func:`numpy.fft.rfft`; see
:mod:`tankside.monitor.acoustics.calibration`.

References
----------
A. N. Tikhonov and V. Y. Arsenin, *Solutions of Ill-Posed Problems*, Winston, 1977.
K. A. Wear et al., "Improved measurement of acoustic output using complex deconvolution
of hydrophone sensitivity", IEEE Trans. Ultrason. Ferroelectr. Freq. Control 61 (1),
62-75 (2014).
IEC 62127-1 (the narrowband approximation).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import scipy.fft

from ..errors import ConfigError
from .calibration import Calibration
from .loading import Loading
from .settings import ConversionSettings


def loaded_sensitivity(calibration: Calibration, loading: Loading,
                       freqs_hz: np.ndarray) -> np.ndarray:
    """Complex loaded sensitivity ``M_L`` at ``freqs_hz``, V/Pa; NaN outside the band."""
    return calibration.interpolate(freqs_hz) * loading.factor(freqs_hz)


def deconvolution_band_hz(calibration: Calibration,
                          settings: ConversionSettings) -> tuple[float, float]:
    """The band actually used: the settings' band clipped to the calibrated band, Hz."""
    cal_lo, cal_hi = calibration.band_hz
    lo = cal_lo if settings.band_low_hz is None else max(cal_lo, settings.band_low_hz)
    hi = cal_hi if settings.band_high_hz is None else min(cal_hi, settings.band_high_hz)
    if not lo < hi:
        raise ConfigError(f"deconvolution band {lo:g}-{hi:g} Hz is empty inside the "
                          f"calibrated band {cal_lo:g}-{cal_hi:g} Hz")
    return lo, hi


def band_window(freqs_hz: np.ndarray, low_hz: float, high_hz: float,
                taper_octaves: float) -> np.ndarray:
    """Weights 0..1: 1 inside the band, raised-cosine tapers just inside each edge.

    The low taper rises from ``low_hz`` to ``low_hz * 2**taper_octaves``; the high taper
    falls from ``high_hz / 2**taper_octaves`` to ``high_hz``; both stay inside the band,
    and they are shortened to meet in the middle if the band is narrower than both.
    """
    f = np.asarray(freqs_hz, dtype=float)
    w = ((f >= low_hz) & (f <= high_hz)).astype(float)
    if taper_octaves <= 0:
        return w
    ratio = 2.0 ** taper_octaves
    if low_hz > 0:
        rise_top = low_hz * ratio
    else:
        rise_top = (high_hz - low_hz) * (1.0 - 1.0 / ratio) / 2.0
    fall_bottom = high_hz / ratio
    mid = 0.5 * (low_hz + high_hz)
    rise_top, fall_bottom = min(rise_top, mid), max(fall_bottom, mid)
    sel = (f >= low_hz) & (f < rise_top)
    w[sel] = 0.5 - 0.5 * np.cos(np.pi * (f[sel] - low_hz) / (rise_top - low_hz))
    sel = (f > fall_bottom) & (f <= high_hz)
    w[sel] *= 0.5 + 0.5 * np.cos(np.pi * (f[sel] - fall_bottom) / (high_hz - fall_bottom))
    return w


def regularisation_reference_v_per_pa(magnitude_v_per_pa: np.ndarray) -> float:
    """The level ``M_ref`` the regularisation is scaled to: median of ``|M_L|``, V/Pa.

    ``magnitude_v_per_pa`` holds ``|M_L|`` on a grid over the deconvolution band (NaN
    ignored). The median, not the largest value: a single wrong calibration row that
    spikes the sensitivity would otherwise raise ``eps M_ref`` with it and scale every
    pressure down by the size of the spike. 1.0 when nothing finite is given.
    """
    m = np.asarray(magnitude_v_per_pa, dtype=float)
    m = m[np.isfinite(m)]
    return float(np.median(m)) if m.size else 1.0


def inverse_filter(sensitivity_v_per_pa: np.ndarray, window: np.ndarray,
                   regularisation: float, reference_v_per_pa: float) -> np.ndarray:
    """Regularised inverse ``W conj(M) / (|M|^2 + (eps * M_ref)^2)``, Pa/V; 0 where W is 0.

    ``sensitivity_v_per_pa`` may be NaN where ``window`` is 0 (outside the calibration).
    """
    m = np.where(window > 0, sensitivity_v_per_pa, 1.0)
    lam = (regularisation * reference_v_per_pa) ** 2
    out = window * np.conj(m) / (m.real**2 + m.imag**2 + lam)
    out[window == 0] = 0.0
    return out


@dataclass(frozen=True, eq=False)
class Plan:
    """Everything the conversion of one FFT grid needs (arrays read-only).

    Attributes
    ----------
    n, dt_s : int, float
        Record length and time step, s.
    freqs_hz : numpy.ndarray
        ``rfftfreq(n, dt_s)``, Hz.
    sensitivity_v_per_pa : numpy.ndarray
        Complex ``M_L`` on ``freqs_hz``, NaN outside the calibrated band.
    sensitivity_abs_v_per_pa : numpy.ndarray
        ``|M_L|``, NaN outside the calibrated band.
    inverse_pa_per_v : numpy.ndarray
        The regularised inverse filter (complex), 0 outside the deconvolution band.
    inverse_abs_pa_per_v : numpy.ndarray
        Its magnitude.
    band_hz : tuple of float
        Deconvolution band, Hz.
    """

    n: int
    dt_s: float
    freqs_hz: np.ndarray
    sensitivity_v_per_pa: np.ndarray
    sensitivity_abs_v_per_pa: np.ndarray
    inverse_pa_per_v: np.ndarray
    inverse_abs_pa_per_v: np.ndarray
    band_hz: tuple[float, float]


def make_plan(calibration: Calibration, loading: Loading, settings: ConversionSettings,
              n: int, dt_s: float, *, reference_v_per_pa: float | None = None) -> Plan:
    """Build the deconvolution plan for records of ``n`` samples at step ``dt_s`` (s).

    ``reference_v_per_pa`` is ``M_ref`` (:func:`regularisation_reference_v_per_pa` of
    ``|M_L|`` over the deconvolution band), for the regularisation; by default it is taken
    on this grid (pass it to make it the same for every grid).
    """
    if n < 2 or not (math.isfinite(dt_s) and dt_s > 0):
        raise ConfigError(f"cannot plan a conversion for n={n}, dt={dt_s!r} s")
    freqs = scipy.fft.rfftfreq(n, dt_s)
    sens = loaded_sensitivity(calibration, loading, freqs)
    lo, hi = deconvolution_band_hz(calibration, settings)
    window = band_window(freqs, lo, hi, settings.taper_octaves)
    if reference_v_per_pa is None:
        inside = (freqs >= lo) & (freqs <= hi)
        reference_v_per_pa = regularisation_reference_v_per_pa(np.abs(sens[inside]))
    inverse = inverse_filter(sens, window, settings.regularisation, reference_v_per_pa)
    arrays = (freqs, sens, np.abs(sens), inverse, np.abs(inverse))
    for a in arrays:
        a.setflags(write=False)
    return Plan(n, float(dt_s), *arrays, (lo, hi))


def deconvolve(voltage_v: np.ndarray, plan: Plan) -> tuple[np.ndarray, np.ndarray]:
    """Pressure from voltage through a plan: ``irfft(rfft(v) * H)``.

    Returns
    -------
    pressure_pa : numpy.ndarray
        Same length as ``voltage_v``, Pa.
    pressure_spectrum : numpy.ndarray
        ``rfft(voltage_v) * H`` (complex), the unscaled spectrum of the pressure.
    """
    spec = scipy.fft.rfft(voltage_v, workers=1)
    spec *= plan.inverse_pa_per_v        # in place: one spectrum-sized buffer per trace
    pressure = scipy.fft.irfft(spec, plan.n, workers=1)
    return pressure, spec


def narrowband_pressure(voltage_v: np.ndarray, sensitivity_at_awf_v_per_pa: float) -> np.ndarray:
    """Narrowband approximation: ``p = v / |M_L(f_awf)|`` (IEC 62127-1)."""
    return voltage_v / sensitivity_at_awf_v_per_pa
