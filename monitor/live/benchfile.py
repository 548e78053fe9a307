"""The bench file: a TOML description of the instruments, calibration and limits of one set-up.

Layout (every section except ``[digitiser]`` and ``[calibration]`` is optional)::

    [digitiser]
    resource = "TCPIP0::127.0.0.1::5025::SOCKET"   # VISA resource string
    profile = "sim-digitiser.toml"                  # built-in name or path
    visa_library = "@py"                            # pyvisa backend
    timeout_s = 5.0                                 # I/O timeout
    trigger_timeout_s = 2.0                         # wait for one trigger
    record_length = 10000                           # any DigitiserSettings field
    sample_rate_hz = 250e6                          # optional: without it the digitiser's
                                                    # own time step is used and recorded
    range_v = 0.5
    channel = 1                                     # the hydrophone's input (default 1)
    monitor_channel = 2                             # optional: fetched raw with each trace
    monitor_range_v = 2.0                           # optional: its range, set once
    trigger_source = "EXT"
    trigger_level_v = 0.5

    [generator]
    resource = "..."
    profile = "..."
    amplitude_vpp = 0.1           # applied at start with the output off
    leave_on_at_end = false       # default: output switched off when the session ends
    safe_off_give_up_s = 10.0     # retry a safe-off this long, then stop the session

    [calibration]
    file = "cal.csv"
    max_step_db = 20.0         # largest magnitude step between neighbouring rows (inf: off)
    check_phase_steps = true   # refuse unwrapped phase that steps over 180 degrees

    [loading]              # Loading fields
    hydrophone_capacitance_f = 100e-12

    [conversion]           # ConversionSettings fields
    method = "auto"

    [water]
    temperature_c = 20.0

    [alerts]               # rule thresholds and actions (tankside.monitor.live.rules)

    [session]
    folder = "sessions"
    commit_interval_s = 1.0
    queue_capacity = 64
    reconnect_give_up_s = 60.0

    [stage]                # a positioning stage on a serial line (optional)
    profile = "stage.toml"                  # stage profile (TOML, kind = "stage")
    port = "/dev/ttyUSB0"                   # serial device; or address = "host:port"
    baud_rate = 115200                      # optional, overrides the profile
    timeout_s = 1.0                         # optional, overrides the profile
    [stage.limits]         # mm; soft limits of every axis, required with [stage]
    x = [-20.0, 20.0]
    y = [-20.0, 20.0]
    z = [0.0, 80.0]

    [thermometer]          # a water thermometer on a serial line (optional)
    profile = "thermometer.toml"            # thermometer profile (kind = "thermometer")
    port = "/dev/ttyUSB1"                   # or address = "host:port"
    max_age_s = 30.0       # an older reading: the [water] temperature, with a warning

    [scan]                 # optional: a scan plan (tankside.monitor.live.scanplan has
    kind = "line"          # its keys); parsed and checked against [stage.limits] here,
    settle_s = 0.3         # carried as BenchConfig.scan
    traces = 8
    [[scan.axes]]
    name = "z"
    start_mm = 20.0
    stop_mm = 60.0
    step_mm = 1.0

Relative paths (profile, calibration file, session folder) are resolved against the
folder that holds the bench file, so a bench folder can be moved as a whole.
"""

from __future__ import annotations

import copy
import dataclasses
import math
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from ..errors import ConfigError
from .scanplan import ScanPlan, plan_from_table
from .tomlfile import read_toml

# Keys of [digitiser] and [generator] that are about the connection, not instrument settings.
_CONNECTION_KEYS = {"resource": str, "profile": str, "visa_library": str, "timeout_s": float}
_DIGITISER_EXTRA = {"trigger_timeout_s": float}
_GENERATOR_KEYS = {
    "amplitude_vpp": float,
    "frequency_hz": float,
    "burst_cycles": int,
    "burst_period_s": float,
    "output": bool,
    "leave_on_at_end": bool,
    "safe_off_give_up_s": float,
}
_SESSION_KEYS = {
    "folder": str,
    "commit_interval_s": float,
    "queue_capacity": int,
    "reconnect_give_up_s": float,
}
# Plausibility checks of the calibration loader (tankside.monitor.acoustics.calibration).
_CALIBRATION_CHECKS = {"max_step_db": float, "check_phase_steps": bool}
_SECTIONS = ("digitiser", "generator", "calibration", "loading", "conversion", "water",
             "alerts", "session", "stage", "thermometer", "scan")
# Keys of [stage] and [thermometer] (serial instruments); limits are [stage.limits].
_SERIAL_KEYS = {"profile": str, "port": str, "address": str, "baud_rate": int,
                "timeout_s": float}
_THERMOMETER_EXTRA = {"max_age_s": float}
DEFAULT_MAX_AGE_S = 30.0


@dataclass(frozen=True)
class InstrumentConfig:
    """How to reach one instrument: resource, profile (name or absolute path), backend."""

    resource: str
    profile: str
    visa_library: str = "@py"
    timeout_s: float = 5.0


@dataclass(frozen=True)
class GeneratorConfig(InstrumentConfig):
    """The generator connection, and settings applied at start (None = leave as found).

    The settings are applied with the output off; tankside never switches it on by
    itself (``output`` may only be false: switch it off at start). ``leave_on_at_end``
    false (the default) switches the output off when the session ends;
    ``safe_off_give_up_s`` bounds how long a safe-off is retried before the session
    stops saying the drive may still be on.
    """

    amplitude_vpp: float | None = None
    frequency_hz: float | None = None
    burst_cycles: int | None = None
    burst_period_s: float | None = None
    output: bool | None = None
    leave_on_at_end: bool = False
    safe_off_give_up_s: float = 10.0


@dataclass(frozen=True)
class SerialConfig:
    """How to reach a serial-line instrument (stage, thermometer).

    ``profile`` is an absolute path (or a bare name); exactly one of ``port`` (a serial
    device path) and ``address`` (``"host:port"`` over TCP) is set. ``baud_rate`` and
    ``timeout_s`` (s) override the profile's when given.
    """

    profile: str
    port: str | None = None
    address: str | None = None
    baud_rate: int | None = None
    timeout_s: float | None = None

    @property
    def resource(self) -> str:
        """The port or address, as the status view and the instrument lock name it."""
        return self.port if self.port is not None else str(self.address)


@dataclass(frozen=True)
class StageConfig(SerialConfig):
    """The stage's connection and its soft limits: axis -> (low, high), mm.

    A move outside the limits is refused before anything is sent.
    """

    limits: dict[str, tuple[float, float]] = field(default_factory=dict)


@dataclass(frozen=True)
class ThermometerConfig(SerialConfig):
    """The thermometer's connection; a reading older than ``max_age_s`` (s) is not used
    (the conversion falls back to the bench's ``[water] temperature_c``, with a warning)."""

    max_age_s: float = DEFAULT_MAX_AGE_S


@dataclass(frozen=True)
class BenchConfig:
    """A validated bench file (after command-line overrides).

    ``tables`` keeps the full configuration as merged (JSON-able) for the session metadata.
    The ``*_settings``/``calibration``/... methods build the objects of the other pieces.
    """

    source: str
    digitiser: InstrumentConfig
    digitiser_table: dict
    trigger_timeout_s: float
    generator: GeneratorConfig | None
    calibration_path: Path
    loading_table: dict
    conversion_table: dict
    temperature_c: float
    alerts_table: dict
    session_folder: Path
    commit_interval_s: float = 1.0
    queue_capacity: int = 64
    reconnect_give_up_s: float = 60.0
    tables: dict = field(default_factory=dict)
    calibration_checks: dict = field(default_factory=dict)
    stage: StageConfig | None = None
    thermometer: ThermometerConfig | None = None
    scan: ScanPlan | None = None
    """The ``[scan]`` table's plan, checked against ``[stage.limits]`` (None without one)."""

    def digitiser_settings(self):
        """The :class:`tankside.drivers.digitiser.DigitiserSettings` of ``[digitiser]``."""
        from ...drivers.digitiser import DigitiserSettings

        return _build(DigitiserSettings, self.digitiser_table, self.source, "digitiser")

    def calibration(self):
        """Load the calibration file (raises CalibrationError naming file and line)."""
        from ..acoustics.calibration import load_calibration

        if not self.calibration_path.is_file():
            raise ConfigError(f"{self.source}: [calibration] file: no such file "
                              f"{str(self.calibration_path)!r}")
        return load_calibration(self.calibration_path, **self.calibration_checks)

    def loading(self):
        from ..acoustics.loading import Loading

        return _build(Loading, self.loading_table, self.source, "loading")

    def conversion_settings(self):
        from ..acoustics.settings import ConversionSettings

        return _build(ConversionSettings, self.conversion_table, self.source, "conversion")

    def alert_config(self):
        from .rules import AlertConfig

        try:
            return AlertConfig.from_table(copy.deepcopy(self.alerts_table))
        except ConfigError as err:
            raise ConfigError(f"{self.source}: [alerts] {err}") from err

    def protection_warnings(self) -> tuple[str, ...]:
        """What the alert settings switch off of the protection (see
        :func:`tankside.monitor.live.rule_specs.protection_warnings`); empty when none."""
        from .rule_specs import protection_warnings

        return protection_warnings(self.alert_config())

    def converter(self):
        """A :class:`tankside.monitor.acoustics.converter.Converter` for this bench."""
        from ..acoustics.converter import Converter

        return Converter(self.calibration(), loading=self.loading(),
                         settings=self.conversion_settings(), temperature_c=self.temperature_c)


def _build(cls, table: dict, source: str, section: str):
    names = {f.name for f in dataclasses.fields(cls)}
    for key in table:
        if key not in names:
            raise ConfigError(f"{source}: [{section}] {key}: unknown key "
                              f"(expected one of {', '.join(sorted(names))})")
    try:
        return cls(**table)
    except (TypeError, ValueError) as err:
        raise ConfigError(f"{source}: [{section}]: {err}") from err


def _typed(value: Any, kind: type, source: str, where: str, *, allow_infinite: bool = False):
    if kind is float:
        if isinstance(value, bool) or not isinstance(value, int | float):
            raise ConfigError(f"{source}: {where}: expected a number, got {value!r}")
        if math.isnan(value) or (math.isinf(value) and not allow_infinite):
            raise ConfigError(f"{source}: {where}: expected a finite number, got {value!r}")
        return float(value)
    if kind is int:
        if isinstance(value, bool) or not isinstance(value, int):
            raise ConfigError(f"{source}: {where}: expected a whole number, got {value!r}")
        return value
    if kind is bool:
        if not isinstance(value, bool):
            raise ConfigError(f"{source}: {where}: expected true or false, got {value!r}")
        return value
    if not isinstance(value, str) or not value:
        raise ConfigError(f"{source}: {where}: expected a non-empty string, got {value!r}")
    return value


def _check_digitiser_values(table: dict, source: str) -> None:
    """Type-check the digitiser settings; their strings become command text.

    A string setting must be a non-empty string of printable ASCII without ``;`` or a
    line break (``coupling = "DC;:CHAN1:RANG 5"`` would set a range the session does not
    record). Unknown keys are left to :func:`_build`.
    """
    from ...drivers.digitiser import DigitiserSettings
    from ...drivers.profile import command_text_problem

    kinds = {f.name: f.type for f in dataclasses.fields(DigitiserSettings)}
    for key, value in table.items():
        kind = {"str": str, "float": float, "int": int,
                "float | None": float, "int | None": int}.get(str(kinds.get(key)))
        if kind is None:
            continue
        where = f"[digitiser] {key}"
        checked = _typed(value, kind, source, where)
        if kind is str:
            problem = command_text_problem(checked)
            if problem is not None:
                raise ConfigError(f"{source}: {where}: {value!r} {problem}; it is sent to the "
                                  "digitiser as part of a command")
        table[key] = checked


def _resolve(path_text: str, base: Path) -> Path:
    p = Path(path_text).expanduser()
    return p if p.is_absolute() else (base / p).resolve()


def _resolve_profile(name: str, base: Path) -> str:
    # A bare name ("sim-digitiser" or "acme.toml") may be a built-in profile; anything
    # that names an existing file beside the bench file, or has a folder part, is a path.
    candidate = _resolve(name, base)
    if candidate.exists() or "/" in name or "\\" in name:
        return str(candidate)
    return name


def _section(data: dict, name: str, source: str, required: bool) -> dict:
    table = data.get(name)
    if table is None:
        if required:
            raise ConfigError(f"{source}: missing section [{name}]")
        return {}
    if not isinstance(table, dict):
        raise ConfigError(f"{source}: [{name}] must be a table")
    return table


def _instrument(table: dict, name: str, source: str, base: Path, extra: dict):
    conn: dict[str, Any] = {}
    rest: dict[str, Any] = {}
    for key, value in table.items():
        if key in _CONNECTION_KEYS:
            conn[key] = _typed(value, _CONNECTION_KEYS[key], source, f"[{name}] {key}")
        elif key in extra:
            rest[key] = _typed(value, extra[key], source, f"[{name}] {key}")
        else:
            rest[key] = value
    for key in ("resource", "profile"):
        if key not in conn:
            raise ConfigError(f"{source}: [{name}] {key}: missing")
    conn["profile"] = _resolve_profile(conn["profile"], base)
    if conn.get("timeout_s", 1.0) <= 0:
        raise ConfigError(f"{source}: [{name}] timeout_s: must be above 0")
    return conn, rest


def _serial(table: dict, name: str, source: str, base: Path, extra: dict) -> dict[str, Any]:
    """The connection keys of ``[stage]`` or ``[thermometer]``, checked (no limits)."""
    values: dict[str, Any] = {}
    for key, value in table.items():
        if key == "limits" and name == "stage":
            continue
        kind = _SERIAL_KEYS.get(key, extra.get(key))
        if kind is None:
            known = ", ".join((*_SERIAL_KEYS, *extra, *(("limits",) if name == "stage" else ())))
            raise ConfigError(f"{source}: [{name}] {key}: unknown key (expected one of {known})")
        values[key] = _typed(value, kind, source, f"[{name}] {key}")
    if "profile" not in values:
        raise ConfigError(f"{source}: [{name}] profile: missing")
    if ("port" in values) == ("address" in values):
        raise ConfigError(f"{source}: [{name}] port: give either port (a serial device) or "
                          "address (host:port), not both or neither")
    if "address" in values:
        host, sep, port = values["address"].rpartition(":")
        if not (sep and host and port.isdigit() and 0 < int(port) < 65536):
            raise ConfigError(f"{source}: [{name}] address: expected host:port, got "
                              f"{values['address']!r}")
    for key in ("baud_rate", "timeout_s", *extra):
        if key in values and values[key] <= 0:
            raise ConfigError(f"{source}: [{name}] {key}: must be above 0")
    values["profile"] = _resolve_profile(values["profile"], base)
    return values


def _stage_limits(table: dict, source: str) -> dict[str, tuple[float, float]]:
    """``[stage.limits]``: axis -> [low, high] in mm, low below high, at least one axis."""
    limits = table.get("limits")
    if limits is None:
        raise ConfigError(f"{source}: [stage.limits]: missing; give the soft limits of every "
                          "axis in mm (x = [-20.0, 20.0], ...), the travel in which the "
                          "hydrophone cannot hit the transducer or the tank wall")
    if not isinstance(limits, dict) or not limits:
        raise ConfigError(f"{source}: [stage.limits]: expected a table of axis = [low, high] "
                          "in mm")
    out: dict[str, tuple[float, float]] = {}
    for axis, pair in limits.items():
        where = f"[stage.limits] {axis}"
        if not (axis.isidentifier() and axis.isascii()):
            raise ConfigError(f"{source}: {where}: an axis name must be a plain word")
        if not isinstance(pair, list) or len(pair) != 2:
            raise ConfigError(f"{source}: {where}: expected [low, high] in mm, got {pair!r}")
        low = _typed(pair[0], float, source, where)
        high = _typed(pair[1], float, source, where)
        if not low < high:
            raise ConfigError(f"{source}: {where}: low {low:g} mm must be below high "
                              f"{high:g} mm")
        out[axis] = (low, high)
    return out


def merge_overrides(data: dict, overrides: dict | None) -> dict:
    """Return a copy of the bench tables with ``overrides`` applied.

    ``overrides`` maps ``"section.key"`` (or ``"section.sub.key"`` for nested tables
    such as alert rules) to a value; a value of None removes the key, and the
    special key ``"generator"`` set to None removes the whole generator section.
    """
    merged = copy.deepcopy(data)
    for dotted, value in (overrides or {}).items():
        parts = dotted.split(".")
        if len(parts) == 1:
            if value is None:
                merged.pop(parts[0], None)
            else:
                merged[parts[0]] = value
            continue
        node = merged
        for part in parts[:-1]:
            node = node.setdefault(part, {})
            if not isinstance(node, dict):
                raise ConfigError(f"override {dotted}: {part} is not a table")
        if value is None:
            node.pop(parts[-1], None)
        else:
            node[parts[-1]] = value
    return merged


def load_bench(path: str | Path, overrides: dict | None = None) -> BenchConfig:
    """Read, merge and validate a bench file.

    Parameters
    ----------
    path : str or Path
        The bench TOML file.
    overrides : dict, optional
        Command-line settings, see :func:`merge_overrides`.

    Raises
    ------
    ConfigError
        Unreadable file, bad TOML, or a missing or bad value; the message names the
        file and the key.
    """
    path = Path(path)
    source = str(path)
    _, data = read_toml(path, "bench file")
    return parse_bench(data, source=source, base_dir=path.resolve().parent, overrides=overrides)


def parse_bench(data: dict, *, source: str = "<bench>", base_dir: Path | None = None,
                overrides: dict | None = None) -> BenchConfig:
    """Validate bench tables already parsed from TOML (see :func:`load_bench`)."""
    base = Path(base_dir) if base_dir is not None else Path.cwd()
    data = merge_overrides(data, overrides)
    for key in data:
        if key not in _SECTIONS:
            raise ConfigError(f"{source}: unknown section [{key}] "
                              f"(expected {', '.join(_SECTIONS)})")

    dig_conn, dig_rest = _instrument(_section(data, "digitiser", source, True), "digitiser",
                                     source, base, _DIGITISER_EXTRA)
    _check_digitiser_values(dig_rest, source)
    trigger_timeout_s = dig_rest.pop("trigger_timeout_s", 2.0)
    if trigger_timeout_s <= 0:
        raise ConfigError(f"{source}: [digitiser] trigger_timeout_s: must be above 0")

    gen = None
    gen_table = _section(data, "generator", source, False)
    if gen_table:
        gen_conn, gen_rest = _instrument(gen_table, "generator", source, base, _GENERATOR_KEYS)
        for key in gen_rest:
            if key not in _GENERATOR_KEYS:
                raise ConfigError(f"{source}: [generator] {key}: unknown key")
        if gen_rest.get("output") is True:
            raise ConfigError(
                f"{source}: [generator] output = true: tankside never switches the drive on "
                "by itself; remove the key (or set it false) and switch the output on with "
                "the dashboard's drive key or watch --drive-on")
        if gen_rest.get("safe_off_give_up_s", 1.0) <= 0:
            raise ConfigError(f"{source}: [generator] safe_off_give_up_s: must be above 0")
        if ("burst_cycles" in gen_rest) != ("burst_period_s" in gen_rest):
            raise ConfigError(f"{source}: [generator] burst_cycles and burst_period_s: "
                              "give both or neither")
        gen = GeneratorConfig(**gen_conn, **gen_rest)

    cal = _section(data, "calibration", source, True)
    if "file" not in cal:
        raise ConfigError(f"{source}: [calibration] file: missing")
    cal_checks: dict[str, Any] = {}
    for key, value in cal.items():
        if key == "file":
            continue
        if key not in _CALIBRATION_CHECKS:
            raise ConfigError(f"{source}: [calibration] {key}: unknown key")
        cal_checks[key] = _typed(value, _CALIBRATION_CHECKS[key], source, f"[calibration] {key}",
                                 allow_infinite=True)
    if cal_checks.get("max_step_db", 1.0) <= 0:
        raise ConfigError(f"{source}: [calibration] max_step_db: must be above 0 dB "
                          "(inf switches the check off)")
    cal_path = _resolve(_typed(cal["file"], str, source, "[calibration] file"), base)

    water = _section(data, "water", source, False)
    for key in water:
        if key != "temperature_c":
            raise ConfigError(f"{source}: [water] {key}: unknown key")
    temperature_c = _typed(water.get("temperature_c", 20.0), float, source,
                           "[water] temperature_c")
    if not 0.0 <= temperature_c <= 60.0:
        raise ConfigError(f"{source}: [water] temperature_c: {temperature_c} outside 0 to 60 C")

    sess = _section(data, "session", source, False)
    sess_values: dict[str, Any] = {}
    for key, value in sess.items():
        if key not in _SESSION_KEYS:
            raise ConfigError(f"{source}: [session] {key}: unknown key")
        sess_values[key] = _typed(value, _SESSION_KEYS[key], source, f"[session] {key}")
    folder = _resolve(sess_values.pop("folder", "sessions"), base)
    for key in ("commit_interval_s", "reconnect_give_up_s"):
        if sess_values.get(key, 1.0) <= 0:
            raise ConfigError(f"{source}: [session] {key}: must be above 0")
    if sess_values.get("queue_capacity", 1) < 1:
        raise ConfigError(f"{source}: [session] queue_capacity: must be at least 1")

    stage = None
    stage_table = _section(data, "stage", source, False)
    if "stage" in data:
        stage = StageConfig(**_serial(stage_table, "stage", source, base, {}),
                            limits=_stage_limits(stage_table, source))
    thermometer = None
    thermo_table = _section(data, "thermometer", source, False)
    if "thermometer" in data:
        thermometer = ThermometerConfig(**_serial(thermo_table, "thermometer", source, base,
                                                  _THERMOMETER_EXTRA))

    scan = None
    if "scan" in data:
        scan = plan_from_table(data["scan"], source=source, base_dir=base,
                               limits=stage.limits if stage is not None else {},
                               where="[scan] ")

    tables = copy.deepcopy(data)
    tables.setdefault("digitiser", {})["profile"] = dig_conn["profile"]
    if stage is not None:
        tables["stage"]["profile"] = stage.profile
    if thermometer is not None:
        tables["thermometer"]["profile"] = thermometer.profile
    if scan is not None and scan.points_source is not None:
        tables["scan"]["file"] = scan.points_source
    if gen is not None:
        tables["generator"]["profile"] = gen.profile
    tables["calibration"] = {"file": str(cal_path), **cal_checks}
    tables.setdefault("session", {})["folder"] = str(folder)

    return BenchConfig(
        source=source,
        digitiser=InstrumentConfig(**dig_conn),
        digitiser_table=dig_rest,
        trigger_timeout_s=trigger_timeout_s,
        generator=gen,
        calibration_path=cal_path,
        loading_table=dict(_section(data, "loading", source, False)),
        conversion_table=dict(_section(data, "conversion", source, False)),
        temperature_c=temperature_c,
        alerts_table=copy.deepcopy(_section(data, "alerts", source, False)),
        session_folder=folder,
        tables=tables,
        calibration_checks=cal_checks,
        stage=stage,
        thermometer=thermometer,
        scan=scan,
        **sess_values,
    )
