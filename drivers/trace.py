"""The record of one acquired trace, exactly as the digitiser sent it."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np


@dataclass(frozen=True)
class RawTrace:
    """One digitiser trace as sent, with everything needed to turn it into volts.

    ``volts = codes * volts_per_code + offset_v``; sample ``i`` is at
    ``t0_s + i * dt_s`` seconds from the trigger.

    Attributes
    ----------
    codes : numpy.ndarray
        The samples exactly as sent (int8, int16 or float32, native byte order).
    volts_per_code : float
        Vertical scale, V per code.
    offset_v : float
        Voltage of code 0, V.
    dt_s : float
        Time step, s.
    t0_s : float
        Time of the first sample relative to the trigger, s.
    seq : int
        Sequence number within the session, from 0, never reused (also across reconnects).
    time_s : float
        Acquisition time, seconds since the Unix epoch (wall clock at fetch).
    range_v : float
        Vertical range in use: full-scale span, peak to peak, V.
    code_min, code_max : int or float
        The ADC rails: the lowest and highest code the digitiser can send.
    clipped_low, clipped_high : int
        Count of samples at the lower and upper rail.
    data_format : str
        ``"int8"``, ``"int16"`` or ``"float32"``.
    state : dict
        Instrument settings in force for this trace (record length, coupling, ...).
    """

    codes: np.ndarray
    volts_per_code: float
    offset_v: float
    dt_s: float
    t0_s: float
    seq: int
    time_s: float
    range_v: float
    code_min: float
    code_max: float
    clipped_low: int
    clipped_high: int
    data_format: str
    state: dict = field(default_factory=dict)

    @property
    def n(self) -> int:
        return int(self.codes.shape[0])

    @property
    def clipped(self) -> int:
        """Samples at either rail."""
        return int(self.clipped_low + self.clipped_high)

    def volts(self) -> np.ndarray:
        """The trace in volts (float64)."""
        return self.codes.astype(np.float64) * self.volts_per_code + self.offset_v

    def times(self) -> np.ndarray:
        """Sample times relative to the trigger, s."""
        return self.t0_s + self.dt_s * np.arange(self.n)


def count_at_rails(codes: np.ndarray, code_min: float, code_max: float) -> tuple[int, int]:
    """Count samples at or beyond the lower and upper ADC rail."""
    return int(np.count_nonzero(codes <= code_min)), int(np.count_nonzero(codes >= code_max))
