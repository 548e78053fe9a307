"""Electrical loading of a hydrophone sensitivity, and preamplifier gain.

A certificate usually gives the open-circuit sensitivity ``M_O``. What the digitiser
sees is the end-of-cable loaded sensitivity ``M_L = G * M_O * Z_L / (Z_L + Z_H)``:
the hydrophone is a source of impedance ``Z_H = 1/(j w C_h)`` and the load ``Z_L`` is
the cable capacitance ``C_c`` in parallel with the input resistance ``R`` and input
capacitance ``C_in`` (of the digitiser, or of the preamplifier when one is used; ``G``
is then the preamplifier's voltage gain). The cable capacitance is a load across the
hydrophone, not part of the source, so::

    Z_L / (Z_L + Z_H) = 1 / (1 + (C_c + C_in) / C_h + 1 / (j w R C_h))

Certificates also give the end-of-cable loaded sensitivity, measured into a stated input
(say 1 Mohm in parallel with 20 pF). Its loading is in it already, so only the
difference between that input and yours is applied::

    M_L = G * M_cert * D_cert / D_yours,   D = 1 + (C_c + C_in) / C_h + 1 / (j w R C_h)

with the same hydrophone and cable capacitance in both (the cable of the certificate is
the one in use), so cable capacitance is not counted twice. What a calibration is comes
from :class:`CalibrationLoad`: declared in the calibration file's comment lines
(:mod:`tankside.monitor.acoustics.calibration`) or set here (the ``calibration_*``
fields of :class:`Loading`, which win over the file).

Time dependence ``exp(+j w t)``, as in :mod:`tankside.monitor.acoustics.calibration`.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass, fields
from enum import StrEnum
from typing import cast

import numpy as np

from ..errors import ConfigError


class LoadKind(StrEnum):
    """What a calibration's sensitivity is."""

    #: Open-circuit sensitivity M_O of the hydrophone (the whole loading is applied).
    OPEN_CIRCUIT = "open-circuit"
    #: End-of-cable sensitivity loaded into the input stated with it (only the
    #: difference from your input is applied).
    END_OF_CABLE = "end-of-cable"


@dataclass(frozen=True)
class CalibrationLoad:
    """The electrical condition a calibration's sensitivity was stated for.

    Attributes
    ----------
    kind : LoadKind
    input_resistance_ohm : float
        Resistance of the input the end-of-cable sensitivity was measured into, ohm
        (``inf``: none).
    input_capacitance_f : float
        Capacitance of that input, F.
    declared : bool
        Whether the calibration (or a setting) said so; False for the default
        (open-circuit, the common certificate form).
    """

    kind: LoadKind = LoadKind.OPEN_CIRCUIT
    input_resistance_ohm: float = math.inf
    input_capacitance_f: float = 0.0
    declared: bool = False

    def __post_init__(self):
        try:
            object.__setattr__(self, "kind", LoadKind(self.kind))
        except ValueError as err:
            raise ConfigError(f"calibration kind {self.kind!r}: expected one of "
                              f"{', '.join(k.value for k in LoadKind)}") from err
        r, c = self.input_resistance_ohm, self.input_capacitance_f
        if not (r > 0) or math.isnan(r):
            raise ConfigError(f"calibration input resistance must be positive (inf for none), "
                              f"got {r!r} ohm")
        if not (math.isfinite(c) and c >= 0):
            raise ConfigError(f"calibration input capacitance must be finite and >= 0, "
                              f"got {c!r} F")

    def as_dict(self) -> dict:
        r = self.input_resistance_ohm
        return {"kind": str(self.kind), "input_resistance_ohm": None if math.isinf(r) else r,
                "input_capacitance_f": self.input_capacitance_f, "declared": self.declared}


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
    calibration_kind : str or None
        ``"open-circuit"`` or ``"end-of-cable"``: what the calibration is, overriding
        what its file declares (None: the file's declaration, else open-circuit).
    calibration_input_resistance_ohm, calibration_input_capacitance_f : float or None
        The input an end-of-cable calibration was measured into, overriding the file's
        (None: the file's; resistance ``inf`` for none).
    """

    hydrophone_capacitance_f: float | None = None
    cable_capacitance_f: float = 0.0
    input_resistance_ohm: float = math.inf
    input_capacitance_f: float = 0.0
    preamp_gain_db: float = 0.0
    calibration_kind: str | None = None
    calibration_input_resistance_ohm: float | None = None
    calibration_input_capacitance_f: float | None = None

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
        self.calibration_load(None)   # validates the calibration_* fields

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
        kind = kw.pop("calibration_kind", None)
        if kind is not None and not isinstance(kind, str):
            raise ConfigError(f"calibration_kind must be a string, got {kind!r}")
        try:
            kw = {k: (None if v is None else float(v)) for k, v in kw.items()}
        except (TypeError, ValueError) as err:
            raise ConfigError(f"loading settings must be numbers: {err}") from err
        return cls(**kw, calibration_kind=kind)

    def as_dict(self) -> dict:
        """Strict-JSON form (no ``inf``): no resistive load is ``input_resistance_ohm: None``.

        ``from_table(as_dict())`` gives an equal Loading.
        """
        out = asdict(self)
        if math.isinf(self.input_resistance_ohm):
            out["input_resistance_ohm"] = None
        r = self.calibration_input_resistance_ohm
        if r is not None and math.isinf(r):
            out["calibration_input_resistance_ohm"] = "inf"
        return out

    def calibration_load(self, declared: CalibrationLoad | None) -> CalibrationLoad:
        """What the calibration is: ``declared`` (from its file) with these settings over it."""
        base = CalibrationLoad() if declared is None else declared
        if (self.calibration_kind is None and self.calibration_input_resistance_ohm is None
                and self.calibration_input_capacitance_f is None):
            return base
        r, c = self.calibration_input_resistance_ohm, self.calibration_input_capacitance_f
        return CalibrationLoad(
            # a str is checked and turned into a LoadKind by CalibrationLoad itself
            base.kind if self.calibration_kind is None
            else cast(LoadKind, self.calibration_kind),
            base.input_resistance_ohm if r is None else r,
            base.input_capacitance_f if c is None else c, True)

    @property
    def gain(self) -> float:
        """Preamplifier voltage gain (linear)."""
        return 10.0 ** (self.preamp_gain_db / 20.0)

    def factor(self, freqs_hz: np.ndarray,
               declared: CalibrationLoad | None = None) -> np.ndarray:
        """Complex factor from the calibration's sensitivity to ``M_L`` at ``freqs_hz``, Hz.

        ``declared`` is what the calibration file says it is (default: open-circuit);
        the ``calibration_*`` settings win over it. Open-circuit: the loading ratio
        times the gain. End-of-cable: ``D_cert / D_yours`` times the gain (module notes).
        Without a hydrophone capacitance only the gain is applied.
        """
        freqs_hz = np.asarray(freqs_hz, dtype=float)
        if self.hydrophone_capacitance_f is None:
            return np.full(freqs_hz.shape, self.gain, dtype=complex)
        load = self.calibration_load(declared)
        denom = self._divider(freqs_hz, self.input_resistance_ohm, self.input_capacitance_f)
        with np.errstate(divide="ignore", invalid="ignore"):
            if load.kind is LoadKind.END_OF_CABLE:
                ratio = self._divider(freqs_hz, load.input_resistance_ohm,
                                      load.input_capacitance_f) / denom
            else:
                ratio = 1.0 / denom
        ratio[~np.isfinite(ratio)] = 0.0   # 0 Hz into a finite resistance: no signal
        return self.gain * ratio

    def _divider(self, freqs_hz: np.ndarray, resistance_ohm: float,
                 capacitance_f: float) -> np.ndarray:
        """``D = 1 + (C_c + C_in) / C_h + 1 / (j w R C_h)``, so that ``M_L = M_O / D``."""
        c_h = self.hydrophone_capacitance_f
        assert c_h is not None
        denom = np.full(freqs_hz.shape, 1.0 + (self.cable_capacitance_f + capacitance_f) / c_h,
                        dtype=complex)
        if math.isfinite(resistance_ohm):
            w = 2.0 * np.pi * freqs_hz
            with np.errstate(divide="ignore", invalid="ignore"):
                denom = denom + 1.0 / (1j * w * resistance_ohm * c_h)
        return denom
