"""The simulated digitiser (pure device model): SCPI in, reply bytes out.

Identity ``TANKSIDE,SIMDIG-2,0001,1.0`` (in the default dialect). Two channels; channel 1
carries the hydrophone of the shared :class:`~tankside.simulators.scene.Scene`, channel 2
an invented drive-voltage monitor (:func:`drive_monitor_v`): the generator's burst, as
the trigger times it, scaled by ``monitor_ratio``, without noise or jitter so that a
test can check it to one code.
The trigger comes from the generator's sync output on EXT (one per burst period) unless
the source is IMMediate: then the record starts at once, at a random moment of the burst
cycle, so it holds the pulse only by chance (as on a real free-running digitiser).
Commands (short forms in capitals, ``#`` = optional channel suffix):

=====================================  ==================================================
``ACQuire:POINts <n>`` / ``?``          record length, 16 .. 4,000,000 samples
``ACQuire:SRATe <hz>`` / ``?``          sample rate; 1 GS/s divided by a whole number
                                        (1 MS/s .. 1 GS/s), the nearest is taken
``ACQuire:AVERage <n>`` / ``?``         averages 1 .. 1024 (n triggers per acquisition)
``ACQuire:DONE?``                       1 when the armed acquisition is complete, else 0
``INITiate[:IMMediate]`` / ``ABORt``    arm one acquisition / disarm
``CHANnel#:RANGe <v>`` / ``?``          full-scale span, V peak to peak, from RANGES_V
                                        (a value between two is rounded up); with
                                        ``range_kind`` "peak" the value is half the
                                        span, with "per_division" the span over
                                        ``range_divisions``
``CHANnel#:OFFSet <v>`` / ``?``         voltage at mid-scale, |offset| <= 2.5 V
``CHANnel#:COUPling AC|DC`` / ``?``
``CHANnel#:IMPedance 50|1e6`` / ``?``   input impedance, ohm (50 ohm halves the
                                        hydrophone's 50 ohm-driven signal)
``TRIGger:SOURce EXT|CHAN#|IMM`` / ``?``
``TRIGger:LEVel <v>`` / ``?``           -5 .. 5 V; EXT triggers when 0 < level < 3.3 V
``TRIGger:SLOPe POS|NEG`` / ``?``
``TRIGger:DELay <s>`` / ``?``           time of the first sample after the trigger
``WAVeform:SOURce CHAN#`` / ``?``       channel the scaling queries refer to
``WAVeform:FORMat INT16|INT8|FLOAT32``  data format of the block (default INT16)
``WAVeform:BORDer LSBF|MSBF``           byte order (default LSBF, little-endian)
``WAVeform:DATA? [CHAN#]``              the trace, IEEE 488.2 definite-length block
``WAVeform:XINCrement?`` ``XORigin?``   time step, time of first sample (s)
``WAVeform:YINCrement?`` ``YOFFset?``   volts per code, volts at code 0
``WAVeform:CMIN?`` ``CMAX?``            the rails (lowest and highest code)
=====================================  ==================================================

The model also speaks a second dialect, in the SCPI-1999 ``SENSe:``/``FETCh:`` style (an
invented one, described by ``drivers/profiles/example-sense-fetch-digitiser.toml``):

=====================================  ==================================================
``SENSe:SWEep:POINts <n>`` / ``?``      record length (as ``ACQuire:POINts``)
``SENSe:SWEep:TINTerval?``              time step, s; read only (the rate is set by the
                                        other dialect or left as it is)
``SENSe:SWEep:OFFSet:TIME?``            time of the first sample after the trigger
``SENSe#:VOLTage:RANGe <v>`` / ``?``    as ``CHANnel#:RANGe`` (``range_kind`` applies)
``SENSe#:VOLTage:OFFSet <v>`` / ``?``   as ``CHANnel#:OFFSet``
``SENSe#:VOLTage:RESolution?``          volts per code of that channel
``FORMat[:DATA] INT,16|INT,8|REAL,32``  data format of the block
``FORMat:BORDer NORMal|SWAPped``        byte order: NORMal MSB first, SWAPped LSB first
``FETCh#:WAVeform?``                    the trace of channel #, a definite-length block
=====================================  ==================================================

Which words it answers is its ``dialect`` (the tables of :mod:`.dialects`): ``simdig``
(the default) both tables above, ``sense-fetch`` the second alone with ``INITiate``,
``ABORt`` and ``TRIGger:SOURce`` (ranges in +/- peak volts), and ``channel-waveform`` a
third, invented one (described by
``drivers/profiles/example-channel-waveform-digitiser.toml``), in which ranges are volts
per division, eight divisions across the span:

=====================================  ==================================================
``CAPTure:LENGth <n>`` / ``?``          record length (as ``ACQuire:POINts``)
``CAPTure:RATE <hz>`` / ``?``           sample rate (as ``ACQuire:SRATe``)
``CAPTure:STEP?``                       time step, s
``CAPTure:STARt`` / ``HALT``            arm one acquisition / disarm
``CAPTure:READy?``                      1 when the armed acquisition is complete, else 0
``CUE:FROM EXT|PORT#|IMM`` / ``?``      trigger source
``CUE:LEVel <v>`` / ``?``               trigger level (as ``TRIGger:LEVel``)
``CUE:DELay <s>`` / ``?``               time of the first sample after the trigger
``PORT#:GRID <v>`` / ``?``              volts per division (``range_kind`` applies)
``PORT#:SHIFt <v>`` / ``?``             voltage at mid-screen (as ``CHANnel#:OFFSet``)
``PORT#:LOAD 50|1e6`` / ``?``           input impedance, ohm
``PORT#:UNIT?``                         volts per sample (per division for GRID blocks)
``PORT#:WAVE?``                         the trace of port #, a definite-length block
``WAVE:KIND WORD|GRID`` / ``?``         WORD int16 codes (power-on), GRID float32 samples
                                        in divisions from mid-screen, 12-bit steps
``WAVE:ORDer HIGH|LOW`` / ``?``         byte order: HIGH first or LOW first (power-on)
=====================================  ==================================================

volts = code * YINC + YOFF; int16 codes span the range in 65536 steps and clip at
-32768 / 32767 (int8: 256 steps, -128 / 127; float32: volts, clipped at the range edges;
GRID: 4096 steps, clipped at -4 and 4 - 1/512 divisions with eight divisions).
Time is read from an injected ``clock`` and waits use an injected ``sleep``, so the
model is testable without a wall clock.
"""

from __future__ import annotations

import math
import time
from collections.abc import Callable
from dataclasses import dataclass, field

import numpy as np

from .dialects import DEFAULT_DIALECT, RANGE_KINDS, dialect_named
from .scene import Drive, Scene, burst_envelope
from .scpi_device import Handler, ScpiDevice
from .scpi_parser import (
    ScpiError,
    expect_args,
    format_block,
    parse_bounded,
    parse_choice,
    parse_integer,
    parse_number,
)

RANGES_V = (0.02, 0.05, 0.1, 0.2, 0.5, 1.0, 2.0, 5.0)
BASE_CLOCK_HZ = 1.0e9
CHANNELS = (1, 2)
FORMATS = {"int16": (np.int16, -32768, 32767), "int8": (np.int8, -128, 127),
           "float32": (np.float32, None, None)}
# "grid" (the channel-waveform dialect's WAVE:KIND GRID): a 12-bit converter whose codes are
# sent as float32 screen divisions from mid-screen (code / 4096 * divisions).
GRID_BITS = 12
_WAVE_KINDS = {"int16": "WORD", "grid": "GRID"}
MAX_WAIT_S = 600.0  # *OPC? gives up (no reply) on a trigger that has not come by then


#: Volts at channel 2 per volt of drive (an invented 10:1 monitor output).
MONITOR_RATIO = 0.1


def drive_monitor_v(times_s: np.ndarray, drive: Drive, monitor_ratio: float) -> np.ndarray:
    """The invented drive-voltage monitor of channel 2, V, at ``times_s`` after the trigger.

    The generator's burst starts at its sync edge (the trigger, t = 0): a sine of the
    drive's frequency under :func:`~tankside.simulators.scene.burst_envelope`, of peak
    ``monitor_ratio * amplitude_vpp / 2``; zero with the output off.
    """
    times_s = np.asarray(times_s, dtype=float)
    if not drive.output_on or drive.amplitude_vpp <= 0:
        return np.zeros(times_s.shape[0])
    f = drive.frequency_hz
    env = burst_envelope(times_s, f, drive.burst_cycles)
    return monitor_ratio * drive.amplitude_vpp / 2 * env * np.sin(2 * np.pi * f * times_s)


def grid_rails(divisions: int) -> tuple[float, float]:
    """The lowest and highest sample of the "grid" format, in divisions from mid-screen."""
    steps = 2 ** GRID_BITS
    return -(steps // 2) * divisions / steps, (steps // 2 - 1) * divisions / steps


def quantise(volts: np.ndarray, range_v: float, offset_v: float,
             data_format: str = "int16", divisions: int = 10) -> tuple[np.ndarray, float, float]:
    """Quantise volts as an ADC set to ``range_v`` (p-p) around ``offset_v`` would.

    Returns ``(codes, volts_per_code, volts_at_code_0)`` with volts = codes * scale + offset.
    Values beyond the range clip at the rails. For float32 the codes are volts; for "grid"
    they are the codes of a :data:`GRID_BITS` converter in screen divisions (``divisions``
    across the span), so the scale is the volts of one division.
    """
    if data_format == "grid":
        steps = 2 ** GRID_BITS
        codes = np.clip(np.rint((volts - offset_v) / (range_v / steps)), -(steps // 2),
                        steps // 2 - 1)
        return (codes * (divisions / steps)).astype(np.float32), range_v / divisions, offset_v
    dtype, lo, hi = FORMATS[data_format]
    if lo is None or hi is None:
        half = range_v / 2
        return np.clip(volts, offset_v - half, offset_v + half).astype(dtype), 1.0, 0.0
    scale = range_v / (hi - lo + 1)
    codes = np.clip(np.rint((volts - offset_v) / scale), lo, hi).astype(dtype)
    return codes, scale, offset_v


@dataclass
class ChannelState:
    range_v: float = 0.5
    offset_v: float = 0.0
    coupling: str = "DC"
    impedance_ohm: float = 1.0e6


@dataclass
class DigitiserState:
    points: int = 10000
    divider: int = 4  # 250 MS/s
    averages: int = 1
    trigger_source: str = "EXT"
    trigger_level_v: float = 1.0
    trigger_slope: str = "POS"
    trigger_delay_s: float = 0.0
    wave_source: int = 1
    data_format: str = "int16"
    byte_order: str = "little"
    channels: dict[int, ChannelState] = field(
        default_factory=lambda: {c: ChannelState() for c in CHANNELS})


class SimulatedDigitiser(ScpiDevice):
    """Pure model of the simulated digitiser.

    Parameters
    ----------
    scene : Scene
        The shared scene (trigger period, hydrophone voltage).
    seed : int
        Seed of the noise and jitter generator.
    clock, sleep : callables
        Time source (s) and wait function; ``sleep(s)`` may return True to stop waiting.
    noise_v_rms : float
        Input-referred noise of the front end, V rms.
    jitter_s : float
        Trigger jitter, s rms.
    missed_triggers : callable, optional
        Called once per arm; returns how many coming triggers this acquisition misses.
    precomputed : int or bool
        If above 0, acquisitions complete at once and fetches cycle through this many
        (True: 8) traces computed once per setting (so a fetch benchmark measures the link, not
        the scene).
    monitor_ratio : float
        Volts at channel 2 (the invented drive monitor) per volt of drive.

    Attributes
    ----------
    last_codes : numpy.ndarray or None
        The codes of the most recent block sent by ``WAVeform:DATA?`` (for tests that
        compare what a client received with what was sent).
    """

    IDENTITY = "TANKSIDE,SIMDIG-2,0001,1.0"     # of the default dialect

    def __init__(self, scene: Scene, *, seed: int = 0, clock: Callable[[], float] = time.monotonic,
                 sleep: Callable[[float], object] = time.sleep, noise_v_rms: float = 0.3e-3,
                 jitter_s: float = 0.5e-9, missed_triggers: Callable[[], int] | None = None,
                 precomputed: int = 0, range_kind: str | None = None,
                 range_divisions: int | None = None, dialect: str = DEFAULT_DIALECT,
                 monitor_ratio: float = MONITOR_RATIO):
        super().__init__()
        self.monitor_ratio = float(monitor_ratio)
        self.dialect = dialect_named(dialect)
        range_kind = self.dialect.range_kind if range_kind is None else range_kind
        if range_kind not in RANGE_KINDS:
            raise ValueError(f"range_kind must be span, peak or per_division, got {range_kind!r}")
        self.range_kind = range_kind
        self.range_divisions = (self.dialect.range_divisions if range_divisions is None
                                else range_divisions)
        self.scene = scene
        self.rng = np.random.default_rng(seed)
        self.clock = clock
        self.sleep = sleep
        self.noise_v_rms = noise_v_rms
        self.jitter_s = jitter_s
        self.missed_triggers = missed_triggers or (lambda: 0)
        # True asks for the default set of eight traces.
        self.precomputed = 8 if precomputed is True else int(precomputed)
        self._epoch = clock()
        # Missed triggers are a stretch of time with no trigger: re-arming does not end it.
        self._quiet_until = -math.inf
        self.armed = False
        self.ready_at = math.inf
        self.free_run_shift_s = 0.0
        self.acquisitions = 0
        self._trace: tuple[np.ndarray, float, float] | None = None
        self._trace_for: tuple[int, int] | None = None
        self._pre_key: tuple | None = None
        self._pre_blocks: list[bytes] = []
        self._pre_next = 0
        self._pre_codes: list[np.ndarray] = []
        self.last_codes: np.ndarray | None = None
        self.state = DigitiserState()
        self.reset()
        self._register()

    # ------------------------------------------------------------ IEEE 488.2
    def identity(self) -> str:
        return self.dialect.identity

    def reset(self) -> None:
        self.state = DigitiserState()
        # Place the pulse 5 us into the record by default.
        self.state.trigger_delay_s = round((self.scene.arrival_time_s() - 5e-6) * 1e7) / 1e7
        self.armed = False
        self.ready_at = math.inf
        self._trace = None

    def wait_pending(self) -> bool:
        """Wait for the armed acquisition; True when it completed or was aborted or re-armed
        (from another connection), False when given up after MAX_WAIT_S or on shutdown."""
        if not self.armed:
            return True
        acquisition = self.acquisitions
        deadline = self.clock() + MAX_WAIT_S
        while True:
            if not self.armed or self.acquisitions != acquisition:
                return True
            now = self.clock()
            if now >= self.ready_at:
                return True
            if now >= deadline:
                return False
            if self.sleep(min(min(self.ready_at, deadline) - now, 0.05)):
                return False

    # ------------------------------------------------------------ the dialect's words
    def handlers(self) -> dict[str, Handler]:
        """Every handler a dialect row may name (simulators/dialects.py): a write by its
        name, a query by its name and ``?``."""
        return {
            "points": self._set_points, "points?": self.text_reply(lambda s: self.state.points),
            "rate": self._set_rate, "rate?": self.number_reply(lambda s: self.sample_rate_hz),
            "averages": self._set_averages,
            "averages?": self.text_reply(lambda s: self.state.averages),
            "done?": self.text_reply(lambda s: int(self.done())),
            "arm": self._arm, "abort": self._abort,
            "range": self._set_range,
            "range?": self.number_reply(lambda s: self._range_word(self._ch(s).range_v)),
            "offset": self._set_offset,
            "offset?": self.number_reply(lambda s: self._ch(s).offset_v),
            "coupling": self._set_coupling,
            "coupling?": self.text_reply(lambda s: self._ch(s).coupling),
            "impedance": self._set_impedance,
            "impedance?": self.number_reply(lambda s: self._ch(s).impedance_ohm),
            "trigger_source": self._set_trigger_source,
            "trigger_source?": self.text_reply(lambda s: self.state.trigger_source),
            "trigger_level": self._set_trigger_level,
            "trigger_level?": self.number_reply(lambda s: self.state.trigger_level_v),
            "slope": self._set_slope, "slope?": self.text_reply(lambda s: self.state.trigger_slope),
            "delay": self._set_delay,
            "delay?": self.number_reply(lambda s: self.state.trigger_delay_s),
            "wave_source": self._set_wave_source,
            "wave_source?": self.text_reply(lambda s: f"CHAN{self.state.wave_source}"),
            "format": self._set_format,
            "format?": self.text_reply(lambda s: self.state.data_format.upper()),
            "border": self._set_border,
            "border?": self.text_reply(lambda s: self._order_word("LSBF", "MSBF")),
            "fetch?": self._fetch,
            "time_step?": self.number_reply(lambda s: self.time_step_s),
            "source_volts_per_code?": self.number_reply(lambda s: self._scaling()[0]),
            "source_offset?": self.number_reply(lambda s: self._scaling()[1]),
            "code_min?": self.text_reply(lambda s: self._rails()[0]),
            "code_max?": self.text_reply(lambda s: self._rails()[1]),
            "volts_per_code?": self.number_reply(
                lambda s: self._channel_scaling(self._ch(s))[0]),
            # SENSe:/FETCh:
            "sense_format": self._set_sense_format,
            "sense_border": self._set_sense_border,
            "sense_border?": self.text_reply(lambda s: self._order_word("SWAP", "NORM")),
            "sense_fetch?": self._fetch_channel,
            # CAPTure:/CUE:/PORT#:/WAVE:
            "cue_from": self._set_cue_from,
            "cue_from?": self.text_reply(
                lambda s: self.state.trigger_source.replace("CHAN", "PORT")),
            "port_fetch?": self._fetch_channel,
            "wave_kind": self._set_wave_kind,
            "wave_kind?": self.text_reply(lambda s: _WAVE_KINDS.get(
                self.state.data_format, self.state.data_format.upper())),
            "wave_order": self._set_wave_order,
            "wave_order?": self.text_reply(lambda s: self._order_word("LOW", "HIGH")),
        }

    def _order_word(self, little: str, big: str) -> str:
        return little if self.state.byte_order == "little" else big

    def _register(self) -> None:
        handlers = self.handlers()
        for row in self.dialect.rows:
            try:
                write = handlers[row.write] if row.write is not None else None
                query = handlers[row.query] if row.query is not None else None
            except KeyError as err:
                raise ValueError(f"dialect {self.dialect.name!r}: {row.header} names no "
                                 f"handler {err.args[0]!r}") from err
            self.add(row.header, write=write, query=query)

    def _set_sense_format(self, args, s):
        expect_args(args, 2)
        words = {("INT", "16"): "int16", ("INTEGER", "16"): "int16", ("INT", "8"): "int8",
                 ("INTEGER", "8"): "int8", ("REAL", "32"): "float32"}
        key = (args[0].strip().upper(), args[1].strip())
        if key not in words:
            raise ScpiError(-224, f"format {','.join(args)!r} (INT,16, INT,8 or REAL,32)")
        self.state.data_format = words[key]

    def _set_sense_border(self, args, s):
        expect_args(args, 1)
        self.state.byte_order = parse_choice(args[0], {"NORMal": "big", "SWAPped": "little"})

    def _fetch_channel(self, args, s):
        """The block of the channel in the header's suffix (``FETCh2:WAV?``, ``PORT2:WAVE?``)."""
        expect_args(args, 0)
        return self._fetch((f"CHAN{s[0]}",), s)

    def _set_cue_from(self, args, s):
        expect_args(args, 1)
        value = parse_choice(args[0], {"EXTernal": "EXT", "IMMediate": "IMM", "PORT#": "CHAN"})
        if value.startswith("CHAN") and int(value[4:]) not in CHANNELS:
            raise ScpiError(-224, f"no port {value[4:]}")
        self.state.trigger_source = value

    def _set_wave_kind(self, args, s):
        expect_args(args, 1)
        self.state.data_format = parse_choice(args[0], {"WORD": "int16", "GRID": "grid"})

    def _set_wave_order(self, args, s):
        expect_args(args, 1)
        self.state.byte_order = parse_choice(args[0], {"HIGH": "big", "LOW": "little"})

    def _ch(self, suffixes) -> ChannelState:
        number = suffixes[0]
        if number not in self.state.channels:
            raise ScpiError(-113, f"no channel {number}")
        return self.state.channels[number]

    # ------------------------------------------------------------ derived values
    @property
    def sample_rate_hz(self) -> float:
        return BASE_CLOCK_HZ / self.state.divider

    @property
    def time_step_s(self) -> float:
        return self.state.divider / BASE_CLOCK_HZ

    def _scaling(self) -> tuple[float, float]:
        return self._channel_scaling(self.state.channels[self.state.wave_source])

    def _channel_scaling(self, ch: ChannelState) -> tuple[float, float]:
        if self.state.data_format == "grid":
            return ch.range_v / self.range_divisions, ch.offset_v
        _, lo, hi = FORMATS[self.state.data_format]
        if lo is None or hi is None:
            return 1.0, 0.0
        return ch.range_v / (hi - lo + 1), ch.offset_v

    def _rails(self) -> tuple[float | None, float | None]:
        if self.state.data_format == "grid":
            return grid_rails(self.range_divisions)
        _, lo, hi = FORMATS[self.state.data_format]
        return lo, hi

    # ------------------------------------------------------------ setters
    def _set_points(self, args, s):
        expect_args(args, 1)
        self.state.points = parse_integer(args[0], 16, 4_000_000, what="record length")
        self._trace = None

    def _set_rate(self, args, s):
        expect_args(args, 1)
        rate = parse_bounded(args[0], BASE_CLOCK_HZ / 1000, BASE_CLOCK_HZ, what="sample rate")
        self.state.divider = max(1, min(1000, round(BASE_CLOCK_HZ / rate)))
        self._trace = None

    def _set_averages(self, args, s):
        expect_args(args, 1)
        self.state.averages = parse_integer(args[0], 1, 1024, what="averages")

    def _range_word(self, span_v: float) -> float:
        """A span as this dialect states a range."""
        return span_v / self._range_factor()

    def _range_factor(self) -> float:
        return {"span": 1.0, "peak": 2.0,
                "per_division": float(self.range_divisions)}[self.range_kind]

    def _set_range(self, args, s):
        expect_args(args, 1)
        ch = self._ch(s)
        factor = self._range_factor()
        value = factor * parse_number(args[0], minimum=RANGES_V[0] / factor,
                                      maximum=RANGES_V[-1] / factor)
        if not 0 < value <= RANGES_V[-1] * (1 + 1e-9):
            raise ScpiError(-222, f"range {value:g} V outside {RANGES_V[0]:g}..{RANGES_V[-1]:g}")
        ch.range_v = next(r for r in RANGES_V if r >= value * (1 - 1e-9))

    def _set_offset(self, args, s):
        expect_args(args, 1)
        self._ch(s).offset_v = parse_bounded(args[0], -2.5, 2.5, what="offset")

    def _set_coupling(self, args, s):
        expect_args(args, 1)
        self._ch(s).coupling = parse_choice(args[0], {"DC": "DC", "AC": "AC"})

    def _set_impedance(self, args, s):
        expect_args(args, 1)
        word = args[0].strip().upper()
        named = {"FIFTY": 50.0, "FIFT": 50.0, "ONEMEG": 1e6, "ONEM": 1e6, "1M": 1e6}
        value = named[word] if word in named else parse_number(args[0])
        if value not in (50.0, 1e6):
            raise ScpiError(-224, f"impedance {value:g} ohm (50 or 1e6)")
        self._ch(s).impedance_ohm = value

    def _set_trigger_source(self, args, s):
        expect_args(args, 1)
        value = parse_choice(args[0], {"EXTernal": "EXT", "IMMediate": "IMM",
                                       "CHANnel#": "CHAN"})
        if value.startswith("CHAN") and int(value[4:]) not in CHANNELS:
            raise ScpiError(-224, f"no channel {value[4:]}")
        self.state.trigger_source = value

    def _set_trigger_level(self, args, s):
        expect_args(args, 1)
        self.state.trigger_level_v = parse_bounded(args[0], -5.0, 5.0, what="trigger level")

    def _set_slope(self, args, s):
        expect_args(args, 1)
        self.state.trigger_slope = parse_choice(
            args[0], {"POSitive": "POS", "NEGative": "NEG", "RISing": "POS", "FALLing": "NEG",
                      "RISE": "POS", "FALL": "NEG"})

    def _set_delay(self, args, s):
        expect_args(args, 1)
        self.state.trigger_delay_s = parse_bounded(args[0], -1e-3, 1.0, what="trigger delay")

    def _set_wave_source(self, args, s):
        expect_args(args, 1)
        value = parse_choice(args[0], {"CHANnel#": "CHAN"})
        number = int(value[4:])
        if number not in CHANNELS:
            raise ScpiError(-224, f"no channel {number}")
        self.state.wave_source = number

    def _set_format(self, args, s):
        expect_args(args, 1)
        word = args[0].strip().upper()
        aliases = {"INT16": "int16", "WORD": "int16", "INT8": "int8", "BYTE": "int8",
                   "FLOAT32": "float32", "REAL": "float32"}
        if word not in aliases:
            raise ScpiError(-224, f"format {args[0]!r} (INT16, INT8 or FLOAT32)")
        self.state.data_format = aliases[word]

    def _set_border(self, args, s):
        expect_args(args, 1)
        self.state.byte_order = parse_choice(args[0], {"LSBFirst": "little", "MSBFirst": "big"})

    # ------------------------------------------------------------ acquisition
    def trigger_possible(self) -> bool:
        """Whether the configured trigger can fire at all in this scene."""
        st = self.state
        if st.trigger_source == "IMM":
            return True
        if st.trigger_source == "EXT":
            # The sync output is a 0 .. sync_high_v square; either slope crosses inside.
            return 0.0 < st.trigger_level_v < self.scene.params.sync_high_v
        # A channel trigger fires when the signal crosses the level; the trace is
        # referenced to the burst, as if the level crossing came with it.
        if int(st.trigger_source[4:]) != 1 or not self.scene.drive.output_on:
            return False
        dt = self.time_step_s
        t = self.scene.arrival_time_s() + dt * np.arange(-200, int(3e-6 / dt))
        v = self.scene.hydrophone_voltage_v(t)
        level = st.trigger_level_v
        return bool(v.max() > level > v.min())

    def _arm(self, args, s):
        expect_args(args, 0)
        now = self.clock()
        self.armed = True
        self._trace = None
        self.acquisitions += 1
        st = self.state
        self.free_run_shift_s = 0.0
        if self.precomputed or st.trigger_source == "IMM":
            self.ready_at = now
            if st.trigger_source == "IMM" and not self.precomputed:
                period = self.scene.trigger_period_s
                self.free_run_shift_s = float(self.rng.uniform(-period / 2, period / 2))
            return
        if not self.trigger_possible():
            self.ready_at = math.inf
            return
        period = self.scene.trigger_period_s
        elapsed = max(now, self._quiet_until) - self._epoch
        next_trigger = self._epoch + (math.floor(elapsed / period) + 1) * period
        missed = max(0, int(self.missed_triggers()))
        if missed:
            self._quiet_until = next_trigger + (missed - 0.5) * period
            next_trigger += missed * period
        self.ready_at = next_trigger + (st.averages - 1) * period

    def _abort(self, args, s):
        expect_args(args, 0)
        self.armed = False
        self.ready_at = math.inf

    def done(self) -> bool:
        return self.armed and self.clock() >= self.ready_at

    def _volts(self, channel: int) -> np.ndarray:
        st = self.state
        dt = self.time_step_s
        times = st.trigger_delay_s + dt * np.arange(st.points)
        avg = st.averages
        # Averaging n triggers: noise falls by sqrt(n); the jitter is drawn as the mean of n.
        jitter = float(self.rng.normal(0.0, self.jitter_s / math.sqrt(avg)))
        jitter += self.free_run_shift_s
        if channel != 1:
            # the invented monitor: the burst as the trigger (its sync) times it, exactly
            return drive_monitor_v(times - self.free_run_shift_s, self.scene.drive,
                                   self.monitor_ratio)
        load = self.scene.hydrophone.load_factor(st.channels[1].impedance_ohm)
        v = load * self.scene.hydrophone_voltage_v(times, jitter_s=jitter)
        return v + self.rng.normal(0.0, self.noise_v_rms / math.sqrt(avg), st.points)

    def acquire_codes(self, channel: int) -> tuple[np.ndarray, float, float]:
        """Quantised codes, volts per code and offset of ``channel`` for the current acquisition."""
        ch = self.state.channels[channel]
        return quantise(self._volts(channel), ch.range_v, ch.offset_v, self.state.data_format,
                        self.range_divisions)

    def _encode(self, codes: np.ndarray) -> bytes:
        dtype = codes.dtype.newbyteorder("<" if self.state.byte_order == "little" else ">")
        return format_block(codes.astype(dtype, copy=False).tobytes())

    def _fetch(self, args, s):
        if len(args) > 1:
            raise ScpiError(-108, "WAV:DATA? takes at most one channel")
        if args:
            value = parse_choice(args[0], {"CHANnel#": "CHAN"})
            number = int(value[4:])
            if number not in CHANNELS:
                raise ScpiError(-224, f"no channel {number}")
            self.state.wave_source = number
        channel = self.state.wave_source
        if self.precomputed:
            return self._precomputed_block(channel)
        if not self.done():
            raise ScpiError(-230, "no completed acquisition")
        key = (self.acquisitions, channel)
        if self._trace is None or self._trace_for != key:
            self._trace = self.acquire_codes(channel)
            self._trace_for = key
        self.last_codes = self._trace[0]
        return self._encode(self._trace[0])

    def _precomputed_block(self, channel: int) -> bytes:
        st = self.state
        ch = st.channels[channel]
        key = (channel, st.points, st.divider, st.averages, st.trigger_delay_s, st.data_format,
               st.byte_order, ch.range_v, ch.offset_v, self.range_divisions, self.scene.version)
        if key != self._pre_key:
            self._pre_codes = [self.acquire_codes(channel)[0] for _ in range(self.precomputed)]
            self._pre_blocks = [self._encode(codes) for codes in self._pre_codes]
            self._pre_key = key
            self._pre_next = 0
        block = self._pre_blocks[self._pre_next]
        self.last_codes = self._pre_codes[self._pre_next]
        self._pre_next = (self._pre_next + 1) % len(self._pre_blocks)
        return block
