"""Settings of the voltage-to-pressure conversion: every one is part of every result."""

from __future__ import annotations

import dataclasses
import enum
import math
from dataclasses import dataclass, fields
from enum import StrEnum

from ..errors import ConfigError


class Method(enum.StrEnum):
    """Voltage-to-pressure conversion methods (the strings stored in settings and results)."""

    AUTO = "auto"
    """Narrowband when the narrowband check passes, else deconvolve (a setting only: a
    result records the method it used)."""
    DECONVOLVE = "deconvolve"
    """Regularised inverse of the loaded sensitivity over the band."""
    NARROWBAND = "narrowband"
    """Voltage divided by ``|M_L(f_awf)|`` (IEC 62127-1 narrowband approximation)."""


class AwfMethod(enum.StrEnum):
    """How the acoustic working frequency is taken (IEC 62127-1)."""

    SPECTRUM = "spectrum"
    """Mean of the -3 dB frequencies of the pressure spectrum."""
    ZERO_CROSSING = "zero-crossing"
    """From the zero crossings of the pressure waveform."""


class Weighting(StrEnum):
    """How the deconvolution band is weighted for each trace."""

    #: Wiener-type weights from the trace's own signal-to-noise spectrum, zero wherever
    #: the gated voltage spectrum does not stand above the measured noise.
    NOISE = "noise"
    #: The fixed band only (``band_low_hz``/``band_high_hz`` or the calibrated band).
    NONE = "none"


@dataclass(frozen=True)
class ConversionSettings:
    """How a voltage trace becomes pressure and how the pulse parameters are taken.

    Attributes
    ----------
    method : Method
        ``"deconvolve"`` (regularised inverse of the loaded sensitivity), ``"narrowband"``
        (voltage divided by ``|M_L(f_awf)|``) or ``"auto"`` (deconvolve whenever the
        calibration has a measured phase; for a magnitude-only calibration, narrowband
        when the narrowband check passes, else deconvolve).
    band_low_hz, band_high_hz : float or None
        Deconvolution band, Hz. None: the calibrated band's edge. The band is always
        clipped to the calibrated band, so the inverse never uses extrapolated sensitivity.
        With ``weighting="noise"`` the per-trace weights act inside this band.
    taper_octaves : float
        Width of the raised-cosine taper inside each edge of the fixed band, and outside
        each edge of the per-trace noise band, octaves.
    regularisation : float
        Tikhonov (Wiener-type) weight ``eps``: the inverse is
        ``conj(M) / (|M|^2 + (eps * M_ref)^2)``, ``M_ref`` the median of ``|M|`` over
        the band. 0 is a plain division inside the band. With noise weighting it only
        guards against a sensitivity near zero.
    weighting : Weighting
        ``"noise"``: per-trace weights ``SNR / (1 + SNR)`` from the gated voltage spectrum
        and the noise measured on the quiet part of the record, zero outside the band
        where that spectrum stands ``band_snr_db`` above the noise. ``"none"``: the fixed
        band only.
    band_snr_db : float
        The noise band spans the lowest to the highest frequency at which the gated
        voltage spectrum (smoothed over 3 bins) stands this far above the noise, dB.
    gate_start_s, gate_end_s : float or None
        Pulse gate, s from the first sample of the record. None: found automatically
        (both must be given to fix the gate).
    gate_threshold_sigma : float
        An arrival is where the RMS over half a cycle exceeds this many noise sigmas.
    gate_gap_cycles : float
        Arrivals closer than this many cycles (of the voltage spectrum's peak frequency)
        are one arrival.
    gate_margin_cycles : float
        The automatic gate extends this many cycles beyond the main arrival.
    noise_segment_samples : int
        Segment length of the noise spectrum estimate (Hann-windowed segments of the quiet
        part of the record, averaged), samples.
    low_snr_db : float
        Below this ``snr_db`` a result carries the ``low_snr`` warning, dB.
    beyond_calibration_share : float
        Share of the pulse's above-noise voltage energy outside the calibrated band above
        which a result carries ``energy_beyond_calibration``.
    awf_method : AwfMethod
        ``"spectrum"`` (mean of the -3 dB frequencies of the pressure spectrum) or
        ``"zero-crossing"`` (half cycles between excursions beyond the hysteresis over the
        pulse gate; falls back to the spectrum, with a warning, when the pulse has fewer
        than two).
    awf_blend_db : float
        A secondary spectral hump whose top lies between -3 dB and ``-3 + awf_blend_db``
        dB counts in proportion, so f_awf moves continuously as it rises (0: the plain
        threshold of the standard; 2 dB: a 1 % change of such a hump moves f_awf by at
        most about 2 % of the distance between the humps' answers).
    awf_hysteresis_sigma, awf_hysteresis_fraction : float
        Zero crossings are counted only between excursions beyond +/-h, ``h`` the larger
        of this many pressure noise sigmas and this fraction of the gate's peak pressure.
    narrowband_low_factor, narrowband_high_factor : float
        The narrowband check covers ``low_factor * f_awf`` to
        ``min(narrowband_high_limit_hz, high_factor * f_awf)``.
    narrowband_high_limit_hz : float
        Upper limit of the narrowband check band, Hz.
    narrowband_tolerance_db : float
        Allowed deviation of ``|M_L|`` from its value at f_awf over the check band, dB.
    derating_depth_m : float
        Depth used to derate the peak-rarefactional pressure for the mechanical index, m
        (0: no derating; the result then carries ``mi_not_derated``).
    derating_db_per_cm_mhz : float
        Derating attenuation coefficient, dB cm^-1 MHz^-1 (IEC 62359: 0.3).

    References
    ----------
    IEC 62127-1 (narrowband condition, acoustic working frequency); IEC 62359 (derating
    and mechanical index).
    """

    method: Method = Method.AUTO
    band_low_hz: float | None = None
    band_high_hz: float | None = None
    taper_octaves: float = 0.25
    regularisation: float = 0.01
    weighting: Weighting = Weighting.NOISE
    band_snr_db: float = 10.0
    gate_start_s: float | None = None
    gate_end_s: float | None = None
    gate_threshold_sigma: float = 2.5
    gate_gap_cycles: float = 5.0
    gate_margin_cycles: float = 2.0
    noise_segment_samples: int = 256
    low_snr_db: float = 20.0
    beyond_calibration_share: float = 0.01
    awf_method: AwfMethod = AwfMethod.SPECTRUM
    awf_blend_db: float = 2.0
    awf_hysteresis_sigma: float = 4.0
    awf_hysteresis_fraction: float = 0.05
    narrowband_low_factor: float = 0.5
    narrowband_high_factor: float = 8.0
    narrowband_high_limit_hz: float = 40e6
    narrowband_tolerance_db: float = 3.0
    derating_depth_m: float = 0.0
    derating_db_per_cm_mhz: float = 0.3

    def __post_init__(self):
        # a string from a bench file or the command line becomes its member
        object.__setattr__(self, "method", _member(Method, "method", self.method))
        object.__setattr__(self, "awf_method", _member(AwfMethod, "awf_method", self.awf_method))
        lo, hi = self.band_low_hz, self.band_high_hz
        for name, v in (("band_low_hz", lo), ("band_high_hz", hi)):
            if v is not None:
                _nonneg(name, v)
        if lo is not None and hi is not None and not lo < hi:
            raise ConfigError(f"deconvolution band empty: {lo!r} Hz to {hi!r} Hz")
        try:
            object.__setattr__(self, "weighting", Weighting(self.weighting))
        except ValueError as err:
            raise ConfigError(f"weighting {self.weighting!r}: expected one of "
                              f"{', '.join(w.value for w in Weighting)}") from err
        g0, g1 = self.gate_start_s, self.gate_end_s
        if (g0 is None) != (g1 is None):
            raise ConfigError("gate_start_s and gate_end_s: give both, or neither for the "
                              "automatic gate")
        if g0 is not None and g1 is not None:
            _nonneg("gate_start_s", g0)
            _nonneg("gate_end_s", g1)
            if not g0 < g1:
                raise ConfigError(f"pulse gate empty: {g0!r} s to {g1!r} s")
        for name in ("gate_threshold_sigma", "gate_gap_cycles", "beyond_calibration_share"):
            _positive(name, getattr(self, name))
        for name in ("band_snr_db", "gate_margin_cycles", "awf_blend_db",
                     "awf_hysteresis_sigma", "awf_hysteresis_fraction"):
            _nonneg(name, getattr(self, name))
        _finite("low_snr_db", self.low_snr_db)
        seg = self.noise_segment_samples
        if isinstance(seg, bool) or not isinstance(seg, int) or seg < 16:
            raise ConfigError(f"noise_segment_samples must be an integer >= 16, got {seg!r}")
        _nonneg("taper_octaves", self.taper_octaves)
        _nonneg("regularisation", self.regularisation)
        _nonneg("derating_depth_m", self.derating_depth_m)
        _nonneg("derating_db_per_cm_mhz", self.derating_db_per_cm_mhz)
        _positive("narrowband_low_factor", self.narrowband_low_factor)
        _positive("narrowband_high_limit_hz", self.narrowband_high_limit_hz)
        _positive("narrowband_tolerance_db", self.narrowband_tolerance_db)
        _positive("narrowband_high_factor", self.narrowband_high_factor)
        if not self.narrowband_high_factor > self.narrowband_low_factor:
            raise ConfigError("narrowband_high_factor must exceed narrowband_low_factor")

    @classmethod
    def from_table(cls, table: dict) -> ConversionSettings:
        """Build from a mapping (e.g. a bench file's ``[conversion]`` table)."""
        names = {f.name for f in fields(cls)}
        unknown = sorted(set(table) - names)
        if unknown:
            raise ConfigError(f"unknown conversion setting {unknown[0]!r}; "
                              f"known: {', '.join(sorted(names))}")
        return cls(**table)

    def replace(self, **changes) -> ConversionSettings:
        """A copy with some settings changed (unknown names are a ConfigError)."""
        names = {f.name for f in fields(self)}
        unknown = sorted(set(changes) - names)
        if unknown:
            raise ConfigError(f"unknown conversion setting {unknown[0]!r}")
        return dataclasses.replace(self, **changes)

    def as_dict(self) -> dict:
        """All settings as a JSON-able dict (enumerations as their plain string values)."""
        out = dataclasses.asdict(self)
        out["weighting"] = str(self.weighting)
        return out


def _finite(name, v):
    if isinstance(v, bool) or not (isinstance(v, int | float) and math.isfinite(v)):
        raise ConfigError(f"{name} must be a finite number, got {v!r}")


def _member(vocabulary: type[enum.StrEnum], name: str, value):
    try:
        return vocabulary(value)
    except ValueError:
        raise ConfigError(f"{name} {value!r}: expected one of {', '.join(vocabulary)}") from None


def _nonneg(name, v):
    if isinstance(v, bool) or not (isinstance(v, int | float) and math.isfinite(v) and v >= 0):
        raise ConfigError(f"{name} must be finite and >= 0, got {v!r}")


def _positive(name, v):
    if isinstance(v, bool) or not (isinstance(v, int | float) and math.isfinite(v) and v > 0):
        raise ConfigError(f"{name} must be finite and > 0, got {v!r}")
