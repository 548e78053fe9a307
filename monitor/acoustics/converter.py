"""The signal chain for one trace: voltage in, pressure and its pulse parameters out.

:class:`Converter` binds a calibration, the electrical loading, the conversion settings
and the water temperature, and keeps one deconvolution plan per FFT grid (record length,
time step), so the live loop does one ``rfft``, one multiply and one ``irfft`` per trace.

Acoustic working frequency and the out-of-band test: the trace's f_awf is first
estimated from its voltage spectrum (its shape differs from the pressure spectrum only by
``|M_L|``). That estimate outside the calibrated band is an :class:`OutOfBandError` for
every method, since then the pulse is mostly where the sensitivity is unknown. The
narrowband check for ``auto`` uses that estimate (for the narrowband approximation the
two spectra have the same shape, so it is exact). After deconvolution, f_awf is taken
again from the pressure spectrum and the reported narrowband check is for that value.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, fields
from typing import Any

import numpy as np
import scipy.fft

from ..errors import OutOfBandError
from .calibration import Calibration
from .deconvolve import (
    Plan,
    deconvolution_band_hz,
    make_plan,
    regularisation_reference_v_per_pa,
)
from .loading import Loading
from .narrowband import NarrowbandCheck, SensitivityCurve, narrowband_check
from .pulse import (
    PulseParameters,
    UnusableTraceError,
    awf_spectrum_hz,
    awf_zero_crossing_hz,
    pulse_bounds_s,
    pulse_parameters,
)
from .settings import AwfMethod, ConversionSettings, Method
from .water import Water

__all__ = ["Converter", "TraceResult", "ResultField", "RESULT_FIELDS", "OutOfBandError",
           "UnusableTraceError"]

@dataclass(frozen=True)
class ResultField:
    """One quantity of a trace's result: a key of :meth:`TraceResult.flat`, a column of
    the session file's ``results`` table, of the results CSV and of the HDF5 export.

    Attributes
    ----------
    name : str
        Key and column name; its suffix names the unit (``_pa``, ``_hz``, ...).
    unit : str
        Unit written beside it in the session file and the exports; ``""`` when it is
        dimensionless or text.
    dtype : str
        ``"float64"``, ``"bool"`` or ``"str"``.
    doc : str
        What it is.
    value : callable (TraceResult) -> float, bool or str
        Where :meth:`TraceResult.flat` takes it from.
    """

    name: str
    unit: str
    dtype: str
    doc: str
    value: Callable[[TraceResult], float | bool | str]


#: The fields of a result, in order (the keys of :meth:`TraceResult.flat` and the
#: session file's result columns).
RESULT_FIELDS: tuple[ResultField, ...] = (
    ResultField("method", "", "str", "conversion method used: deconvolve or narrowband",
                lambda r: r.method),
    ResultField("peak_compressional_pa", "Pa", "float64", "peak-compressional pressure p_c",
                lambda r: r.parameters.peak_compressional_pa),
    ResultField("peak_rarefactional_pa", "Pa", "float64", "peak-rarefactional pressure p_r",
                lambda r: r.parameters.peak_rarefactional_pa),
    ResultField("acoustic_working_frequency_hz", "Hz", "float64",
                "acoustic working frequency f_awf",
                lambda r: r.parameters.acoustic_working_frequency_hz),
    ResultField("pulse_intensity_integral_j_per_m2", "J/m^2", "float64",
                "pulse-intensity integral PII",
                lambda r: r.parameters.pulse_intensity_integral_j_per_m2),
    ResultField("pulse_duration_s", "s", "float64",
                "pulse duration, 1.25 times the 10 % to 90 % time of the cumulative PII",
                lambda r: r.parameters.pulse_duration_s),
    ResultField("pulse_average_intensity_w_per_m2", "W/m^2", "float64",
                "pulse-average intensity (PII / pulse duration)",
                lambda r: r.parameters.pulse_average_intensity_w_per_m2),
    ResultField("mechanical_index", "", "float64", "mechanical index MI (IEC 62359)",
                lambda r: r.parameters.mechanical_index),
    ResultField("water_temperature_c", "degC", "float64", "water temperature used",
                lambda r: r.water.temperature_c),
    ResultField("water_density_kg_per_m3", "kg/m^3", "float64",
                "water density at that temperature", lambda r: r.water.density_kg_per_m3),
    ResultField("water_sound_speed_m_per_s", "m/s", "float64",
                "speed of sound in water at that temperature",
                lambda r: r.water.sound_speed_m_per_s),
    ResultField("narrowband_ok", "", "bool", "the narrowband condition holds at f_awf",
                lambda r: r.narrowband.ok),
    ResultField("narrowband_band_low_hz", "Hz", "float64",
                "lower edge of the narrowband check band", lambda r: r.narrowband.band_hz[0]),
    ResultField("narrowband_band_high_hz", "Hz", "float64",
                "upper edge of the narrowband check band", lambda r: r.narrowband.band_hz[1]),
    ResultField("narrowband_max_deviation_db", "dB", "float64",
                "largest deviation of |M_L| from its value at f_awf over the check band",
                lambda r: r.narrowband.max_deviation_db),
    ResultField("phase_source", "", "str",
                "phase of the calibration: measured or minimum-phase", lambda r: r.phase_source),
)

# the pulse parameters among them, straight from the result as in its JSON form
_PARAMETER_KEYS = tuple(f.name for f in RESULT_FIELDS
                        if f.name in {p.name for p in fields(PulseParameters)})

#: Shortest trace accepted, samples.
MIN_SAMPLES = 8
# Plans kept per converter (distinct record lengths / time steps seen recently).
_MAX_PLANS = 16


@dataclass(frozen=True, eq=False)
class TraceResult:
    """Pressure and parameters of one trace.

    Attributes
    ----------
    pressure_pa : numpy.ndarray
        Pressure waveform, Pa, same length and time step as the voltage.
    dt_s : float
        Time step, s.
    method : Method
        Method actually used: ``DECONVOLVE`` or ``NARROWBAND``.
    freqs_hz : numpy.ndarray
        ``rfftfreq(n, dt_s)``, Hz.
    spectrum_pa : numpy.ndarray
        Single-sided amplitude spectrum of the pressure, ``2 |rfft(p)| / n``, Pa.
    sensitivity_v_per_pa : numpy.ndarray
        ``|M_L|`` on ``freqs_hz``, V/Pa, NaN outside the calibrated band.
    parameters : PulseParameters
    narrowband : NarrowbandCheck
    water : Water
    phase_source : str
        ``"measured"`` or ``"minimum-phase"`` (of the calibration).
    settings : dict
        :meth:`ConversionSettings.as_dict` of the settings used.
    voltage_awf_hz : float
        f_awf estimated from the voltage spectrum, Hz.
    """

    pressure_pa: np.ndarray
    dt_s: float
    method: Method
    freqs_hz: np.ndarray
    spectrum_pa: np.ndarray
    sensitivity_v_per_pa: np.ndarray
    parameters: PulseParameters
    narrowband: NarrowbandCheck
    water: Water
    phase_source: str
    settings: dict
    voltage_awf_hz: float

    def __getattr__(self, name):
        # p_c, p_r, f_awf ... straight from the result, as in its JSON form
        if name in _PARAMETER_KEYS:
            return getattr(self.parameters, name)
        raise AttributeError(name)

    def times_s(self) -> np.ndarray:
        """Sample times from the first sample, s."""
        return self.dt_s * np.arange(self.pressure_pa.shape[0])

    def to_json_dict(self) -> dict:
        """The ``tankside convert --json`` object (SI units; non-finite numbers as null)."""
        out: dict[str, Any] = {"method": self.method}
        for key in _PARAMETER_KEYS:
            out[key] = _finite_or_none(getattr(self.parameters, key))
        out["water"] = self.water.as_dict()
        out["narrowband"] = self.narrowband.as_dict()
        out["phase_source"] = self.phase_source
        out["settings"] = dict(self.settings)
        return out

    def flat(self) -> dict[str, float | str | bool]:
        """Flat ``{name: value}``, one per :data:`RESULT_FIELDS` entry, in that order."""
        return {f.name: f.value(self) for f in RESULT_FIELDS}


def _finite_or_none(x: float):
    return x if math.isfinite(x) else None


class Converter:
    """Voltage traces to pressure and pulse parameters, with one cached plan per grid.

    Parameters
    ----------
    calibration : Calibration
    loading : Loading
        Electrical loading and preamplifier gain (default: none).
    settings : ConversionSettings
    temperature_c : float
        Water temperature, degC.

    Not safe for concurrent use from several threads (the plan cache is unlocked);
    each thread should have its own.
    """

    def __init__(self, calibration: Calibration, loading: Loading | None = None,
                 settings: ConversionSettings | None = None, temperature_c: float = 20.0):
        self.calibration = calibration
        self.loading = Loading() if loading is None else loading
        self.settings = ConversionSettings() if settings is None else settings
        self.temperature_c = float(temperature_c)
        self.water = Water.at(temperature_c)
        self.profile = SensitivityCurve.build(calibration, self.loading)
        self.band_hz = deconvolution_band_hz(calibration, self.settings)
        lo, hi = self.band_hz
        f = self.profile.freqs_hz
        inside = (f >= lo) & (f <= hi)
        # the same regularisation reference for every grid: median |M_L| over the band
        self._reference = regularisation_reference_v_per_pa(
            10.0 ** (self.profile.level_db[inside] / 20.0))
        self._impedance = self.water.impedance_rayl
        self._settings_dict = self.settings.as_dict()
        self._plans: dict[tuple[int, float], tuple[Plan, np.ndarray]] = {}

    def with_settings(self, settings: ConversionSettings | None = None,
                      **changes) -> Converter:
        """A new converter with other settings (``settings`` and/or changed fields)."""
        base = self.settings if settings is None else settings
        return Converter(self.calibration, self.loading, base.replace(**changes) if changes
                         else base, self.temperature_c)

    def with_method(self, method: Method | str) -> Converter:
        return self.with_settings(method=method)

    def plan(self, n: int, dt_s: float) -> Plan:
        """The deconvolution plan for ``n`` samples at ``dt_s`` (cached)."""
        return self._entry(n, dt_s)[0]

    def _entry(self, n: int, dt_s: float):
        key = (n, dt_s)
        entry = self._plans.get(key)
        if entry is None:
            if not (math.isfinite(dt_s) and dt_s > 0):
                raise UnusableTraceError(f"time step {dt_s!r} s is not positive")
            plan = make_plan(self.calibration, self.loading, self.settings, n, dt_s,
                             reference_v_per_pa=self._reference)
            gain = plan.inverse_abs_pa_per_v * (2.0 / n)
            gain.setflags(write=False)
            if len(self._plans) >= _MAX_PLANS:
                self._plans.pop(next(iter(self._plans)))
            entry = self._plans[key] = (plan, gain)
        return entry

    def process(self, voltage_v: np.ndarray, dt_s: float) -> TraceResult:
        """Convert one voltage trace (V, uniform step ``dt_s`` s) to a :class:`TraceResult`.

        Raises
        ------
        OutOfBandError
            The acoustic working frequency lies outside the calibrated band.
        UnusableTraceError
            Too short, all zero, not finite, bad time step, or no zero crossings (with
            the zero-crossing f_awf method).
        """
        v = np.asarray(voltage_v, dtype=np.float64)
        if v.ndim != 1 or v.shape[0] < MIN_SAMPLES:
            raise UnusableTraceError(f"a trace needs at least {MIN_SAMPLES} samples in one "
                                     f"dimension, got shape {v.shape}")
        n = v.shape[0]
        dt_s = float(dt_s)
        plan, gain = self._entry(n, dt_s)
        s = self.settings
        spec = scipy.fft.rfft(v, workers=1)
        vabs = np.abs(spec)
        f_v, bounds = self._awf(v, vabs, plan.freqs_hz, dt_s)
        self._in_band(f_v, "voltage spectrum")
        used = Method.DECONVOLVE
        if s.method is not Method.DECONVOLVE:
            nb = narrowband_check(f_v, self.profile, s)
            if s.method is Method.NARROWBAND or nb.ok:
                used = Method.NARROWBAND
        if used is Method.NARROWBAND:
            m = self.profile.magnitude_at_v_per_pa(f_v)
            pressure = v / m
            mag = vabs * (2.0 / (n * m))
            f_awf = f_v
            if bounds is not None:
                # the 10 %/90 % times do not change with the scale 1/m; the energy goes as 1/m^2
                bounds = (bounds[0], bounds[1], bounds[2] / (m * m))
        else:
            spec *= plan.inverse_pa_per_v    # |V| is taken already; reuse the buffer
            pressure = scipy.fft.irfft(spec, n, workers=1)
            mag = vabs * gain
            f_awf, bounds = self._awf(pressure, mag, plan.freqs_hz, dt_s)
            self._in_band(f_awf, "pressure spectrum")
            nb = narrowband_check(f_awf, self.profile, s)
        params = pulse_parameters(pressure, dt_s, f_awf, impedance_rayl=self._impedance,
                                  derating_depth_m=s.derating_depth_m,
                                  derating_db_per_cm_mhz=s.derating_db_per_cm_mhz,
                                  bounds=bounds)
        return TraceResult(pressure, dt_s, used, plan.freqs_hz, mag,
                           plan.sensitivity_abs_v_per_pa, params, nb, self.water,
                           self.calibration.phase_source, self._settings_dict, f_v)

    def _awf(self, signal: np.ndarray, magnitude: np.ndarray, freqs_hz: np.ndarray,
             dt_s: float) -> tuple[float, tuple[float, float, float] | None]:
        """f_awf, Hz, and the pulse window of ``signal`` when it was found on the way
        (zero-crossing method), for :func:`pulse_parameters` to use rather than search again."""
        if self.settings.awf_method is AwfMethod.SPECTRUM:
            return awf_spectrum_hz(freqs_hz, magnitude), None
        bounds = pulse_bounds_s(signal, dt_s)
        t10, t90, _ = bounds
        half = 0.625 * (t90 - t10)
        centre = 0.5 * (t10 + t90)
        return awf_zero_crossing_hz(signal, dt_s, centre - half, centre + half), bounds

    def _in_band(self, f_hz: float, where: str) -> None:
        lo, hi = self.calibration.band_hz
        if not lo <= f_hz <= hi:
            raise OutOfBandError(f"acoustic working frequency {f_hz / 1e6:.4g} MHz (from the "
                                 f"{where}) is outside the calibrated band "
                                 f"{lo / 1e6:.4g}-{hi / 1e6:.4g} MHz")
