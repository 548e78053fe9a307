"""Electrical loading of an open-circuit hydrophone sensitivity, and preamplifier gain.

A certificate usually gives the open-circuit sensitivity ``M_O``. What the digitiser
sees is the end-of-cable loaded sensitivity ``M_L = G * M_O * Z_L / (Z_L + Z_H)``:
the hydrophone is a source of impedance ``Z_H = 1/(j w C_h)`` and the load ``Z_L`` is
the cable capacitance ``C_c`` in parallel with the input resistance ``R`` and input
capacitance ``C_in`` (of the digitiser, or of the preamplifier when one is used; ``G``
is then the preamplifier's voltage gain). The cable capacitance is a load across the
hydrophone, not part of the source, so::

    Z_L / (Z_L + Z_H) = 1 / (1 + (C_c + C_in) / C_h + 1 / (j w R C_h))

Time dependence ``exp(+j w t)``, as in :mod:`tankside.monitor.acoustics.calibration`.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass, fields

import numpy as np

from ..errors import ConfigError


@dataclass(frozen=True)
class Loading:
    """Electrical loading and gain between the hydrophone and the digitiser.

    Attributes
    ----------
    hydrophone_capacitance_f : float or None
        Hydrophone capacitance C_h, F. None: the calibration is already the loaded
        sensitivity and no loading correction is applied (the gain still is).
    cable_capacitance_f : float
        Capacitance of the cable (and connectors) across the hydrophone, F.
    input_resistance_ohm : float
        Input resistance of the digitiser or preamplifier, ohm (``inf``: none).
    input_capacitance_f : float
        Input capacitance of the digitiser or preamplifier, F.
    preamp_gain_db : float
        Voltage gain of a preamplifier between hydrophone and digitiser, dB.
    """

    hydrophone_capacitance_f: float | None = None
    cable_capacitance_f: float = 0.0
    input_resistance_ohm: float = math.inf
    input_capacitance_f: float = 0.0
    preamp_gain_db: float = 0.0

    def __post_init__(self):
        c_h = self.hydrophone_capacitance_f
        if c_h is not None and not (math.isfinite(c_h) and c_h > 0):
            raise ConfigError(f"hydrophone capacitance must be positive, got {c_h!r} F")
        for name in ("cable_capacitance_f", "input_capacitance_f"):
            v = getattr(self, name)
            if not (math.isfinite(v) and v >= 0):
                raise ConfigError(f"{name} must be finite and >= 0, got {v!r}")
        r = self.input_resistance_ohm
        if not (r > 0) or math.isnan(r):
            raise ConfigError(f"input resistance must be positive (inf for none), got {r!r} ohm")
        if not math.isfinite(self.preamp_gain_db):
            raise ConfigError(f"preamp gain must be finite, got {self.preamp_gain_db!r} dB")

    @classmethod
    def from_table(cls, table: dict) -> Loading:
        """Build from a mapping of field names (e.g. a bench file's ``[loading]`` table).

        ``input_resistance_ohm`` may be None or ``"inf"`` for no resistive load.
        """
        names = {f.name for f in fields(cls)}
        unknown = sorted(set(table) - names)
        if unknown:
            raise ConfigError(f"unknown loading setting {unknown[0]!r}; known: {sorted(names)}")
        kw = dict(table)
        if kw.get("input_resistance_ohm", 0.0) in (None, "inf"):
            kw["input_resistance_ohm"] = math.inf
        try:
            kw = {k: (None if v is None else float(v)) for k, v in kw.items()}
        except (TypeError, ValueError) as err:
            raise ConfigError(f"loading settings must be numbers: {err}") from err
        return cls(**kw)

    def as_dict(self) -> dict:
        """Strict-JSON form (no ``inf``): no resistive load is ``input_resistance_ohm: None``.

        ``from_table(as_dict())`` gives an equal Loading.
        """
        out = asdict(self)
        if math.isinf(self.input_resistance_ohm):
            out["input_resistance_ohm"] = None
        return out

    @property
    def gain(self) -> float:
        """Preamplifier voltage gain (linear)."""
        return 10.0 ** (self.preamp_gain_db / 20.0)

    def factor(self, freqs_hz: np.ndarray) -> np.ndarray:
        """Complex factor ``M_L / M_O`` (loading ratio times gain) at ``freqs_hz``, Hz."""
        freqs_hz = np.asarray(freqs_hz, dtype=float)
        if self.hydrophone_capacitance_f is None:
            return np.full(freqs_hz.shape, self.gain, dtype=complex)
        c_h = self.hydrophone_capacitance_f
        denom = np.full(freqs_hz.shape, 1.0 + (self.cable_capacitance_f
                                               + self.input_capacitance_f) / c_h, dtype=complex)
        if math.isfinite(self.input_resistance_ohm):
            w = 2.0 * np.pi * freqs_hz
            with np.errstate(divide="ignore", invalid="ignore"):
                denom = denom + 1.0 / (1j * w * self.input_resistance_ohm * c_h)
        with np.errstate(divide="ignore", invalid="ignore"):
            ratio = 1.0 / denom
        ratio[~np.isfinite(ratio)] = 0.0   # 0 Hz into a finite resistance: no signal
        return self.gain * ratio
