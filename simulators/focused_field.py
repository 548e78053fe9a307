"""The invented focused field of the simulated scene (pure numpy and scipy).

INVENTED: no real source is modelled. The field is that of an idealised source of our own
(a uniformly vibrating, spherically focused circular piston, radius ``a``, focal length
``d``, in loss-free water), worked out with textbook diffraction theory, and then
stretched along y by an invented factor so that its beam is wider along y than along x
(a scan that swaps its axes shows it).

Model
-----
The Fresnel (paraxial) diffraction integral of the focused piston [1]_ [2]_. At a
distance ``z' = d + z`` from the source along its axis (``z`` measured from the geometric
focus, away from the source) and ``r`` off the axis, with ``k = 2 pi f / c``::

    P(r, z') = (k a^2 / z') |I(v, alpha)|,   I = integral_0^1 J0(v t) exp(i alpha t^2) t dt,
    v = k a r / z',   alpha = (k a^2 / 2) (1/z' - 1/d),

P in units of the pressure at the source's face (the phase is dropped). Its limits:

- in the geometric focal plane (``z' = d``, ``alpha = 0``) ``P = G 2 J1(v)/v`` with the
  focal gain ``G = k a^2 / (2 d)``: the Airy pattern of a circular aperture [1]_ [3]_,
  first zero at ``v = j_{1,1} = 3.8317``, first side lobe at ``v = j_{2,1} = 5.1356``,
  17.6 dB down;
- on the axis (``v = 0``) ``P = (k a^2 / (2 z')) |sin w / w|``,
  ``w = (k a^2 / 4) (1/z' - 1/d)``: the paraxial form of O'Neil's on-axis result [4]_,
  whose maximum lies a little nearer the source than ``d`` (the focal shift); its zeros
  ``w = +-pi`` bound the focal zone, and the axial side lobes lie beyond them.

The invented stretch: ``r^2 = x^2 + (y / s)^2`` with ``s = stretch_y``.

The beam factor is ``P`` over its maximum along the axis (found numerically), so it is 1
at the axial maximum and below 1 everywhere else. The integral is evaluated by
Gauss-Legendre quadrature with enough nodes for the oscillation of its integrand
(``tests/test_sim_beam.py`` compares it with ``scipy.integrate.quad``).

References
----------
.. [1] M. Born and E. Wolf, Principles of Optics, Cambridge University Press (7th ed.
   1999), sec. 8.5.2 (circular aperture) and sec. 8.8 (the three-dimensional light
   distribution near a focus).
.. [2] G. S. Kino, Acoustic Waves: Devices, Imaging and Analog Signal Processing,
   Prentice-Hall (1987), ch. 3 (Fresnel approximation, focused transducers).
.. [3] J. W. Goodman, Introduction to Fourier Optics, Roberts (3rd ed. 2005), ch. 4-5.
.. [4] H. T. O'Neil, "Theory of focusing radiators", J. Acoust. Soc. Am. 21, 516-526
   (1949).
(Section and chapter numbers recalled from memory.)
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import cache, lru_cache

import numpy as np
from scipy.optimize import brentq, minimize_scalar
from scipy.special import j0

__all__ = ["FocusedSource", "BeamTruth", "field_amplitude", "axial_maximum", "beam_factor",
           "beam_truth", "MINUS_3DB", "MINUS_6DB"]

MINUS_3DB = 10.0 ** (-3.0 / 20.0)   # amplitude ratio of -3 dB
MINUS_6DB = 10.0 ** (-6.0 / 20.0)   # amplitude ratio of -6 dB (0.501, not 1/2)
_MAX_NODES = 1024
_V_STEP = 0.05                      # transverse search step, in units of v


@dataclass(frozen=True)
class FocusedSource:
    """The invented source: radius and focal length (m), the y stretch and the water's
    sound speed (m/s)."""

    radius_m: float = 12.0e-3
    focal_distance_m: float = 0.05
    stretch_y: float = 1.25
    sound_speed_m_per_s: float = 1482.0

    def __post_init__(self) -> None:
        for name in ("radius_m", "focal_distance_m", "stretch_y", "sound_speed_m_per_s"):
            value = getattr(self, name)
            if not (math.isfinite(value) and value > 0):
                raise ValueError(f"{name} must be a positive finite number, got {value!r}")


@dataclass(frozen=True)
class BeamTruth:
    """Figures of the beam, computed from :func:`beam_factor` alone.

    Positions are in the scene's frame (m, relative to the geometric focus, z away from
    the source); widths are full widths (m) through the axial maximum; side lobe levels
    are dB re the axial maximum (negative).
    """

    frequency_hz: float
    focus_z_m: float                 # the axial maximum
    width_x_3db_m: float
    width_x_6db_m: float
    width_y_3db_m: float
    width_y_6db_m: float
    zone_near_z_m: float             # where the axis falls to -6 dB, source side
    zone_far_z_m: float              # where the axis falls to -6 dB, far side
    side_lobe_x_m: float             # first side lobe along x at the focus depth
    side_lobe_x_db: float
    side_lobe_y_m: float
    side_lobe_y_db: float

    @property
    def focal_zone_6db_m(self) -> float:
        """Length of the -6 dB focal zone along the axis, m."""
        return self.zone_far_z_m - self.zone_near_z_m


@cache
def _unit_nodes(n: int) -> tuple[np.ndarray, np.ndarray]:
    """Gauss-Legendre nodes and weights on [0, 1] (a few dozen sizes are ever used)."""
    t, w = np.polynomial.legendre.leggauss(n)
    return 0.5 * (t + 1.0), 0.5 * w


def _wavenumber(frequency_hz: float, source: FocusedSource) -> float:
    if not (math.isfinite(frequency_hz) and frequency_hz > 0):
        raise ValueError(f"frequency must be a positive finite number of Hz, got "
                         f"{frequency_hz!r}")
    return 2.0 * math.pi * frequency_hz / source.sound_speed_m_per_s


def field_amplitude(position_m: tuple[float, float, float], frequency_hz: float,
                    source: FocusedSource) -> float:
    """``P`` of the module's model: the amplitude at ``position_m`` (x, y, z from the
    geometric focus, m) over the pressure at the source's face; 0 at or behind the face."""
    x, y, z = position_m
    k = _wavenumber(frequency_hz, source)
    a, d = source.radius_m, source.focal_distance_m
    distance = d + z
    if distance <= 0:
        return 0.0
    r = math.hypot(x, y / source.stretch_y)
    v = k * a * r / distance
    alpha = 0.5 * k * a * a * (1.0 / distance - 1.0 / d)
    # the integrand's phase runs through about v + 2|alpha| radians over [0, 1]
    n = min(_MAX_NODES, 16 * math.ceil((24 + 0.6 * (v + 2 * abs(alpha))) / 16))
    t, w = _unit_nodes(n)
    integral = np.sum(w * t * j0(v * t) * np.exp(1j * alpha * t * t))
    return float(k * a * a / distance * abs(integral))


def _zone_bounds_m(k: float, source: FocusedSource) -> tuple[float, float]:
    """Distances from the source (m) of the axial zeros ``w = +-pi`` around the focus
    (the far one replaced by 100 d when the gain is too low for it to exist)."""
    d = source.focal_distance_m
    step = 4.0 * math.pi / (k * source.radius_m ** 2)
    near = 1.0 / (1.0 / d + step)
    far = 1.0 / (1.0 / d - step) if 1.0 / d > step else 100.0 * d
    return near, far


@lru_cache(maxsize=256)
def axial_maximum(frequency_hz: float, source: FocusedSource) -> tuple[float, float]:
    """Where the field is largest along the axis: (z from the geometric focus, m; ``P``
    there). ``P`` is unimodal between the axial zeros around the focus (the product of
    two log-concave factors in 1/z'), so bounded Brent finds it."""
    k = _wavenumber(frequency_hz, source)
    near, far = _zone_bounds_m(k, source)
    d = source.focal_distance_m
    found = minimize_scalar(lambda zz: -field_amplitude((0.0, 0.0, zz - d), frequency_hz, source),
                            bounds=(near, far), method="bounded",
                            options={"xatol": 1e-10 * d})
    z = float(found.x) - d
    return z, field_amplitude((0.0, 0.0, z), frequency_hz, source)


def beam_factor(position_m: tuple[float, float, float], frequency_hz: float,
                source: FocusedSource) -> float:
    """Amplitude at ``position_m`` (x, y, z from the geometric focus, m) relative to the
    axial maximum at ``frequency_hz``: 1 there, below 1 elsewhere (invented field)."""
    _, peak = axial_maximum(frequency_hz, source)
    return field_amplitude(position_m, frequency_hz, source) / peak


def _across(frequency_hz: float, source: FocusedSource, z_m: float, axis: int,
            dr_m: float) -> tuple[float, float, float, float]:
    """Half widths at -3 and -6 dB, and the first side lobe (position, level re the axis)
    along ``axis`` (0 = x, 1 = y) in the plane ``z_m``, found from the beam factor."""

    def g(r: float) -> float:
        point = (r, 0.0, z_m) if axis == 0 else (0.0, r, z_m)
        return beam_factor(point, frequency_hz, source)

    on_axis = g(0.0)
    halves = []
    for level in (MINUS_3DB, MINUS_6DB):
        r0 = 0.0
        while g(r0 + dr_m) > level * on_axis:
            r0 += dr_m
            if r0 > 1000 * dr_m:
                raise ValueError("the beam does not fall to its -6 dB level")
        halves.append(brentq(lambda r, lv=level: g(r) - lv * on_axis, r0, r0 + dr_m,
                             xtol=1e-13))
    # walk out past the first minimum, then to the first maximum beyond it
    r, previous, value = halves[1], g(halves[1]), g(halves[1] + dr_m)
    while value < previous:
        r += dr_m
        previous, value = value, g(r + dr_m)
        if r > 1000 * dr_m:
            raise ValueError("no side lobe found")
    while value >= previous:
        r += dr_m
        previous, value = value, g(r + dr_m)
    lobe = minimize_scalar(lambda rr: -g(rr), bounds=(r - dr_m, r + dr_m), method="bounded",
                           options={"xatol": 1e-12})
    lobe_r = float(lobe.x)
    return halves[0], halves[1], lobe_r, 20.0 * math.log10(g(lobe_r) / on_axis)


@lru_cache(maxsize=64)
def beam_truth(frequency_hz: float, source: FocusedSource) -> BeamTruth:
    """The beam's figures (see :class:`BeamTruth`), found numerically (scipy.optimize
    brentq and minimize_scalar) from :func:`beam_factor` alone, so they are properties of
    the very function the scene uses."""
    k = _wavenumber(frequency_hz, source)
    z_focus, _ = axial_maximum(frequency_hz, source)
    d = source.focal_distance_m
    dr = _V_STEP * (d + z_focus) / (k * source.radius_m)
    x3, x6, x_lobe, x_db = _across(frequency_hz, source, z_focus, 0, dr)
    y3, y6, y_lobe, y_db = _across(frequency_hz, source, z_focus, 1, dr * source.stretch_y)
    near, far = _zone_bounds_m(k, source)

    def on_axis(zz: float) -> float:
        return beam_factor((0.0, 0.0, zz), frequency_hz, source) - MINUS_6DB

    zone_near = brentq(on_axis, near - d, z_focus, xtol=1e-13)
    zone_far = brentq(on_axis, z_focus, far - d, xtol=1e-13)
    return BeamTruth(frequency_hz=frequency_hz, focus_z_m=z_focus,
                     width_x_3db_m=2 * x3, width_x_6db_m=2 * x6,
                     width_y_3db_m=2 * y3, width_y_6db_m=2 * y6,
                     zone_near_z_m=zone_near, zone_far_z_m=zone_far,
                     side_lobe_x_m=x_lobe, side_lobe_x_db=x_db,
                     side_lobe_y_m=y_lobe, side_lobe_y_db=y_db)
