"""The record of one acquired trace, exactly as the digitiser sent it."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from .errors import InstrumentError


@dataclass(frozen=True)
class ChannelTrace:
    """A second digitiser channel of the same acquisition, kept as sent and never
    converted (a drive-voltage monitor, say).

    ``volts = codes * volts_per_code + offset_v``; sample ``i`` is at
    ``t0_s + i * dt_s`` seconds from the trigger.

    Attributes
    ----------
    channel : int
        The digitiser's input channel number.
    codes : numpy.ndarray
        The samples exactly as sent (the profile's data format, native byte order).
    volts_per_code, offset_v, dt_s, t0_s : float
        Its scaling as the digitiser reported it for this channel (V per code, V, s, s).
    range_v : float or None
        Full-scale span, peak to peak, V, as set (read back when the profile can); None
        when the profile has no command to set a range (never sent).
    clipped_low, clipped_high : int
        Count of samples at the lower and upper rail.
    """

    channel: int
    codes: np.ndarray
    volts_per_code: float
    offset_v: float
    dt_s: float
    t0_s: float
    range_v: float | None
    clipped_low: int
    clipped_high: int

    @property
    def n(self) -> int:
        return int(self.codes.shape[0])

    def volts(self) -> np.ndarray:
        """The channel in volts (float64)."""
        return self.codes.astype(np.float64) * self.volts_per_code + self.offset_v

    def times(self) -> np.ndarray:
        """Sample times relative to the trigger, s."""
        return self.t0_s + self.dt_s * np.arange(self.n)


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
        Vertical range in use: full-scale span, peak to peak, V (as read back when the
        profile can, converted from the instrument's own kind of range).
    code_min, code_max : int or float
        The ADC rails: the lowest and highest code the digitiser can send.
    clipped_low, clipped_high : int
        Count of samples at the lower and upper rail.
    data_format : str
        ``"int8"``, ``"int16"`` or ``"float32"``.
    state : dict
        Instrument settings in force for this trace (record length, coupling, ...).
    monitor : ChannelTrace or None
        The bench's monitor channel of the same acquisition, as sent (None without one,
        or when its fetch failed).
    monitor_error : InstrumentError or None
        Why the monitor channel of this trace could not be fetched (the hydrophone's
        trace is good and kept); None when it was, or none is configured.
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
    monitor: ChannelTrace | None = None
    monitor_error: InstrumentError | None = None

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

    @property
    def full_scale_v(self) -> float:
        """Full-scale span, p-p, V: from the volts per code and the rails (one code more
        than their distance) for integer samples, else :attr:`range_v`."""
        if self.data_format == "float32":
            return float(self.range_v)
        return float((self.code_max - self.code_min + 1) * abs(self.volts_per_code))

    def fraction_of_full_scale(self, volts: np.ndarray | None = None) -> float:
        """Share of full scale in use: the largest distance of a sample from mid-scale
        over half the full scale (1 means the signal reaches a rail).

        For integer samples mid-scale and full scale come from the codes' rails and the
        volts per code, so the share is that of the converter whatever the profile says
        the range is; for float32 samples (volts) from :attr:`range_v` around the offset.
        """
        v = self.volts() if volts is None else volts
        if not len(v):
            return 0.0
        if self.data_format == "float32":
            mid_v = float(self.offset_v)
        else:
            mid_v = float(self.offset_v + (self.code_min + self.code_max) / 2 * self.volts_per_code)
        half_v = self.full_scale_v / 2.0
        if not half_v > 0:
            return float("nan")
        return float(np.max(np.abs(v - mid_v)) / half_v)

    def times(self) -> np.ndarray:
        """Sample times relative to the trigger, s."""
        return self.t0_s + self.dt_s * np.arange(self.n)


def count_at_rails(codes: np.ndarray, code_min: float, code_max: float) -> tuple[int, int]:
    """Count samples at or beyond the lower and upper ADC rail."""
    return int(np.count_nonzero(codes <= code_min)), int(np.count_nonzero(codes >= code_max))
