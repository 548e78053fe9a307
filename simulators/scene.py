"""The simulated acoustic scene shared by the simulated generator and digitiser (pure numpy).

INVENTED DEMO SCENARIO: a focused 3.5 MHz source, 50 mm focal distance, in a small water
tank at 20 degC, driven with tone bursts by a signal generator (through an amplifier folded
into ``pressure_per_vpp_pa``); the invented needle hydrophone of
:mod:`tankside.simulators.hydrophone` sits on a stage near the focus.

The chain from drive to hydrophone voltage:

1. Drive: a burst of ``cycles`` periods at ``frequency_hz`` with smooth one-cycle edges
   (the source rings up and down), amplitude ``pressure_per_vpp_pa * amplitude_vpp``
   times the source's own band-pass response.
2. Beam: the invented focused field of :mod:`tankside.simulators.focused_field` (a
   focused circular piston in the Fresnel approximation, stretched along y): a focus a
   little nearer the source than the geometric one, a -6 dB beam width of about 1.2 mm
   (x) and 1.5 mm (y) at 3.5 MHz, Airy side lobes about 17 dB down and a focal zone of
   about 17 mm. The stage position is relative to the geometric focus, z away from the
   source; the pressure is linear in the beam factor (:func:`beam_factor`), whose figures
   :func:`beam_truth` gives.
3. Nonlinear propagation: the Fubini solution (Fubini 1935; Blackstock 1966), valid below
   the shock formation distance ``x_bar = rho c^3 / (beta w p)``::

       p(tau) / p = sum_n B_n(sigma) sin(n w tau),  B_n = 2 J_n(n sigma) / (n sigma),

   with ``sigma = d / x_bar`` for the propagation distance d. The scene uses the local
   amplitude at the hydrophone (a plane-wave equivalent, a deliberate simplification of
   the invented scene) and evaluates the series quasi-statically along the burst
   envelope; sigma is held at 1 beyond the shock distance, where the series stops.
4. Hydrophone: the pressure is filtered by the invented sensitivity M(f) (an analog
   filter model) to give the voltage at the end of the cable.

References
----------
.. [1] E. Fubini Ghiron, "Anomalie nella propagazione di onde acustiche di grande
   ampiezza", Alta Frequenza 4, 530-581 (1935).
.. [2] D. T. Blackstock, "Connection between the Fay and Fubini solutions for plane sound
   waves of finite amplitude", J. Acoust. Soc. Am. 39, 1019-1026 (1966).
.. [3] M. F. Hamilton and D. T. Blackstock (eds.), Nonlinear Acoustics, Academic Press
   (1998), ch. 4 (Fubini solution, shock formation distance) and ch. 2 (B/A of water).
"""

from __future__ import annotations

import threading
from dataclasses import dataclass, replace

import numpy as np
from scipy.special import jv

from .focused_field import BeamTruth, FocusedSource
from .focused_field import beam_factor as _source_beam_factor
from .focused_field import beam_truth as _source_beam_truth
from .hydrophone import HydrophoneModel


@dataclass(frozen=True)
class Drive:
    """The generator's drive as the scene sees it."""

    output_on: bool = True
    amplitude_vpp: float = 2.0
    frequency_hz: float = 3.5e6
    burst_cycles: int = 3
    burst_period_s: float = 0.05  # 20 bursts (triggers) per second


@dataclass(frozen=True)
class SceneParameters:
    """Fixed parameters of the invented scene (SI units).

    ``beta = 1 + B/(2A) = 3.5`` for water with B/A = 5.0 (Hamilton and Blackstock 1998,
    table of B/A; value recalled from memory). Water at 20 degC: c = 1482 m/s,
    rho = 998.2 kg/m^3 (handbook values, recalled from memory).

    ``source_radius_m`` and ``beam_stretch_y`` shape the invented focused field
    (:class:`~tankside.simulators.focused_field.FocusedSource`, with the focal distance
    and sound speed here).

    ``max_harmonics`` truncates the Fubini series (also to 90 % of the sampling Nyquist
    frequency): 12 harmonics of 3.5 MHz reach 42 MHz, just past the invented hydrophone's
    calibrated band; the dropped tail is below 0.03 % of the amplitude at sigma = 0.5 but
    grows towards the shock distance (about 2.4 % for the 12th term alone at sigma = 0.93,
    the default scene at 10 Vpp).
    """

    pressure_per_vpp_pa: float = 0.09e6
    source_centre_hz: float = 3.5e6
    source_quality: float = 1.5
    focal_distance_m: float = 0.05
    source_radius_m: float = 12.0e-3
    beam_stretch_y: float = 1.25
    sound_speed_m_per_s: float = 1482.0
    density_kg_per_m3: float = 998.2
    nonlinearity_beta: float = 3.5
    max_harmonics: int = 12
    sync_high_v: float = 3.3  # the generator's sync output into the digitiser's EXT input

    @property
    def source(self) -> FocusedSource:
        """The focused source of the beam (invented)."""
        return FocusedSource(radius_m=self.source_radius_m,
                             focal_distance_m=self.focal_distance_m,
                             stretch_y=self.beam_stretch_y,
                             sound_speed_m_per_s=self.sound_speed_m_per_s)


# ---------------------------------------------------------------- pure functions


def fubini_coefficients(sigma: np.ndarray | float, n_max: int) -> np.ndarray:
    """Fubini harmonic amplitudes B_n(sigma) = 2 J_n(n sigma) / (n sigma), n = 1..n_max.

    Parameters
    ----------
    sigma : float or numpy.ndarray
        Distance over shock formation distance, 0 <= sigma <= 1.
    n_max : int
        Number of harmonics.

    Returns
    -------
    numpy.ndarray
        Shape ``(n_max,) + shape(sigma)``; at sigma = 0 the limit B_1 = 1, B_n>1 = 0.

    References
    ----------
    Fubini (1935); Blackstock (1966); Hamilton and Blackstock (1998), eq. 4.20.
    """
    sigma = np.asarray(sigma, dtype=float)
    if np.any(sigma < 0) or np.any(sigma > 1):
        raise ValueError("the Fubini series needs 0 <= sigma <= 1 (below the shock distance)")
    n = np.arange(1, n_max + 1, dtype=float).reshape((-1,) + (1,) * sigma.ndim)
    ns = n * sigma
    safe = np.where(ns > 0, ns, 1.0)
    b = np.where(ns > 0, 2.0 * jv(n, safe) / safe, np.where(n == 1, 1.0, 0.0))
    return b


def shock_distance_m(amplitude_pa: float, frequency_hz: float, *, beta: float,
                     density_kg_per_m3: float, sound_speed_m_per_s: float) -> float:
    """Plane-wave shock formation distance x_bar = rho c^3 / (beta w p), m.

    Hamilton & Blackstock 4.2.
    """
    if amplitude_pa <= 0:
        return float("inf")
    omega = 2 * np.pi * frequency_hz
    return density_kg_per_m3 * sound_speed_m_per_s**3 / (beta * omega * amplitude_pa)


def burst_envelope(tau_s: np.ndarray, frequency_hz: float, cycles: int) -> np.ndarray:
    """Burst envelope in [0, 1]: raised-cosine edges of one cycle (or half the burst) each side."""
    duration = cycles / frequency_hz
    edge = min(1.0 / frequency_hz, duration / 2)
    env = np.zeros_like(tau_s)
    inside = (tau_s >= 0) & (tau_s <= duration)
    t = tau_s[inside]
    rise = np.clip(t / edge, 0, 1)
    fall = np.clip((duration - t) / edge, 0, 1)
    env[inside] = 0.5 - 0.5 * np.cos(np.pi * np.minimum(rise, fall))
    return env


def source_response(frequency_hz: float, centre_hz: float, quality: float) -> float:
    """Band-pass amplitude response of the source (single resonance), 1 at centre_hz."""
    ratio = frequency_hz / centre_hz - centre_hz / frequency_hz
    return float(1.0 / np.sqrt(1.0 + (quality * ratio) ** 2))


def beam_factor(position_m: tuple[float, float, float], frequency_hz: float,
                params: SceneParameters) -> float:
    """Amplitude at ``position_m`` (x, y, z from the geometric focus, m) relative to the
    on-axis maximum at ``frequency_hz``: the invented focused field
    (:func:`tankside.simulators.focused_field.beam_factor`)."""
    return _source_beam_factor(position_m, frequency_hz, params.source)


def beam_truth(frequency_hz: float, params: SceneParameters) -> BeamTruth:
    """The beam's figures at ``frequency_hz`` (m and dB, see
    :class:`~tankside.simulators.focused_field.BeamTruth`), computed from
    :func:`beam_factor` alone: the axial maximum ``focus_z_m`` (m from the geometric
    focus), the -3 and -6 dB full widths along x and y there, the -6 dB focal zone and
    the first side lobes."""
    return _source_beam_truth(frequency_hz, params.source)


def acoustic_pressure_pa(times_s: np.ndarray, drive: Drive, position_m, params: SceneParameters,
                         *, jitter_s: float = 0.0) -> np.ndarray:
    """Pressure at the hydrophone, Pa, at times relative to the trigger (burst start).

    Parameters
    ----------
    times_s : numpy.ndarray
        Sample times relative to the trigger, s.
    drive : Drive
    position_m : tuple of 3 floats
        Hydrophone position relative to the focus, m.
    params : SceneParameters
    jitter_s : float
        Extra delay of this burst relative to the trigger, s (trigger jitter).
    """
    times_s = np.asarray(times_s, dtype=float)
    p = np.zeros_like(times_s)
    if not drive.output_on or drive.amplitude_vpp <= 0:
        return p
    f = drive.frequency_hz
    distance = params.focal_distance_m + position_m[2]
    amplitude = (params.pressure_per_vpp_pa * drive.amplitude_vpp
                 * source_response(f, params.source_centre_hz, params.source_quality)
                 * beam_factor(position_m, f, params))
    x_bar = shock_distance_m(amplitude, f, beta=params.nonlinearity_beta,
                             density_kg_per_m3=params.density_kg_per_m3,
                             sound_speed_m_per_s=params.sound_speed_m_per_s)
    sigma0 = min(1.0, distance / x_bar)
    tau = times_s - distance / params.sound_speed_m_per_s - jitter_s
    env = burst_envelope(tau, f, drive.burst_cycles)
    active = env > 0
    if not np.any(active):
        return p
    e = env[active]
    nyquist_hz = 0.5 / np.median(np.diff(times_s)) if times_s.size > 1 else np.inf
    n_max = int(max(1, min(params.max_harmonics, np.floor(0.9 * nyquist_hz / f))))
    b = fubini_coefficients(sigma0 * e, n_max)
    phase = 2 * np.pi * f * tau[active]
    n = np.arange(1, n_max + 1).reshape(-1, 1)
    p[active] = amplitude * e * np.sum(b * np.sin(n * phase), axis=0)
    return p


def filter_by_response(signal: np.ndarray, dt_s: float, response) -> np.ndarray:
    """Apply a complex frequency response (callable of f_hz, e^{j w t}) to a real signal.

    The signal is zero-padded to twice its length so the circular wrap of the FFT does not
    fold the response's tail back onto the start.
    """
    n = signal.shape[0]
    nfft = 1 << int(np.ceil(np.log2(max(2 * n, 2))))
    freqs = np.fft.rfftfreq(nfft, dt_s)
    return np.fft.irfft(np.fft.rfft(signal, nfft) * response(freqs), nfft)[:n]


# ---------------------------------------------------------------- the shared scene


class Scene:
    """State of the simulated scene: the drive (set by the generator) and the stage position.

    Thread-safe for the simple reads and writes the two servers make. ``version`` grows with
    every change so that a digitiser may cache traces computed for one state.
    """

    def __init__(self, params: SceneParameters | None = None, *,
                 hydrophone: HydrophoneModel | None = None, drive: Drive | None = None,
                 position_m: tuple[float, float, float] = (0.0, 0.0, 0.0)):
        self.params = params or SceneParameters()
        self.hydrophone = hydrophone or HydrophoneModel()
        self._drive = drive or Drive()
        x, y, z = position_m
        self._position = (float(x), float(y), float(z))
        self._lock = threading.Lock()
        self.version = 0
        self._response_cache: dict[tuple[int, float], np.ndarray] = {}

    @property
    def drive(self) -> Drive:
        return self._drive

    def set_drive(self, **changes) -> Drive:
        with self._lock:
            self._drive = replace(self._drive, **changes)
            self.version += 1
            return self._drive

    @property
    def position_m(self) -> tuple[float, float, float]:
        return self._position

    def beam_factor(self) -> float:
        """The beam factor where the hydrophone is, at the drive's frequency."""
        return beam_factor(self._position, self._drive.frequency_hz, self.params)

    def set_position_m(self, x: float, y: float, z: float) -> None:
        """Move the hydrophone (stage position relative to the focus, m)."""
        with self._lock:
            self._position = (float(x), float(y), float(z))
            self.version += 1

    @property
    def trigger_period_s(self) -> float:
        return self._drive.burst_period_s

    def arrival_time_s(self) -> float:
        """Time of flight from the source to the hydrophone, s."""
        return (self.params.focal_distance_m + self._position[2]) / self.params.sound_speed_m_per_s

    def pressure_pa(self, times_s: np.ndarray, *, jitter_s: float = 0.0) -> np.ndarray:
        return acoustic_pressure_pa(times_s, self._drive, self._position, self.params,
                                    jitter_s=jitter_s)

    def hydrophone_voltage_v(self, times_s: np.ndarray, *, jitter_s: float = 0.0) -> np.ndarray:
        """The hydrophone's end-of-cable voltage, V, at ``times_s`` (uniform) after the trigger.

        Only the stretch from the pulse's arrival to the end of the hydrophone's ringing
        (``tail_s``) is computed; the rest of the record is zero. That stretch starts
        before the record when the pulse does, so sound arriving just before the first
        sample still rings into it.
        """
        times_s = np.asarray(times_s, dtype=float)
        n = times_s.shape[0]
        out = np.zeros(n)
        if n < 2 or not self._drive.output_on:
            return out
        t0 = float(times_s[0])
        dt = float(times_s[1] - times_s[0])
        d = self._drive
        start = self.arrival_time_s() + jitter_s
        stop = start + d.burst_cycles / d.frequency_hz + self.tail_s()
        k0 = int(np.floor((start - t0) / dt)) - 16
        k1 = min(n, int(np.ceil((stop - t0) / dt)) + 1)
        if k1 <= max(k0, 0):
            return out
        grid = t0 + dt * np.arange(k0, k1)
        p = self.pressure_pa(grid, jitter_s=jitter_s)
        key = (grid.shape[0], dt)
        response = self._response_cache.get(key)
        if response is None:
            nfft = 1 << int(np.ceil(np.log2(2 * grid.shape[0])))
            response = self.hydrophone.response(np.fft.rfftfreq(nfft, dt))
            if len(self._response_cache) > 16:
                self._response_cache.clear()
            self._response_cache[key] = response
        v = filter_by_response(p, dt, lambda _f: response)
        first = max(k0, 0)
        out[first:k1] = v[first - k0:]
        return out

    def tail_s(self) -> float:
        """How long the hydrophone rings after the sound stops: 12 time constants of its
        low-frequency roll-off (e^-12 ~ 6e-6 of the start), s."""
        return 12.0 / (2 * np.pi * self.hydrophone.highpass_hz)
