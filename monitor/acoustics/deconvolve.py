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

Noise weighting (the default): for each trace the plan's inverse is multiplied by
Wiener-type weights ``SNR / (1 + SNR)`` (:func:`noise_weights`), where ``SNR(f)`` is the
power of the gated voltage spectrum over the noise expected in the gate (from the
noise spectrum measured on the quiet part of the record, see
:mod:`tankside.monitor.acoustics.noise`), and 0 outside the band in which that spectrum
stands ``band_snr_db`` above the noise (with a raised-cosine taper outside each edge). So
frequencies where the trace holds only noise are not divided by the sensitivity at all,
and the weights are those of the minimum-mean-square-error filter where there is signal.

Time dependence ``exp(+j 2 pi f t)`` as :func:`numpy.fft.rfft`; see
:mod:`tankside.monitor.acoustics.calibration`.

References
----------
A. N. Tikhonov and V. Y. Arsenin, *Solutions of Ill-Posed Problems*, Winston, 1977.
N. Wiener, *Extrapolation, Interpolation, and Smoothing of Stationary Time Series*,
MIT Press, 1949 (the weights ``S / (S + N)``).
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
    return calibration.interpolate(freqs_hz) * loading.factor(freqs_hz, calibration.load)


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
    window : numpy.ndarray
        The band window ``W`` (0..1) the inverse includes.
    """

    n: int
    dt_s: float
    freqs_hz: np.ndarray
    sensitivity_v_per_pa: np.ndarray
    sensitivity_abs_v_per_pa: np.ndarray
    inverse_pa_per_v: np.ndarray
    inverse_abs_pa_per_v: np.ndarray
    band_hz: tuple[float, float]
    window: np.ndarray


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
    for a in (*arrays, window):
        a.setflags(write=False)
    return Plan(n, float(dt_s), *arrays, (lo, hi), window)


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


#: The gated spectrum is zero-padded to at least this many times the gate (to the next
#: power of two; at most the record's length), so the -3 dB points of f_awf are
#: interpolated between close bins.
GATE_PADDING = 3


@dataclass(frozen=True, eq=False)
class GatedSpectrum:
    """The spectrum of the gated part of a record, zero-padded (arrays read-only).

    Attributes
    ----------
    freqs_hz : numpy.ndarray
        ``rfftfreq(nfft, dt_s)``, Hz.
    spectrum : numpy.ndarray
        ``rfft(gated, nfft)`` (complex, unscaled).
    samples : int
        Samples in the gate (before padding).
    padding : float
        ``nfft / samples``: neighbouring bins closer than this are not independent.
    """

    freqs_hz: np.ndarray
    spectrum: np.ndarray
    samples: int
    padding: float


def gated_length(samples: int, record_samples: int) -> int:
    """FFT length for a gate of ``samples``: the power of two at or above ``GATE_PADDING``
    times it, but no more than the record's fast length and never less than the gate."""
    nfft = 1 << (GATE_PADDING * samples - 1).bit_length()
    if nfft > record_samples:
        nfft = scipy.fft.next_fast_len(max(samples, record_samples), real=True)
    return nfft


def gated_spectrum(gated: np.ndarray, dt_s: float, record_samples: int, *,
                   freqs_hz: np.ndarray | None = None) -> GatedSpectrum:
    """``rfft`` of a gated stretch, zero-padded to :func:`gated_length` (``freqs_hz``: its
    ``rfftfreq`` grid when the caller keeps it)."""
    m = gated.shape[0]
    nfft = gated_length(m, record_samples)
    spec = scipy.fft.rfft(gated, nfft, workers=1)
    if freqs_hz is None or freqs_hz.shape[0] != spec.shape[0]:
        freqs_hz = np.arange(spec.shape[0]) * (1.0 / (nfft * dt_s))
    return GatedSpectrum(freqs_hz, spec, m, nfft / m)


def box_smooth(x: np.ndarray, width: int) -> np.ndarray:
    """Moving mean over ``width`` (odd) neighbouring values; zeros assumed beyond the ends
    (so the end bins read low, the safe side for a signal-to-noise test)."""
    if width <= 1:
        return x
    return np.convolve(x, np.full(width, 1.0 / width), mode="same")


@dataclass(frozen=True, eq=False)
class NoiseWeights:
    """Per-trace deconvolution weights from the measured noise (arrays read-only).

    Attributes
    ----------
    weights : numpy.ndarray
        Weights 0..1 on the record's ``rfftfreq`` grid (the inverse filter is multiplied
        by them).
    gate_weights : numpy.ndarray
        The same weights on the gated spectrum's grid.
    band_hz : tuple of float
        Lowest and highest frequency at which the gated voltage spectrum stands
        ``band_snr_db`` above the noise, Hz.
    share_outside : float
        Share of the gated voltage's above-noise energy outside the calibrated band.
    bins : (int, int)
        ``[k0, k1)``: the record's bins outside which ``weights`` are 0.
    """

    weights: np.ndarray
    gate_weights: np.ndarray
    band_hz: tuple[float, float]
    share_outside: float
    bins: tuple[int, int]


def noise_weights(gated: GatedSpectrum, noise_v2: np.ndarray | float, freqs_hz: np.ndarray,
                  calibrated_band_hz: tuple[float, float], *,
                  band_snr_db: float, taper_octaves: float) -> NoiseWeights | None:
    """Wiener-type weights for one trace from its gated voltage spectrum and its noise.

    ``SNR(f) = P(f) / (m S(f)) - 1``, ``P`` the gated power spectrum smoothed over three
    independent bins, ``m`` the gate's length and ``S`` the noise variance density; the
    weight is ``SNR / (1 + SNR)`` (0 where SNR <= 0) inside the band from the lowest to the
    highest frequency with ``SNR >= band_snr_db``, tapered to 0 over ``taper_octaves``
    outside each edge, and 0 beyond.

    Parameters
    ----------
    gated : GatedSpectrum
        Of the gated voltage with the baseline removed.
    noise_v2 : numpy.ndarray or float
        The noise variance density ``S`` on ``gated.freqs_hz`` (white noise of RMS sigma:
        sigma^2, which may be given as one number), V^2; see
        :meth:`NoiseEstimate.variance_density`.
    freqs_hz : numpy.ndarray
        The record's ``rfftfreq(n, dt_s)`` grid, Hz: ``weights`` are returned on it.
    calibrated_band_hz : (float, float)
        For ``share_outside``.
    band_snr_db, taper_octaves : float
        See :class:`ConversionSettings`.

    Returns
    -------
    NoiseWeights, or None when no frequency stands ``band_snr_db`` above the noise.
    """
    spec, fg = gated.spectrum, gated.freqs_hz
    power = np.abs(spec)
    power *= power
    width = 2 * int(math.ceil(1.5 * gated.padding)) + 1       # three independent bins
    smooth = box_smooth(power, width)
    expected = gated.samples * noise_v2
    signal = smooth - expected                               # the pulse's power, estimated
    np.maximum(signal, 0.0, out=signal)
    wg = signal / (smooth + _TINY)                           # SNR / (1 + SNR)
    # .nonzero()[0] of a 1-D array is np.flatnonzero without its ravel and wrapper
    above = (smooth >= (1.0 + 10.0 ** (band_snr_db / 10.0)) * expected).nonzero()[0]
    if above.size == 0:
        return None
    dg = float(fg[1])
    i_lo, i_hi = int(above[0]), int(above[-1])
    lo, hi = i_lo * dg, i_hi * dg
    ratio_t = 2.0 ** taper_octaves
    lo_t, hi_t = lo / ratio_t, hi * ratio_t
    # the outer tapers, applied on the few bins they cover
    j0 = int(math.ceil(lo_t / dg))
    wg[:j0] = 0.0
    if i_lo > j0:
        f = fg[j0:i_lo]
        wg[j0:i_lo] *= 0.5 - 0.5 * np.cos(np.pi * (f - lo_t) / (lo - lo_t))
    j1 = min(int(math.floor(hi_t / dg)) + 1, fg.shape[0])
    if j1 > i_hi + 1:
        f = fg[i_hi + 1:j1]
        wg[i_hi + 1:j1] *= 0.5 + 0.5 * np.cos(np.pi * (f - hi) / (hi_t - hi))
    wg[j1:] = 0.0
    df = float(freqs_hz[1])
    k0 = max(0, int(math.ceil(lo_t / df)))
    k1 = min(freqs_hz.shape[0], int(math.floor(hi_t / df)) + 1)
    weights = np.zeros(freqs_hz.shape[0])
    weights[k0:k1] = np.interp(freqs_hz[k0:k1], fg, wg)
    weights.setflags(write=False)
    wg.setflags(write=False)
    # above-noise energy in and outside the calibrated band
    total = float(signal.sum())
    c_lo, c_hi = calibrated_band_hz
    b0 = min(int(math.ceil(c_lo / dg)), fg.shape[0])
    b1 = min(int(math.floor(c_hi / dg)) + 1, fg.shape[0])
    outside = total - float(signal[b0:b1].sum())
    return NoiseWeights(weights, wg, (lo, hi), outside / total if total > 0 else 0.0,
                        (k0, max(k0, k1)))


_TINY = 1e-300      # keeps 0 / 0 out of the weights where the spectrum is exactly zero
