"""Sound speed and density of pure water from temperature.

References
----------
W. Marczak, "Water as a standard in the measurements of speed of sound in liquids",
J. Acoust. Soc. Am. 102 (5), 2776-2779 (1997): fifth-order polynomial, 0-95 degC, ITS-90.

M. Tanaka, G. Girard, R. Davis, A. Peuto, N. Bignell, "Recommended table for the
density of water between 0 degC and 40 degC based on recent experimental reports",
Metrologia 38, 301-309 (2001): air-free SMOW at 101.325 kPa, ITS-90.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from ..errors import ConfigError

_MARCZAK = (1.402385e3, 5.038813, -5.799136e-2, 3.287156e-4, -1.398845e-6, 2.787860e-9)
_TANAKA = (-3.983035, 301.797, 522528.9, 69.34881, 999.974950)

#: Temperatures accepted, degC (the sound-speed fit covers 0-95; the density fit 0-40,
#: used a little beyond as common practice for warm tanks).
TEMPERATURE_RANGE_C = (0.0, 60.0)


def sound_speed_m_per_s(temperature_c: float) -> float:
    """Speed of sound in pure water, m/s, at ``temperature_c`` degC (Marczak 1997)."""
    t = _check(temperature_c)
    return sum(c * t**k for k, c in enumerate(_MARCZAK))


def density_kg_per_m3(temperature_c: float) -> float:
    """Density of pure air-free water at 101.325 kPa, kg/m^3 (Tanaka et al. 2001)."""
    t = _check(temperature_c)
    a1, a2, a3, a4, a5 = _TANAKA
    return a5 * (1.0 - (t + a1) ** 2 * (t + a2) / (a3 * (t + a4)))


@dataclass(frozen=True)
class Water:
    """Water properties at one temperature."""

    temperature_c: float
    density_kg_per_m3: float
    sound_speed_m_per_s: float

    @classmethod
    def at(cls, temperature_c: float) -> Water:
        return cls(float(temperature_c), density_kg_per_m3(temperature_c),
                   sound_speed_m_per_s(temperature_c))

    @property
    def impedance_rayl(self) -> float:
        """Characteristic acoustic impedance rho*c, kg m^-2 s^-1."""
        return self.density_kg_per_m3 * self.sound_speed_m_per_s

    def as_dict(self) -> dict:
        return {"temperature_c": self.temperature_c,
                "density_kg_per_m3": self.density_kg_per_m3,
                "sound_speed_m_per_s": self.sound_speed_m_per_s}


def _check(temperature_c: float) -> float:
    t = float(temperature_c)
    lo, hi = TEMPERATURE_RANGE_C
    if not (math.isfinite(t) and lo <= t <= hi):
        raise ConfigError(f"water temperature {temperature_c!r} degC outside {lo:g}-{hi:g} degC")
    return t
