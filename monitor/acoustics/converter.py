"""The signal chain for one trace: voltage in, pressure and its pulse parameters out.

:class:`Converter` binds a calibration, the electrical loading, the conversion settings
and the water temperature, and keeps one deconvolution plan per FFT grid (record length,
time step), so the live loop does one ``rfft`` and one ``irfft`` of the record per trace,
besides the small transforms of the noise segments and the gate.

One trace, in order:

1. Noise and gate (:mod:`tankside.monitor.acoustics.noise`): baseline (DC offset),
   noise level and spectrum from the quiet part of the record, the arrivals and the
   pulse gate around the main one. ``snr_db`` is the gate's peak voltage over the noise
   RMS. The baseline is removed before any method.
2. Weights (:func:`tankside.monitor.acoustics.deconvolve.noise_weights`): Wiener-type
   weights from the gated voltage spectrum over the noise expected in the gate, zero
   where the trace holds only noise (or the fixed band with ``weighting="none"``).
3. Method: ``auto`` deconvolves whenever the calibration has a measured phase; for a
   magnitude-only calibration it uses the narrowband approximation when the narrowband
   check passes at the voltage f_awf, else deconvolves (with the minimum-phase estimate).
4. Acoustic working frequency and the out-of-band test: f_awf is first estimated from
   the weighted voltage spectrum (its shape differs from the pressure spectrum only by
   ``|M_L|``). That estimate outside the calibrated band is an :class:`OutOfBandError`
   for every method, since then the pulse is mostly where the sensitivity is unknown.
   After deconvolution, f_awf is taken again from the pressure spectrum and the
   reported narrowband check is for that value.
5. Pulse parameters over the gate, the integral of p^2 corrected for the noise power
   the filter passes (:func:`tankside.monitor.acoustics.pulse.pulse_parameters`).
6. Warnings (:class:`tankside.monitor.acoustics.doubts.WarningCode`).
"""

from __future__ import annotations

import json
import math
from collections.abc import Callable
from dataclasses import dataclass, field, fields
from typing import Any

import numpy as np
import scipy.fft

from ..errors import OutOfBandError
from .calibration import LOW_SLOPE_ASSUMPTIONS, Calibration, minimum_phase_rad
from .deconvolve import (
    GatedSpectrum,
    Plan,
    deconvolution_band_hz,
    gated_length,
    gated_spectrum,
    make_plan,
    noise_weights,
    regularisation_reference_v_per_pa,
)
from .doubts import ResultWarning, WarningCode
from .loading import Loading
from .narrowband import NarrowbandCheck, SensitivityCurve, narrowband_check
from .noise import Gate, NoiseEstimate, WelchSetup, measure_trace
from .pulse import (
    PulseParameters,
    UnusableTraceError,
    awf_spectrum_hz,
    awf_zero_crossing_hz,
    pulse_bounds_s,
    pulse_parameters,
)
from .settings import ConversionSettings, Method, Weighting
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
    ResultField("snr_db", "dB", "float64",
                "peak voltage in the pulse gate over the noise RMS of the quiet record",
                lambda r: r.snr_db),
    ResultField("gate_start_s", "s", "float64",
                "start of the pulse gate, from the first sample of the record",
                lambda r: math.nan if r.gate is None else r.gate.start_s),
    ResultField("gate_end_s", "s", "float64",
                "end of the pulse gate (its last sample), from the first sample",
                lambda r: math.nan if r.gate is None else r.gate.end_s),
    ResultField("derating_depth_m", "m", "float64",
                "depth the mechanical index is derated to (NaN: not derated)",
                lambda r: math.nan if r.derating_depth_m is None else r.derating_depth_m),
    ResultField("warnings", "", "str",
                "why a number may be doubtful: JSON list of {code, message}, [] when none",
                lambda r: json.dumps([w.as_dict() for w in r.warnings])),
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
        f_awf estimated from the (noise-weighted) voltage spectrum, Hz.
    snr_db : float
        ``20 log10(peak |v - baseline| in the gate / noise RMS)``, dB (inf when no noise
        could be measured).
    noise : NoiseEstimate
        Baseline (DC offset, removed before any method), noise RMS and noise spectrum,
        from the quiet part of the record.
    gate : Gate
        The pulse gate the peaks, PII, pulse duration and pulse-average intensity are
        taken over (start and end s from the first sample, automatic or explicit).
    weights : numpy.ndarray
        Weights 0..1 on ``freqs_hz`` applied to the inverse filter (noise weights, or the
        fixed band window with ``weighting="none"``); for the narrowband method, the noise
        weights that shaped the f_awf spectrum (the pressure itself is not filtered).
    passband_hz : tuple of float or None
        Lowest and highest frequency the deconvolution passed (non-zero weight), Hz; None
        for the narrowband method (nothing is filtered).
    noise_band_hz : tuple of float or None
        Where the gated voltage spectrum stands ``band_snr_db`` above the noise, Hz (None
        without noise weighting).
    warnings : tuple of ResultWarning
        Why any number may be doubtful (:class:`WarningCode`); empty when all is well.
    awf_method : str
        The f_awf method actually used (``"spectrum"`` after a zero-crossing fallback).
    derating_depth_m : float or None
        Depth the mechanical index was derated for, m; None: not derated.
    phase_p_r_spread : float or None
        For a deconvolution with a minimum-phase estimate: (largest - smallest) p_r over
        the low-frequency assumptions, relative to p_r; None otherwise.
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
    snr_db: float = math.inf
    noise: NoiseEstimate | None = None
    gate: Gate | None = None
    weights: np.ndarray | None = None
    passband_hz: tuple[float, float] | None = None
    noise_band_hz: tuple[float, float] | None = None
    warnings: tuple[ResultWarning, ...] = ()
    awf_method: str = "spectrum"
    derating_depth_m: float | None = None
    phase_p_r_spread: float | None = None

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
        out["derating_depth_m"] = self.derating_depth_m
        out["snr_db"] = _finite_or_none(self.snr_db)
        out["warnings"] = [w.as_dict() for w in self.warnings]
        out["gate"] = None if self.gate is None else self.gate.as_dict()
        out["noise"] = None if self.noise is None else self.noise.as_dict()
        out["deconvolution"] = {
            "weighting": self.settings.get("weighting"),
            "passband_hz": _pair(self.passband_hz),
            "noise_band_hz": _pair(self.noise_band_hz),
        }
        out["awf_method"] = self.awf_method
        out["water"] = self.water.as_dict()
        out["narrowband"] = self.narrowband.as_dict()
        out["phase_source"] = self.phase_source
        out["phase_p_r_spread"] = self.phase_p_r_spread
        out["settings"] = dict(self.settings)
        return out

    def flat(self) -> dict[str, float | str | bool]:
        """Flat ``{name: value}``, one per :data:`RESULT_FIELDS` entry, in that order."""
        return {f.name: f.value(self) for f in RESULT_FIELDS}


def _finite_or_none(x: float):
    return x if math.isfinite(x) else None


def _pair(x: tuple[float, float] | None) -> list[float] | None:
    return None if x is None else [x[0], x[1]]


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
        self._settings_dict = self.settings.as_dict()
        self._plans: dict[tuple[int, float], _GridEntry] = {}
        self._alternatives = _phase_alternatives(calibration)

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
        return self._entry(n, dt_s).plan

    def _entry(self, n: int, dt_s: float) -> _GridEntry:
        key = (n, dt_s)
        entry = self._plans.get(key)
        if entry is None:
            if not (math.isfinite(dt_s) and dt_s > 0):
                raise UnusableTraceError(f"time step {dt_s!r} s is not positive")
            plan = make_plan(self.calibration, self.loading, self.settings, n, dt_s,
                             reference_v_per_pa=self._reference)
            gain = plan.inverse_abs_pa_per_v * (2.0 / n)
            gain.setflags(write=False)
            alternatives = []
            for phase in self._alternatives:
                extra = np.interp(plan.freqs_hz, self.calibration.frequency_hz, phase)
                factor = np.exp(1j * extra)
                factor.setflags(write=False)
                alternatives.append(factor)
            if len(self._plans) >= _MAX_PLANS:
                self._plans.pop(next(iter(self._plans)))
            nz = np.flatnonzero(plan.window)
            bins = (int(nz[0]), int(nz[-1]) + 1) if nz.size else (0, 0)
            welch = WelchSetup.make(self.settings.noise_segment_samples, dt_s)
            entry = self._plans[key] = _GridEntry(plan, gain, tuple(alternatives), bins, welch)
        return entry

    def process(self, voltage_v: np.ndarray, dt_s: float, *,
                resolution_v: float = 0.0, water: Water | None = None) -> TraceResult:
        """Convert one voltage trace (V, uniform step ``dt_s`` s) to a :class:`TraceResult`.

        ``resolution_v`` (volts per digitiser code) keeps the noise estimate from going
        below the quantisation noise ``resolution_v / sqrt(12)``. ``water`` (a live
        thermometer's reading, :meth:`Water.at`) replaces the converter's own water for
        this trace: its density and sound speed give the intensities and MI, and the
        result records it. The pressures do not depend on it.

        Raises
        ------
        OutOfBandError
            The acoustic working frequency lies outside the calibrated band.
        UnusableTraceError
            Too short, constant, not finite, bad time step, no frequency standing above
            the noise, or no pulse energy above the noise in the gate.
        """
        v = np.asarray(voltage_v, dtype=np.float64)
        if v.ndim != 1 or v.shape[0] < MIN_SAMPLES:
            raise UnusableTraceError(f"a trace needs at least {MIN_SAMPLES} samples in one "
                                     f"dimension, got shape {v.shape}")
        if not math.isfinite(float(v.sum())):
            raise UnusableTraceError("the trace holds NaN or infinite samples")
        n = v.shape[0]
        dt_s = float(dt_s)
        entry = self._entry(n, dt_s)
        plan, freqs = entry.plan, entry.plan.freqs_hz
        s = self.settings
        spec = scipy.fft.rfft(v, workers=1)
        vabs = np.abs(spec)
        k_peak = 1 + int(vabs[1:].argmax())
        if not vabs[k_peak] > 0:
            raise UnusableTraceError("the trace is constant: no pulse to convert")
        gate_s = (None if s.gate_start_s is None or s.gate_end_s is None
                  else (s.gate_start_s, s.gate_end_s))
        try:
            noise, gate = measure_trace(
                v, dt_s, 1.0 / float(freqs[k_peak]), threshold_sigma=s.gate_threshold_sigma,
                gap_cycles=s.gate_gap_cycles, margin_cycles=s.gate_margin_cycles,
                segment_samples=s.noise_segment_samples, gate_s=gate_s,
                resolution_v=resolution_v, welch=entry.welch)
        except ValueError as err:
            raise UnusableTraceError(str(err)) from err
        b = noise.baseline_v
        spec[0] -= b * n
        vabs[0] = abs(spec[0])
        gated = v[gate.start:gate.stop] - b
        peak_v = float(np.abs(gated).max())
        snr_db = 20.0 * math.log10(peak_v / noise.rms_v) if noise.rms_v > 0 else math.inf
        g_freqs, h_gate_full = entry.gate_grid(gated_length(gated.shape[0], n))
        gspec = gated_spectrum(gated, dt_s, n, freqs_hz=g_freqs)
        noise_gate = noise.variance_density(gspec.freqs_hz, dt_s)
        weights, gate_weights, (k0, k1), noise_band, share_outside = self._weights(
            gspec, noise_gate, entry, snr_db, gate.arrival_found)
        blend = s.awf_blend_db
        gmag = np.abs(gspec.spectrum)
        gmag *= gate_weights
        f_v = awf_spectrum_hz(gspec.freqs_hz, gmag, blend_db=blend)
        self._in_band(f_v, "voltage spectrum", snr_db)
        nb = None
        if s.method is Method.DECONVOLVE or (s.method is Method.AUTO
                                             and self.calibration.phase_source == "measured"):
            used = Method.DECONVOLVE
        else:
            nb = narrowband_check(f_v, self.profile, s)
            used = Method.NARROWBAND if (s.method is Method.NARROWBAND or nb.ok) \
                else Method.DECONVOLVE
        if used is Method.NARROWBAND:
            m = self.profile.magnitude_at_v_per_pa(f_v)
            pressure = (v - b) / m
            mag = vabs * (2.0 / (n * m))
            f_awf = f_v
            noise_power = (noise.rms_v / m) ** 2
            passband = None                 # nothing is filtered
        else:
            # only the bins with a weight: the rest of the spectrum is set to 0
            w = weights[k0:k1]
            spec[:k0] = 0.0
            spec[k1:] = 0.0
            band = spec[k0:k1]
            band *= plan.inverse_pa_per_v[k0:k1]
            band *= w
            pressure = scipy.fft.irfft(spec, n, workers=1)
            h_abs = entry.gain[k0:k1] * w
            mag = np.zeros(vabs.shape[0])
            np.multiply(vabs[k0:k1], h_abs, out=mag[k0:k1])
            # the gated pressure's spectrum: the gated voltage's through |H| (|H| taken at
            # the nearest bin of the record's finer grid)
            h_gate = h_gate_full * gate_weights
            gmag *= h_gate
            f_awf = awf_spectrum_hz(gspec.freqs_hz, gmag, blend_db=blend)
            self._in_band(f_awf, "pressure spectrum", snr_db)
            nb = narrowband_check(f_awf, self.profile, s)
            noise_power = _noise_power(noise_gate, h_gate, gspec)
            nz = h_abs.nonzero()[0]     # weights times the band window (1-D: np.flatnonzero)
            passband = ((float(freqs[k0 + nz[0]]), float(freqs[k0 + nz[-1]])) if nz.size
                        else None)
        assert nb is not None
        bounds = pulse_bounds_s(pressure, dt_s, start=gate.start, stop=gate.stop,
                                noise_power_pa2=noise_power)
        doubts: list[ResultWarning] = []
        awf_used = "spectrum"
        if s.awf_method == "zero-crossing":
            f_zc = self._zero_crossing(pressure, dt_s, gate, noise_power, doubts)
            if f_zc is not None:
                f_awf, awf_used = f_zc, "zero-crossing"
        water = self.water if water is None else water
        params = pulse_parameters(pressure, dt_s, f_awf, impedance_rayl=water.impedance_rayl,
                                  derating_depth_m=s.derating_depth_m,
                                  derating_db_per_cm_mhz=s.derating_db_per_cm_mhz,
                                  bounds=bounds, gate=(gate.start, gate.stop))
        spread = None
        if used == "deconvolve" and entry.alternatives:
            spread = _p_r_spread(spec, entry.alternatives, n, gate, k1)
        doubts.extend(self._doubts(snr_db, share_outside, spread, gate, noise, n))
        return TraceResult(pressure, dt_s, used, freqs, mag, plan.sensitivity_abs_v_per_pa,
                           params, nb, water, self.calibration.phase_source,
                           self._settings_dict, f_v, snr_db=snr_db, noise=noise, gate=gate,
                           weights=weights, passband_hz=passband, noise_band_hz=noise_band,
                           warnings=tuple(doubts), awf_method=awf_used,
                           derating_depth_m=s.derating_depth_m or None,
                           phase_p_r_spread=spread)

    def _weights(self, gspec: GatedSpectrum, noise_gate: np.ndarray | float,
                 entry: _GridEntry, snr_db: float, found: bool
                 ) -> tuple[np.ndarray, np.ndarray, tuple[int, int],
                            tuple[float, float] | None, float]:
        """The weights on the plan grid (applied to the inverse) and on the gated grid
        (applied to the gated voltage spectrum for f_awf), the bins outside which the
        former are 0, the noise band (None without noise weighting) and the share of
        above-noise energy outside the calibrated band."""
        s = self.settings
        plan = entry.plan
        if s.weighting is Weighting.NONE:
            # the band window is in the inverse already; the voltage spectrum as it is
            return plan.window, np.ones(gspec.freqs_hz.shape[0]), entry.window_bins, None, 0.0
        nw = noise_weights(gspec, noise_gate, plan.freqs_hz, self.calibration.band_hz,
                           band_snr_db=s.band_snr_db, taper_octaves=s.taper_octaves)
        if nw is None:
            why = ("" if found else "; no arrival stands out of the record (noise only, or a "
                   "continuous wave, which leaves no quiet part to measure the noise on)")
            raise UnusableTraceError(f"no frequency where the gated trace stands "
                                     f"{s.band_snr_db:g} dB above its noise (peak "
                                     f"{snr_db:.1f} dB above the noise RMS): no pulse to "
                                     f"convert{why}")
        return nw.weights, nw.gate_weights, nw.bins, nw.band_hz, nw.share_outside

    def _zero_crossing(self, pressure: np.ndarray, dt_s: float, gate: Gate,
                       noise_power: float, doubts: list[ResultWarning]) -> float | None:
        """Zero-crossing f_awf over the gate with hysteresis, or None (and a warning)."""
        s = self.settings
        seg = pressure[gate.start:gate.stop]
        peak = float(np.abs(seg).max())
        h = max(s.awf_hysteresis_sigma * math.sqrt(noise_power),
                s.awf_hysteresis_fraction * peak)
        try:
            return awf_zero_crossing_hz(pressure, dt_s, gate.start_s, gate.end_s,
                                        hysteresis_pa=h)
        except UnusableTraceError as err:
            doubts.append(ResultWarning(WarningCode.AWF_SPECTRUM_FALLBACK,
                                        f"{err}; f_awf from the spectrum instead"))
            return None

    def _doubts(self, snr_db: float, share_outside: float, spread: float | None, gate: Gate,
                noise: NoiseEstimate, n: int) -> list[ResultWarning]:
        s = self.settings
        out = []
        if snr_db < s.low_snr_db:
            out.append(ResultWarning(WarningCode.LOW_SNR, f"peak {snr_db:.1f} dB above the "
                                     f"noise RMS (below {s.low_snr_db:g} dB)"))
        if share_outside > s.beyond_calibration_share:
            lo, hi = self.calibration.band_hz
            out.append(ResultWarning(
                WarningCode.ENERGY_BEYOND_CALIBRATION,
                f"{100 * share_outside:.1f} % of the pulse's energy above the noise lies "
                f"outside the calibrated band {lo / 1e6:.4g}-{hi / 1e6:.4g} MHz"))
        if spread is not None:
            out.append(ResultWarning(
                WarningCode.PHASE_ESTIMATED,
                f"minimum phase from a magnitude-only calibration: p_r differs by "
                f"{100 * spread:.1f} % between the low-frequency assumptions (flat, the fitted "
                f"edge slope, 40 dB per decade below {self.calibration.band_hz[0] / 1e6:.4g} "
                "MHz)"))
        if s.derating_depth_m == 0:
            out.append(ResultWarning(WarningCode.MI_NOT_DERATED,
                                     "no derating depth given: the mechanical index is the "
                                     "underated value in water"))
        if gate.at_record_edge:
            where = "start" if gate.start == 0 else "end"
            out.append(ResultWarning(WarningCode.PULSE_AT_RECORD_EDGE,
                                     f"the pulse gate reaches the {where} of the record: "
                                     "part of the pulse may be missing"))
        if gate.left_out:
            first = gate.left_out[0]
            main_level = max((a.peak_rms_v for a in gate.left_out), default=0.0)
            out.append(ResultWarning(
                WarningCode.GATED_OUT_ARRIVALS,
                f"{len(gate.left_out)} other arrival(s) outside the gate "
                f"{gate.start_s * 1e6:.4g}-{gate.end_s * 1e6:.4g} us left out (first at "
                f"{first.start * gate.dt_s * 1e6:.4g} us; strongest "
                f"{_db(main_level / max(noise.rms_v, 1e-300)):.0f} dB above the noise)"))
        if noise.segments == 0 and self.settings.weighting is Weighting.NOISE:
            out.append(ResultWarning(WarningCode.NOISE_TAKEN_WHITE,
                                     f"only {noise.quiet_samples} quiet samples of {n}: the "
                                     "noise is taken as white at its measured level"))
        return out

    def _in_band(self, f_hz: float, where: str, snr_db: float) -> None:
        lo, hi = self.calibration.band_hz
        if not lo <= f_hz <= hi:
            low = snr_db < self.settings.low_snr_db
            why = (f"; the trace is mostly noise (peak {snr_db:.1f} dB above the noise RMS)"
                   if low else "")
            raise OutOfBandError(f"acoustic working frequency {f_hz / 1e6:.4g} MHz (from the "
                                 f"{where}) is outside the calibrated band "
                                 f"{lo / 1e6:.4g}-{hi / 1e6:.4g} MHz{why}")


@dataclass(frozen=True, eq=False)
class _GridEntry:
    plan: Plan
    gain: np.ndarray                        # |inverse| * 2 / n
    alternatives: tuple[np.ndarray, ...]    # exp(j delta phase) per low-frequency assumption
    window_bins: tuple[int, int]            # [k0, k1): the bins where the band window is not 0
    welch: WelchSetup                       # for the noise spectrum at this time step
    gate_grids: dict = field(default_factory=dict)   # nfft -> (freqs, |inverse| on them)

    def gate_grid(self, nfft: int) -> tuple[np.ndarray, np.ndarray]:
        """The gated spectrum's ``rfftfreq`` grid for ``nfft`` and ``|H|`` on it, taken at
        the nearest bins of the record's grid (a few gate lengths recur; kept, at most 16)."""
        grid = self.gate_grids.get(nfft)
        if grid is None:
            n, dt = self.plan.n, self.plan.dt_s
            f = np.arange(nfft // 2 + 1) * (1.0 / (nfft * dt))
            bins = np.minimum(np.rint(f * (n * dt)).astype(np.intp), n // 2)
            h_abs = self.plan.inverse_abs_pa_per_v[bins]
            f.setflags(write=False)
            h_abs.setflags(write=False)
            if len(self.gate_grids) >= _MAX_PLANS:
                self.gate_grids.pop(next(iter(self.gate_grids)))
            grid = self.gate_grids[nfft] = (f, h_abs)
        return grid


def _phase_alternatives(calibration: Calibration) -> tuple[np.ndarray, ...]:
    """Phase differences (rad, at the calibration frequencies) between the minimum phase
    under each low-frequency assumption and the one in use; none for a measured phase."""
    if calibration.phase_source != "minimum-phase":
        return ()
    f, mag = calibration.frequency_hz, calibration.magnitude_v_per_pa
    base = calibration.phase_rad
    return tuple(minimum_phase_rad(f, mag, low_slope=slope) - base
                 for slope in LOW_SLOPE_ASSUMPTIONS)


def _noise_power(noise_v2: np.ndarray | float, h_abs: np.ndarray,
                 gspec: GatedSpectrum) -> float:
    """Mean square of the noise after the filter ``|H|``, Pa^2.

    ``sigma_p^2 = 2 dt int_0^{1/2dt} S(f) |H(f)|^2 df``, as the sum over the gated
    spectrum's grid (``noise_v2`` the variance density ``S`` and ``h_abs`` ``|H|`` on it,
    V^2 and Pa/V): ``(1/nfft) sum' S_k |H_k|^2``, inner bins twice (Parseval's relation).
    """
    h2 = h_abs * h_abs
    total = 2.0 * float(np.dot(h2, noise_v2) if not isinstance(noise_v2, float)
                        else noise_v2 * h2.sum())
    first = float(h2[0]) * (noise_v2 if isinstance(noise_v2, float) else float(noise_v2[0]))
    return (total - first) / (2 * (gspec.freqs_hz.shape[0] - 1))


#: Samples per cycle of the highest passed frequency (at least; the grid is the next power
#: of two) at which the low-frequency alternatives are evaluated, p_r then refined by a
#: parabola through three samples. On the test pulses 3, 4 and 6 give spreads within 1 %
#: of each other; like is compared with like (the estimate in use on the same grid).
_SPREAD_SAMPLES_PER_CYCLE = 3


def _p_r_spread(pressure_spectrum: np.ndarray, alternatives: tuple[np.ndarray, ...], n: int,
                gate: Gate, top_bin: int) -> float:
    """Largest minus smallest p_r over the low-frequency assumptions, relative to the one
    in use.

    The pressure is band-limited to the passband, so each alternative is evaluated on a
    coarser grid (``_SPREAD_SAMPLES_PER_CYCLE`` samples per cycle of the top frequency:
    an ``irfft`` of the spectrum up to there, zero-padded), and its minimum in the gate
    is refined by a parabola; the one in use is evaluated the same way, so like is
    compared with like.
    """
    k = min(top_bin + 1, pressure_spectrum.shape[0])
    m = 1 << (max(64, _SPREAD_SAMPLES_PER_CYCLE * top_bin) - 1).bit_length()
    if m >= n:
        m = n
    step = n / m
    i0 = max(0, int(gate.start / step) - 1)
    i1 = min(m, int(math.ceil(gate.stop / step)) + 2)
    head = pressure_spectrum[:k]
    # the rows at the full width of an m-point irfft, zero above k (what irfft would pad
    # them to, in a copy of its own); the transform may then work in them
    rows = np.zeros((1 + len(alternatives), m // 2 + 1), dtype=complex)
    rows[0, :k] = head
    for i, factor in enumerate(alternatives, start=1):
        np.multiply(head, factor[:k], out=rows[i, :k])
    segs = scipy.fft.irfft(rows, m, axis=1, workers=1, overwrite_x=True)[:, i0:i1]
    js = segs.argmin(axis=1).tolist()
    values = []
    for seg, j in zip(segs, js, strict=True):
        low = float(seg[j])
        if 0 < j < seg.shape[0] - 1:
            a, b, c = float(seg[j - 1]), low, float(seg[j + 1])
            curve = a - 2.0 * b + c
            if curve > 0:
                low = b - (a - c) ** 2 / (8.0 * curve)
        values.append(max(0.0, -low))
    base = values[0]
    return (max(values) - min(values)) / base if base > 0 else 0.0


def _db(ratio: float) -> float:
    return 20.0 * math.log10(ratio) if ratio > 0 else -math.inf
