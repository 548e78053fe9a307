"""Settings of the voltage-to-pressure conversion: every one is part of every result."""

from __future__ import annotations

import dataclasses
import enum
import math
from dataclasses import dataclass, fields

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


@dataclass(frozen=True)
class ConversionSettings:
    """How a voltage trace becomes pressure and how the pulse parameters are taken.

    Attributes
    ----------
    method : Method
        ``"deconvolve"`` (regularised inverse of the loaded sensitivity), ``"narrowband"``
        (voltage divided by ``|M_L(f_awf)|``) or ``"auto"`` (narrowband only when the
        narrowband check passes, else deconvolve).
    band_low_hz, band_high_hz : float or None
        Deconvolution band, Hz. None: the calibrated band's edge. The band is always
        clipped to the calibrated band, so the inverse never uses extrapolated sensitivity.
    taper_octaves : float
        Width of the raised-cosine taper inside each band edge, octaves.
    regularisation : float
        Tikhonov (Wiener-type) weight ``eps``: the inverse is
        ``conj(M) / (|M|^2 + (eps * M_ref)^2)``, ``M_ref`` the median of ``|M|`` over
        the band. 0 is a plain division inside the band.
    awf_method : AwfMethod
        ``"spectrum"`` (mean of the -3 dB frequencies of the pressure spectrum) or
        ``"zero-crossing"``.
    narrowband_low_factor, narrowband_high_factor : float
        The narrowband check covers ``low_factor * f_awf`` to
        ``min(narrowband_high_limit_hz, high_factor * f_awf)``.
    narrowband_high_limit_hz : float
        Upper limit of the narrowband check band, Hz.
    narrowband_tolerance_db : float
        Allowed deviation of ``|M_L|`` from its value at f_awf over the check band, dB.
    derating_depth_m : float
        Depth used to derate the peak-rarefactional pressure for the mechanical index, m
        (0: no derating).
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
    awf_method: AwfMethod = AwfMethod.SPECTRUM
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
        """All settings as a JSON-able dict."""
        return dataclasses.asdict(self)


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
