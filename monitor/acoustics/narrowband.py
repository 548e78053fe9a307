"""The narrowband check of IEC 62127-1 (as commonly stated).

The narrowband approximation (pressure = voltage / |M_L(f_awf)|) is acceptable when
``|M_L|`` stays within +/-3 dB of its value at the acoustic working frequency from
``f_awf / 2`` to ``min(40 MHz, 8 f_awf)``. Later editions revise these limits, so the
band factors, upper limit and tolerance are settings
(:class:`tankside.monitor.acoustics.settings.ConversionSettings`) with these defaults.

Where the check band reaches beyond the calibrated band the sensitivity there is
unknown, so the check fails (the safe choice: ``auto`` then deconvolves). The worst
deviation is still reported over the calibrated part.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .calibration import Calibration
from .loading import Loading
from .settings import ConversionSettings

# Points of the dense grid laid across the calibrated band, on top of the calibration
# frequencies themselves (where the piecewise-linear interpolation has its extremes).
_PROFILE_POINTS = 4096


@dataclass(frozen=True, eq=False)
class SensitivityCurve:
    """``|M_L|`` in dB on a dense grid over the calibrated band (arrays read-only)."""

    freqs_hz: np.ndarray
    level_db: np.ndarray

    @classmethod
    def build(cls, calibration: Calibration, loading: Loading) -> SensitivityCurve:
        lo, hi = calibration.band_hz
        grid = np.union1d(np.linspace(lo, hi, _PROFILE_POINTS), calibration.frequency_hz)
        mag = np.abs(calibration.interpolate(grid) * loading.factor(grid, calibration.load))
        with np.errstate(divide="ignore"):
            level = 20.0 * np.log10(mag)
        grid.setflags(write=False)
        level.setflags(write=False)
        return cls(grid, level)

    @property
    def band_hz(self) -> tuple[float, float]:
        return float(self.freqs_hz[0]), float(self.freqs_hz[-1])

    def level_at_db(self, frequency_hz: float) -> float:
        """``20 log10 |M_L|`` at one frequency inside the band (dB re 1 V/Pa)."""
        f = self.freqs_hz
        k = min(max(int(f.searchsorted(frequency_hz)), 1), f.size - 1)
        f0, f1 = float(f[k - 1]), float(f[k])
        y0, y1 = float(self.level_db[k - 1]), float(self.level_db[k])
        return y0 + (y1 - y0) * (frequency_hz - f0) / (f1 - f0)

    def magnitude_at_v_per_pa(self, frequency_hz: float) -> float:
        return 10.0 ** (self.level_at_db(frequency_hz) / 20.0)


@dataclass(frozen=True)
class NarrowbandCheck:
    """Outcome of the narrowband check.

    Attributes
    ----------
    ok : bool
        True when ``|M_L|`` is within tolerance over the whole check band.
    band_hz : tuple of float
        The check band, Hz.
    max_deviation_db : float
        Worst ``|20 log10(|M_L(f)| / |M_L(f_awf)|)|`` over the calibrated part of the band, dB.
    covered : bool
        Whether the calibration covers the whole check band.
    tolerance_db : float
        The limit applied, dB.
    calibrated_band_hz : tuple of float
        The calibrated band, Hz.
    """

    ok: bool
    band_hz: tuple[float, float]
    max_deviation_db: float
    covered: bool
    tolerance_db: float
    calibrated_band_hz: tuple[float, float]

    @property
    def reason(self) -> str:
        """A few words on the verdict."""
        lo, hi = self.band_hz
        if not self.covered:
            c_lo, c_hi = self.calibrated_band_hz
            return (f"check band {lo / 1e6:.4g}-{hi / 1e6:.4g} MHz reaches beyond the "
                    f"calibration {c_lo / 1e6:.4g}-{c_hi / 1e6:.4g} MHz")
        if not self.ok:
            return (f"sensitivity varies by {self.max_deviation_db:.2f} dB "
                    f"(limit {self.tolerance_db:g} dB)")
        return f"within {self.tolerance_db:g} dB"

    def as_dict(self) -> dict:
        dev = self.max_deviation_db
        return {"ok": self.ok, "band_hz": [self.band_hz[0], self.band_hz[1]],
                "max_deviation_db": dev if math.isfinite(dev) else None}


def check_band_hz(awf_hz: float, settings: ConversionSettings) -> tuple[float, float]:
    """The band the check covers for acoustic working frequency ``awf_hz``, Hz."""
    lo = settings.narrowband_low_factor * awf_hz
    hi = min(settings.narrowband_high_limit_hz, settings.narrowband_high_factor * awf_hz)
    return lo, max(lo, hi)


def narrowband_check(awf_hz: float, profile: SensitivityCurve,
                     settings: ConversionSettings) -> NarrowbandCheck:
    """Check the narrowband condition at ``awf_hz`` (Hz) against ``|M_L|``.

    ``awf_hz`` must lie inside the calibrated band (the caller checks).

    References
    ----------
    IEC 62127-1 (narrowband approximation: +/-3 dB from f_awf/2 to min(40 MHz, 8 f_awf)).
    """
    lo, hi = check_band_hz(awf_hz, settings)
    cal_lo, cal_hi = profile.band_hz
    covered = cal_lo <= lo and hi <= cal_hi
    a, b = max(lo, cal_lo), min(hi, cal_hi)
    f, level = profile.freqs_hz, profile.level_db
    ref, at_a, at_b = np.interp((awf_hz, a, b), f, level).tolist()
    i, j = int(f.searchsorted(a, side="right")), int(f.searchsorted(b, side="left"))
    dev = max(abs(at_a - ref), abs(at_b - ref))
    if j > i:
        inner = level[i:j]
        dev = max(dev, float(inner.max()) - ref, ref - float(inner.min()))
    tol = settings.narrowband_tolerance_db
    return NarrowbandCheck(bool(covered and dev <= tol), (lo, hi), dev, bool(covered), tol,
                           (cal_lo, cal_hi))
