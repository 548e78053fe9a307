"""Profile-driven digitiser driver: configure, arm, wait for the trigger, fetch a trace.

The driver is given its :class:`~tankside.drivers.scpi.ScpiLink`; every command it
sends comes from the profile, so the same code drives any instrument a profile
describes.
"""

from __future__ import annotations

import dataclasses
import math
import time
from dataclasses import dataclass

import numpy as np

from . import ieee488
from .errors import InstrumentError, InstrumentTimeout, NoTrigger, ProtocolError, SettingError
from .profile import Profile, command_text_problem
from .scpi import ScpiLink
from .trace import ChannelTrace, RawTrace, count_at_rails


@dataclass(frozen=True)
class DigitiserSettings:
    """What the digitiser is set to.

    Attributes
    ----------
    record_length : int
        Samples per trace.
    sample_rate_hz : float or None
        Samples per second, Hz, asked of the instrument; None leaves the rate to the
        instrument (its own time step is the rate used and recorded). Either way the
        time step it reports must agree within :data:`RATE_TOLERANCE`.
    range_v : float
        Full-scale span, peak to peak, V; one of the profile's ``ranges_v``.
    offset_v : float
        Vertical offset, V.
    coupling : str
        Input coupling word as the instrument spells it (e.g. ``"DC"``).
    impedance_ohm : float
        Input impedance, ohm.
    trigger_source, trigger_slope : str
        As the instrument spells them.
    trigger_level_v : float
        Trigger level, V.
    trigger_delay_s : float or None
        Time from the trigger to the record's start (the instrument's own sign
        convention for a pre-trigger), s; None (the default) leaves it as the instrument
        has it. An axial scan moves the pulse's arrival by about 0.67 us per mm: the
        record must cover it.
    averages : int
        Traces averaged per acquisition (1 = none).
    channel : int
        Input channel number of the hydrophone (1 .. :data:`MAX_CHANNEL`); every
        profile command with a ``channel`` placeholder is sent with it.
    monitor_channel : int or None
        A second input channel fetched raw with each trace, after the hydrophone's and
        from the same acquisition (no second trigger), with the profile's fetch and
        scaling commands; None: no monitor channel.
    monitor_range_v : float or None
        Full-scale span (p-p, V) of the monitor channel, one of ``ranges_v``, set once at
        configuration with the profile's ``set_range`` (never auto-ranged); None
        leaves the channel's range as the instrument has it.
    """

    record_length: int = 10000
    sample_rate_hz: float | None = None
    range_v: float = 1.0
    offset_v: float = 0.0
    coupling: str = "DC"
    impedance_ohm: float = 1e6
    trigger_source: str = "EXT"
    trigger_level_v: float = 0.5
    trigger_slope: str = "POS"
    trigger_delay_s: float | None = None
    averages: int = 1
    channel: int = 1
    monitor_channel: int | None = None
    monitor_range_v: float | None = None

    def __post_init__(self):
        if not (isinstance(self.record_length, int) and self.record_length > 0):
            raise SettingError(f"record_length must be a positive integer, "
                               f"got {self.record_length!r}")
        for name in ("sample_rate_hz", "range_v", "impedance_ohm"):
            value = getattr(self, name)
            if name == "sample_rate_hz" and value is None:
                continue
            if not (isinstance(value, int | float) and math.isfinite(value) and value > 0):
                raise SettingError(f"{name} must be a positive number, got {value!r}")
        for name in ("offset_v", "trigger_level_v"):
            value = getattr(self, name)
            if not (isinstance(value, int | float) and math.isfinite(value)):
                raise SettingError(f"{name} must be a number, got {value!r}")
        delay = self.trigger_delay_s
        if delay is not None and not (isinstance(delay, int | float)
                                      and not isinstance(delay, bool)
                                      and math.isfinite(delay) and abs(delay) <= 10.0):
            raise SettingError(f"trigger_delay_s must be a number of seconds within +-10 s, "
                               f"got {delay!r}")
        if not (isinstance(self.averages, int) and self.averages >= 1):
            raise SettingError(f"averages must be an integer >= 1, got {self.averages!r}")
        if not _is_channel(self.channel):
            raise SettingError(f"channel must be an integer 1 .. {MAX_CHANNEL}, "
                               f"got {self.channel!r}")
        if self.monitor_channel is not None:
            if not _is_channel(self.monitor_channel):
                raise SettingError(f"monitor_channel must be an integer 1 .. {MAX_CHANNEL}, "
                                   f"got {self.monitor_channel!r}")
            if self.monitor_channel == self.channel:
                raise SettingError(f"monitor_channel {self.monitor_channel} is the "
                                   "hydrophone's channel; name another or leave it out")
        if self.monitor_range_v is not None:
            value = self.monitor_range_v
            if not (isinstance(value, int | float) and not isinstance(value, bool)
                    and math.isfinite(value) and value > 0):
                raise SettingError(f"monitor_range_v must be a positive number, got {value!r}")
            if self.monitor_channel is None:
                raise SettingError("monitor_range_v is given without a monitor_channel")
        for name in ("coupling", "trigger_source", "trigger_slope"):
            value = getattr(self, name)
            if not (isinstance(value, str) and value):
                raise SettingError(f"{name} must be a non-empty string, got {value!r}")
            problem = command_text_problem(value)
            if problem is not None:
                raise SettingError(f"{name} = {value!r} {problem}")

    def as_dict(self) -> dict:
        return dataclasses.asdict(self)

    def replace(self, **changes) -> DigitiserSettings:
        return dataclasses.replace(self, **changes)


#: The highest input channel number a bench may name (no digitiser tankside knows of has
#: more inputs).
MAX_CHANNEL = 16


def _is_channel(value) -> bool:
    return (isinstance(value, int) and not isinstance(value, bool)
            and 1 <= value <= MAX_CHANNEL)


def decode_codes(payload: bytes | bytearray, dtype: np.dtype) -> np.ndarray:
    """Samples of a block payload, in native byte order, values exactly as sent.

    Raises
    ------
    ProtocolError
        If the payload is not a whole number of samples.
    """
    dtype = np.dtype(dtype)
    if len(payload) % dtype.itemsize:
        raise ProtocolError(f"block of {len(payload)} bytes is not a whole number of "
                            f"{dtype.itemsize}-byte samples")
    return np.frombuffer(payload, dtype=dtype).astype(dtype.newbyteorder("="))


def _match_range(ranges_v, range_v: float) -> float:
    for allowed in ranges_v:
        if math.isclose(allowed, range_v, rel_tol=1e-9):
            return allowed
    raise SettingError(f"range {range_v:g} V is not one of the profile's ranges "
                       f"{', '.join(f'{r:g}' for r in ranges_v)} V")


# How far the rate implied by the instrument's time step may be from the rate asked,
# relative: more is a configuration error (the trace would be recorded at a wrong rate).
RATE_TOLERANCE = 1e-3


def rate_problem(asked_hz: float, dt_s: float) -> str | None:
    """Why a bench rate of ``asked_hz`` disagrees with a reported time step, or None."""
    actual_hz = 1.0 / dt_s
    if abs(actual_hz - asked_hz) <= RATE_TOLERANCE * asked_hz:
        return None
    return (f"bench sample_rate_hz = {asked_hz:g} Hz, but the digitiser's time step is "
            f"{dt_s:g} s ({actual_hz:g} Hz), {abs(actual_hz / asked_hz - 1):.1%} apart "
            f"(tolerance {RATE_TOLERANCE:.1%}); set the bench rate to {actual_hz:g} or "
            "leave it out to use the instrument's own")


# How far the full scale implied by the volts per code and the rails may be from the
# range in use, relative, before the driver warns that the profile's [ranges] kind (or
# its rails) does not describe the instrument.
SCALE_TOLERANCE = 0.05


def scale_problem(range_v: float, full_scale_v: float) -> str | None:
    """Why the range and the full scale from the scaling disagree, or None."""
    if abs(full_scale_v - range_v) <= SCALE_TOLERANCE * range_v:
        return None
    return (f"the range in use is {range_v:g} V peak to peak, but the digitiser's volts per "
            f"code and the profile's rails make a full scale of {full_scale_v:g} V "
            f"({full_scale_v / range_v:.3g} times); check [ranges] kind and [data] "
            "code_min / code_max against the instrument's manual (the share of full scale "
            "is taken from the volts per code and the rails)")


# (settings field, command key, placeholder) in the order they are sent.
_STEPS = (
    ("record_length", "set_record_length", "points"),
    ("sample_rate_hz", "set_sample_rate", "rate_hz"),
    ("range_v", "set_range", "range_v"),
    ("offset_v", "set_offset", "offset_v"),
    ("coupling", "set_coupling", "coupling"),
    ("impedance_ohm", "set_impedance", "impedance_ohm"),
    ("trigger_source", "set_trigger_source", "source"),
    ("trigger_level_v", "set_trigger_level", "level_v"),
    ("trigger_slope", "set_trigger_slope", "slope"),
    ("trigger_delay_s", "set_trigger_delay", "delay_s"),
    ("averages", "set_averages", "count"),
)


# What a digitiser's scaling replies may hold. Wider than any instrument (10 THz to 1 Hz
# sampling, 1 kV per code) but narrow enough that the arithmetic on a trace stays finite.
SCALING_LIMITS = {
    "dt_s": (1e-13, 1.0),
    "t0_s": (-1e3, 1e3),
    "volts_per_code": (-1e3, 1e3),
    "offset_v": (-1e4, 1e4),
}


def scaling_problems(scaling: dict) -> list[tuple[str, str]]:
    """``(field, problem)`` for each scaling value that cannot be a real instrument's."""
    problems = []
    for key, (low, high) in SCALING_LIMITS.items():
        value = scaling[key]
        if not math.isfinite(value) or not low <= value <= high:
            problems.append((key, f"{value!r} is outside {low:g} to {high:g}"))
    if scaling["dt_s"] > 0 and scaling["volts_per_code"] == 0:
        problems.append(("volts_per_code", "0 V per code"))
    return problems


def unapplied_settings(profile: Profile, names) -> list[str]:
    """Those of the settings ``names`` (DigitiserSettings fields) that ``profile`` has no
    command to send, in the order they would be sent. ``sample_rate_hz`` without
    ``set_sample_rate`` is among them: it is checked against the time step, not set."""
    given = set(names)
    return [name for name, key, _ in _STEPS if name in given and not profile.has(key)]


def full_scale_v(profile: Profile, volts_per_code: float) -> float | None:
    """Full-scale span (p-p, V) from the volts per code and the profile's rails: one code
    more than the rails' distance, as an ADC of 2**n codes spans its range; None for
    float32 samples (they are volts, with no codes to count)."""
    if profile.data_format == "float32":
        return None
    return (profile.code_max - profile.code_min + 1) * abs(volts_per_code)


class Digitiser:
    """A digitiser driven by its profile.

    Parameters
    ----------
    link : ScpiLink
    profile : Profile
        A ``kind = "digitiser"`` profile.
    poll_interval_s : float
        Pause between ``acquisition_done`` polls, s.
    check_errors_each_trace : bool
        Drain the error queue after each trace (policy of the link applies).

    Notes
    -----
    The scaling (time step, origin, volts per code, offset) is read after each
    :meth:`configure` or :meth:`set_range` and reused until the next one, since it
    only changes with the settings. The last settings are re-applied when the link
    is reopened.
    """

    def __init__(self, link: ScpiLink, profile: Profile, *, poll_interval_s: float = 0.002,
                 check_errors_each_trace: bool = True):
        if profile.kind != "digitiser":
            raise SettingError(f"{profile.source}: profile is for a {profile.kind}, "
                               "not a digitiser")
        self.link = link
        self.profile = profile
        self.poll_interval_s = poll_interval_s
        self.check_errors_each_trace = check_errors_each_trace
        self.skipped: tuple[str, ...] = ()
        #: Configuration warnings (each given once), taken by :meth:`take_warnings`.
        self.warnings: list[str] = []
        self._warned: set[str] = set()
        self._settings: DigitiserSettings | None = None
        self._scaling: dict | None = None
        self._monitor_scaling: dict | None = None
        # The monitor channel's span as set (None: not set, the bench gave no range).
        self._monitor_range_v: float | None = None
        if profile.has("get_error"):
            link.error_query = profile.command("get_error")
        link.add_reopen_hook(self._reapply)

    @property
    def identity(self) -> str:
        """The ``identify`` reply (queried once)."""
        if self.link.identity is None:
            self.link.identity = self.link.query(self.profile.command("identify")).strip()
        return self.link.identity

    @property
    def settings(self) -> DigitiserSettings | None:
        """The settings last applied, or None before :meth:`configure`."""
        return self._settings

    @property
    def ranges_v(self) -> tuple:
        """Allowed full-scale spans, peak to peak, V, ascending."""
        return self.profile.ranges_v

    def reset(self) -> None:
        """Send the profile's ``reset`` command and forget the applied settings."""
        self.link.write_step(self.profile.command("reset"))
        self._settings = None
        self._forget_scaling()

    def send_setup(self) -> None:
        """Send the profile's ``[commands] setup`` lines in order, checking errors after
        each (the opener calls this once after connecting; a reopen sends them again)."""
        for line in self.profile.setup:
            self.link.write_step(line)

    def configure(self, settings: DigitiserSettings) -> None:
        """Apply every setting the profile has a command for, checking errors after each.

        Settings whose command the profile lacks are listed in :attr:`skipped` (and
        recorded as not set, :meth:`recorded_state`). The
        scaling is then read; a time step that disagrees with the asked sample rate by
        more than :data:`RATE_TOLERANCE` is a :class:`SettingError`.
        """
        settings = settings.replace(range_v=_match_range(self.ranges_v, settings.range_v))
        if settings.monitor_range_v is not None:
            settings = settings.replace(
                monitor_range_v=_match_range(self.ranges_v, settings.monitor_range_v))
        self._forget_scaling()
        skipped = []
        span_v = settings.range_v
        for name, key, placeholder in _STEPS:
            value = getattr(settings, name)
            if value is None:
                continue        # left to the instrument (sample_rate_hz, trigger_delay_s)
            if not self.profile.has(key):
                skipped.append(name)
                continue
            if name == "range_v":
                span_v = self._write_range(settings.channel, value)
                continue
            self.link.write_step(self.profile.command(key, channel=settings.channel,
                                                         **{placeholder: value}))
        self._monitor_range_v = None
        if settings.monitor_channel is not None and settings.monitor_range_v is not None:
            # (set_range is a required command of every digitiser profile)
            self._monitor_range_v = self._write_range(settings.monitor_channel,
                                                      settings.monitor_range_v)
        self.skipped = tuple(skipped)
        self._settings = settings.replace(range_v=span_v)
        if self._monitor_range_v is not None:     # the span read back, when the profile can
            self._settings = self._settings.replace(monitor_range_v=self._monitor_range_v)
        if settings.monitor_channel is None:
            dt_s = self.fetch_scaling()["dt_s"]
        else:
            # A profile whose scaling queries name no channel asks about the channel last
            # fetched, which may be the monitor's (after a reconnect): only the time step,
            # common to both, is taken now; the hydrophone's scaling is read (and checked
            # against its range) after its first block.
            dt_s = self._read_scaling(settings.channel)["dt_s"]
        if settings.sample_rate_hz is not None:
            problem = rate_problem(settings.sample_rate_hz, dt_s)
            if problem is not None:
                raise SettingError(f"configuration: {problem}", resource=self.link.name)

    def set_range(self, range_v: float) -> None:
        """Change the vertical range to one of :attr:`ranges_v`."""
        current = self._require_settings()
        range_v = _match_range(self.ranges_v, range_v)
        self._forget_scaling()
        self._settings = current.replace(range_v=self._write_range(current.channel, range_v))

    def _forget_scaling(self) -> None:
        self._scaling = None
        self._monitor_scaling = None

    def _write_range(self, channel: int, span_v: float) -> float:
        """Set the range for a span of ``span_v`` (p-p, V) in the instrument's own kind
        (``[ranges] kind``); return the span read back, or ``span_v`` without
        ``query_range``."""
        self.link.write_step(self.profile.command(
            "set_range", channel=channel, range_v=self.profile.instrument_range(span_v)))
        if not self.profile.has("query_range"):
            return span_v
        reply = self.link.query(self.profile.command("query_range", channel=channel))
        try:
            value = ieee488.parse_number(reply)
        except ProtocolError as err:
            raise ProtocolError(f"query_range: {err.message}", resource=self.link.name) from err
        span = self.profile.span_of(value)
        if not (math.isfinite(span) and span > 0):
            raise ProtocolError(f"query_range: {reply.strip()!r} is not a range",
                                resource=self.link.name)
        return span

    def take_warnings(self) -> list[str]:
        """The configuration warnings not yet taken (each is given once per driver)."""
        out, self.warnings = self.warnings, []
        return out

    def _warn(self, message: str) -> None:
        if message not in self._warned:
            self._warned.add(message)
            self.warnings.append(message)

    def _require_settings(self) -> DigitiserSettings:
        if self._settings is None:
            raise SettingError("digitiser not configured: call configure() first",
                               resource=self.link.name)
        return self._settings

    def _reapply(self) -> None:
        self.send_setup()
        if self._settings is not None:
            self.configure(self._settings)

    def fetch_scaling(self) -> dict:
        """Time step, time origin, volts per code and offset; cached until settings change."""
        if self._scaling is None:
            self._scaling = self._read_scaling(self._require_settings().channel)
            full_scale = full_scale_v(self.profile, self._scaling["volts_per_code"])
            if full_scale is not None:
                mismatch = scale_problem(self._require_settings().range_v, full_scale)
                if mismatch is not None:
                    self._warn(mismatch)
        return self._scaling

    def _read_scaling(self, ch: int) -> dict:
        """The scaling replies of channel ``ch``, checked (:func:`scaling_problems`)."""
        def number(key: str, default: float | None = None) -> float:
            if default is not None and not self.profile.has(key):
                return default
            reply = self.link.query(self.profile.command(key, channel=ch))
            try:
                return ieee488.parse_number(reply)
            except ProtocolError as err:
                raise ProtocolError(f"{key}: {err.message}",
                                    resource=self.link.name) from err

        scaling = {"dt_s": number("get_time_step"), "t0_s": number("get_time_origin", 0.0),
                   "volts_per_code": number("get_volts_per_code"),
                   "offset_v": number("get_offset", 0.0)}
        for key, problem in scaling_problems(scaling):
            raise ProtocolError(f"{key}: {problem}", resource=self.link.name)
        return scaling

    def _wait_for_trigger(self, channel: int, trigger_timeout_s: float) -> None:
        deadline = time.monotonic() + trigger_timeout_s
        if self.profile.has("acquisition_done"):
            command = self.profile.command("acquisition_done", channel=channel)
            while True:
                if ieee488.parse_bool(self.link.query(command)):
                    return
                if time.monotonic() >= deadline:
                    raise NoTrigger(f"no trigger within {trigger_timeout_s:g} s",
                                    resource=self.link.name)
                time.sleep(self.poll_interval_s)
        saved = self.link.timeout_s
        self.link.timeout_s = trigger_timeout_s
        try:
            reply = self.link.query(self.profile.command("wait_complete"))
        except NoTrigger:
            raise
        except InstrumentTimeout as err:
            raise NoTrigger(f"no trigger within {trigger_timeout_s:g} s",
                            resource=self.link.name) from err
        finally:
            self.link.timeout_s = saved
        if reply.strip() != "1":
            raise ProtocolError(f"wait_complete: expected '1', got {reply!r}",
                                resource=self.link.name)

    def acquire(self, seq: int, *, trigger_timeout_s: float) -> RawTrace:
        """Arm a single acquisition, wait for the trigger, and fetch the trace.

        Parameters
        ----------
        seq : int
            Sequence number to stamp on the trace.
        trigger_timeout_s : float
            How long to wait for the trigger, s.

        Raises
        ------
        NoTrigger
            The digitiser did not trigger in time.
        ProtocolError, InstrumentTimeout, ConnectionLost, InstrumentReportedError
        """
        settings = self._require_settings()
        ch = settings.channel
        self.link.write(self.profile.command("arm_single", channel=ch))
        self._wait_for_trigger(ch, trigger_timeout_s)
        payload = self.link.query_block(self.profile.command("fetch_waveform", channel=ch))
        time_s = time.time()
        try:
            codes = decode_codes(payload, self.profile.dtype)
        except ProtocolError as err:
            raise ProtocolError(err.message, resource=self.link.name) from err
        scaling = self.fetch_scaling()
        if self.check_errors_each_trace:
            self.link.check_errors("acquire")
        low, high = count_at_rails(codes, self.profile.code_min, self.profile.code_max)
        state = self.recorded_state(scaling)
        monitor, monitor_error = None, None
        if settings.monitor_channel is not None:
            try:
                monitor = self.fetch_monitor(settings.monitor_channel)
            except InstrumentError as err:
                monitor_error = err
        return RawTrace(codes=codes, volts_per_code=scaling["volts_per_code"],
                        offset_v=scaling["offset_v"], dt_s=scaling["dt_s"],
                        t0_s=scaling["t0_s"], seq=int(seq), time_s=time_s,
                        range_v=settings.range_v, code_min=self.profile.code_min,
                        code_max=self.profile.code_max, clipped_low=low, clipped_high=high,
                        data_format=self.profile.data_format, state=state,
                        monitor=monitor, monitor_error=monitor_error)

    def fetch_monitor(self, channel: int) -> ChannelTrace:
        """The block of ``channel`` from the acquisition just fetched (no arm, no wait),
        with its scaling (read after its first block, then cached until the settings
        change), exactly as sent. The error queue is checked after it when
        :attr:`check_errors_each_trace` is set.

        Raises
        ------
        ProtocolError, InstrumentTimeout, ConnectionLost, InstrumentReportedError
        """
        payload = self.link.query_block(self.profile.command("fetch_waveform",
                                                             channel=channel))
        try:
            codes = decode_codes(payload, self.profile.dtype)
        except ProtocolError as err:
            raise ProtocolError(f"monitor channel {channel}: {err.message}",
                                resource=self.link.name) from err
        if self._monitor_scaling is None:
            self._monitor_scaling = self._read_scaling(channel)
        scaling = self._monitor_scaling
        if self.check_errors_each_trace:
            self.link.check_errors(f"monitor channel {channel}")
        low, high = count_at_rails(codes, self.profile.code_min, self.profile.code_max)
        return ChannelTrace(channel=int(channel), codes=codes,
                            volts_per_code=scaling["volts_per_code"],
                            offset_v=scaling["offset_v"], dt_s=scaling["dt_s"],
                            t0_s=scaling["t0_s"], range_v=self._monitor_range_v,
                            clipped_low=low, clipped_high=high)

    def recorded_state(self, scaling: dict) -> dict:
        """The instrument state of a trace: only what was sent or read back.

        A setting the profile has no command for was never sent, so it is None (not
        set) rather than the value asked for; the sample rate is the one the reported
        time step implies, the range the span read back (:meth:`configure`).
        """
        state = self._require_settings().as_dict()
        for name in self.skipped:
            state[name] = None
        state["sample_rate_hz"] = 1.0 / scaling["dt_s"]     # as the instrument reports it
        state["identity"] = self.link.identity
        return state

    def read_settings(self) -> dict:
        """Replies to the profile's ``query_*`` commands, by settings field (raw text)."""
        ch = self._settings.channel if self._settings else 1
        out = {}
        for name, key, _ in _STEPS:
            qkey = "query_" + key[len("set_"):]
            if self.profile.has(qkey):
                out[name] = self.link.query(self.profile.command(qkey, channel=ch)).strip()
        return out

    def recover(self) -> str:
        """Resynchronise the link, or reopen it and re-apply the settings."""
        self._forget_scaling()
        return self.link.recover()
