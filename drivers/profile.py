"""Instrument profiles: TOML files that map abstract operations to command templates.

A profile is validated completely when it is loaded. Every problem raises
:class:`tankside.drivers.errors.ProfileError` naming the file and the key, so a user
adding an instrument learns what to fix without reading code. The schema is described
in ``drivers/profiles/generic-scpi-digitiser.toml``.

Command text: every template, every word a profile gives for a placeholder (the output
on/off words), and every value filled into a template at run time is one command of
printable ASCII, without ``;`` (the IEEE 488.2 separator that would chain a second
command the session knows nothing about) or a line break (which would end the command
early and send the rest as another). :func:`command_text_problem` is that check;
:meth:`Profile.command` applies it to the values it fills in, so a setting that got past
the bench file still never reaches the instrument. The one key that holds a list,
``[commands] setup``, is checked line by line: each line is one command, sent as written.
"""

from __future__ import annotations

import math
import string
import tomllib
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from .errors import ProfileError, SettingError

PROFILE_DIR = Path(__file__).with_name("profiles")

KINDS = ("digitiser", "generator")
DATA_FORMATS = ("int8", "int16", "float32")
BYTE_ORDERS = ("little", "big")
# What an instrument's range setting means: the full-scale span (peak to peak), the peak
# (half the span, the "+/- V" of many front ends), or the volts of one of ``divisions``
# screen divisions that together make the span.
RANGE_KINDS = ("span", "peak", "per_division")

# Command key -> placeholders it may use. Keys named query_* read a setting back; they
# are optional and let `probe` restore what it changes.
_DIGITISER_COMMANDS = {
    "identify": (), "reset": (),
    "set_record_length": ("points",), "set_sample_rate": ("rate_hz",),
    "set_range": ("channel", "range_v"), "set_offset": ("channel", "offset_v"),
    "set_coupling": ("channel", "coupling"), "set_impedance": ("channel", "impedance_ohm"),
    "set_trigger_source": ("source",), "set_trigger_level": ("level_v", "channel"),
    "set_trigger_slope": ("slope",), "set_trigger_delay": ("delay_s",),
    "set_averages": ("count",),
    "arm_single": ("channel",), "acquisition_done": ("channel",), "wait_complete": (),
    "fetch_waveform": ("channel",), "get_time_step": ("channel",),
    "get_time_origin": ("channel",), "get_volts_per_code": ("channel",),
    "get_offset": ("channel",), "get_error": (),
    "query_record_length": (), "query_sample_rate": (), "query_range": ("channel",),
    "query_offset": ("channel",), "query_coupling": ("channel",),
    "query_impedance": ("channel",), "query_trigger_source": (),
    "query_trigger_level": ("channel",), "query_trigger_slope": (),
    "query_trigger_delay": (), "query_averages": (),
}
_DIGITISER_REQUIRED = ("identify", "set_record_length", "set_range",
                       "arm_single", "fetch_waveform", "get_time_step", "get_volts_per_code")

_GENERATOR_COMMANDS = {
    "identify": (), "reset": (), "get_error": (),
    "set_output": ("state",), "get_output": (),
    "set_amplitude": ("amplitude_vpp",), "get_amplitude": (),
    "set_frequency": ("frequency_hz",), "get_frequency": (),
    "set_burst_cycles": ("cycles",), "get_burst_cycles": (),
    "set_burst_period": ("period_s",), "get_burst_period": (),
}
_GENERATOR_REQUIRED = ("identify", "set_output", "get_output", "set_amplitude",
                       "get_amplitude", "set_frequency", "set_burst_cycles", "set_burst_period")

_SAMPLE_VALUES = {"points": 1000, "rate_hz": 1e8, "channel": 1, "range_v": 1.0,
                  "offset_v": 0.0, "coupling": "DC", "impedance_ohm": 50.0, "source": "EXT",
                  "level_v": 0.5, "slope": "POS", "delay_s": 3e-5, "count": 1, "state": "ON",
                  "amplitude_vpp": 1.0, "frequency_hz": 1e6, "cycles": 10, "period_s": 0.05,
                  # stage profiles (drivers/stage.py)
                  "axis": "1", "counts": 1000, "counts_per_s": 1000}

_TABLES = {"digitiser": ("instrument", "transport", "commands", "data", "ranges"),
           "generator": ("instrument", "transport", "commands", "values")}
_TRANSPORT_KEYS = ("read_termination", "write_termination", "timeout_s")


@dataclass(frozen=True)
class Profile:
    """A validated instrument profile.

    Attributes
    ----------
    source : str
        The file it came from.
    kind : {"digitiser", "generator"}
    commands : dict[str, str]
        Command templates by key, with ``{placeholder}`` fields.
    setup : tuple of str
        ``[commands] setup``: command lines sent as written, in order, once after
        connecting and again after every reconnect, each followed by the error-queue
        check.
    data_format, byte_order : str
        Waveform sample format and byte order (digitisers).
    code_min, code_max : float
        The ADC rails (digitisers).
    ranges_v : tuple of float
        Allowed full-scale spans, peak to peak, V, ascending (digitisers).
    range_kind : {"span", "peak", "per_division"}
        What the instrument's range value is (:data:`RANGE_KINDS`); the driver converts
        with :meth:`instrument_range` and :meth:`span_of`.
    range_divisions : int
        Divisions across the span (``per_division`` only).
    values : dict
        Generator reply words: ``output_on``, ``output_off``, ``output_on_replies``,
        ``output_off_replies``.
    """

    source: str
    kind: str
    description: str = ""
    commands: dict = field(default_factory=dict)
    setup: tuple = ()
    read_termination: str = "\n"
    write_termination: str = "\n"
    timeout_s: float = 5.0
    data_format: str = "int16"
    byte_order: str = "little"
    code_min: float = -32768
    code_max: float = 32767
    ranges_v: tuple = ()
    range_kind: str = "span"
    range_divisions: int = 1
    values: dict = field(default_factory=dict)

    def has(self, key: str) -> bool:
        """True when the profile defines command ``key``."""
        return key in self.commands

    def command(self, key: str, **fields) -> str:
        """Command ``key`` with its placeholders filled.

        Raises
        ------
        ProfileError
            If the profile does not define ``key``.
        SettingError
            If a value would not be safe command text (:func:`command_text_problem`).
        """
        if key not in self.commands:
            raise ProfileError(f"{self.source}: [commands] {key}: not defined in this profile")
        for name, value in fields.items():
            problem = command_text_problem(str(value))
            if problem is not None:
                raise SettingError(f"{self.source}: [commands] {key}: {{{name}}} = {value!r} "
                                   f"{problem}; nothing was sent")
        return self.commands[key].format(**fields)

    def instrument_range(self, span_v: float) -> float:
        """The value ``set_range`` takes for a full-scale span of ``span_v`` (p-p, V)."""
        if self.range_kind == "peak":
            return span_v / 2.0
        if self.range_kind == "per_division":
            return span_v / self.range_divisions
        return span_v

    def span_of(self, instrument_value: float) -> float:
        """The full-scale span (p-p, V) of a range value as the instrument states it."""
        if self.range_kind == "peak":
            return instrument_value * 2.0
        if self.range_kind == "per_division":
            return instrument_value * self.range_divisions
        return instrument_value

    @property
    def dtype(self) -> np.dtype:
        """numpy dtype of the samples as sent (with their byte order)."""
        return np.dtype(self.data_format).newbyteorder("<" if self.byte_order == "little" else ">")


def command_text_problem(text: str) -> str | None:
    """Why ``text`` cannot be (part of) one command sent to an instrument, or None.

    Allowed: printable ASCII (space to ``~``) except ``;``.
    """
    if text.isascii() and text.isprintable() and ";" not in text:
        return None     # the common case, decided without a loop in Python
    for ch in text:
        if ch == ";":
            return "contains ';', which would chain another command"
        if ch in "\r\n":
            return "contains a line break, which would end the command early"
        if not " " <= ch <= "~":
            return f"contains {ch!r}: only printable ASCII is sent to an instrument"
    return None


# The checks every profile loader shares (this module's, and drivers/line_profile.py's
# for stages and thermometers); each error names the profile file and the key.

def fail(source: str, key: str, problem: str) -> ProfileError:
    return ProfileError(f"{source}: {key}: {problem}")


def check_keys(source: str, table: str, got: dict, allowed) -> None:
    """Refuse a key of ``[table]`` (the top level when ``table`` is "") not in ``allowed``."""
    for key in got:
        if key not in allowed:
            raise fail(source, f"[{table}] {key}" if table else key,
                       f"unknown key; expected one of {', '.join(sorted(allowed))}")


def check_template(source: str, key: str, template, allowed: tuple) -> None:
    """Refuse a ``[commands]`` template that is not one command of plain text, names a
    placeholder outside ``allowed``, or cannot be filled (ProfileError naming ``key``)."""
    where = f"[commands] {key}"
    if not isinstance(template, str) or not template.strip():
        raise fail(source, where, "expected a non-empty string")
    problem = command_text_problem(template)
    if problem is not None:
        raise fail(source, where, f"template {template!r} {problem}")
    try:
        names = [name for _, name, _, _ in string.Formatter().parse(template) if name is not None]
    except ValueError as err:
        raise fail(source, where, f"bad template {template!r}: {err}") from err
    for name in names:
        if name not in allowed:
            allowed_text = ", ".join("{" + a + "}" for a in allowed) or "none"
            raise fail(source, where, f"unknown placeholder {{{name}}}; allowed: {allowed_text}")
    try:
        template.format(**_SAMPLE_VALUES)
    except (ValueError, KeyError, IndexError) as err:
        raise fail(source, where, f"template {template!r} cannot be filled: {err}") from err


def number(source: str, key: str, value, *, positive: bool = False) -> float:
    if isinstance(value, bool) or not isinstance(value, int | float) or not math.isfinite(value):
        raise fail(source, key, f"expected a finite number, got {value!r}")
    if positive and not value > 0:
        raise fail(source, key, f"expected a positive number, got {value!r}")
    return float(value)


def _choice(source: str, key: str, value, choices) -> str:
    if value not in choices:
        raise fail(source, key, f"expected one of {', '.join(choices)}, got {value!r}")
    return value


def _strings(source: str, key: str, value) -> tuple:
    if not isinstance(value, list) or not value or not all(isinstance(v, str) for v in value):
        raise fail(source, key, f"expected a non-empty list of strings, got {value!r}")
    return tuple(value)


def parse_profile(text: str, source: str = "<text>") -> Profile:
    """Validate profile TOML ``text``; ``source`` names it in error messages."""
    try:
        doc = tomllib.loads(text)
    except tomllib.TOMLDecodeError as err:
        raise ProfileError(f"{source}: not valid TOML: {err}") from err
    inst = doc.get("instrument")
    if not isinstance(inst, dict):
        raise fail(source, "[instrument]", "missing table")
    check_keys(source, "instrument", inst, ("kind", "description"))
    kind = _choice(source, "[instrument] kind", inst.get("kind"), KINDS)
    description = inst.get("description", "")
    if not isinstance(description, str):
        raise fail(source, "[instrument] description", "expected a string")
    check_keys(source, "top level", doc, _TABLES[kind])
    for table in doc:
        if not isinstance(doc[table], dict):
            raise fail(source, table, "expected a table")

    out: dict = {"source": source, "kind": kind, "description": description}
    transport = doc.get("transport", {})
    check_keys(source, "transport", transport, _TRANSPORT_KEYS)
    for key in ("read_termination", "write_termination"):
        if key in transport:
            value = transport[key]
            if not isinstance(value, str) or not value.isascii():
                raise fail(source, f"[transport] {key}",
                            f"expected an ASCII string, got {value!r}")
            out[key] = value
    if "timeout_s" in transport:
        out["timeout_s"] = number(source, "[transport] timeout_s", transport["timeout_s"],
                                   positive=True)

    allowed, required = ((_DIGITISER_COMMANDS, _DIGITISER_REQUIRED) if kind == "digitiser"
                         else (_GENERATOR_COMMANDS, _GENERATOR_REQUIRED))
    commands = doc.get("commands")
    if not isinstance(commands, dict):
        raise fail(source, "[commands]", "missing table")
    commands = dict(commands)
    out["setup"] = _parse_setup(source, commands.pop("setup", []))
    check_keys(source, "commands", commands, (*allowed, "setup"))
    for key in required:
        if key not in commands:
            raise fail(source, f"[commands] {key}", "missing (required)")
    for key, template in commands.items():
        check_template(source, key, template, allowed[key])
    out["commands"] = commands

    if kind == "digitiser":
        if "acquisition_done" not in commands and "wait_complete" not in commands:
            raise fail(source, "[commands] acquisition_done",
                        "missing: define acquisition_done or wait_complete")
        out.update(_parse_data(source, doc))
        out.update(_parse_ranges(source, doc))
    else:
        out["values"] = _parse_values(source, doc)
    return Profile(**out)


def _parse_setup(source: str, lines) -> tuple:
    """``[commands] setup``: a list of whole command lines, each checked as command text."""
    where = "[commands] setup"
    if not isinstance(lines, list):
        raise fail(source, where, f"expected a list of command lines, got {lines!r}")
    for n, line in enumerate(lines, start=1):
        if not isinstance(line, str) or not line.strip():
            raise fail(source, f"{where} line {n}", f"expected a non-empty string, got {line!r}")
        problem = command_text_problem(line)
        if problem is not None:
            raise fail(source, f"{where} line {n}", f"{line!r} {problem}")
    return tuple(lines)


def _parse_data(source: str, doc: dict) -> dict:
    data = doc.get("data")
    if not isinstance(data, dict):
        raise fail(source, "[data]", "missing table")
    check_keys(source, "data", data, ("format", "byte_order", "code_min", "code_max"))
    for key in ("format", "code_min", "code_max"):
        if key not in data:
            raise fail(source, f"[data] {key}", "missing (required)")
    fmt = _choice(source, "[data] format", data["format"], DATA_FORMATS)
    order = _choice(source, "[data] byte_order", data.get("byte_order", "little"), BYTE_ORDERS)
    lo = number(source, "[data] code_min", data["code_min"])
    hi = number(source, "[data] code_max", data["code_max"])
    if not lo < hi:
        raise fail(source, "[data] code_max", f"must exceed code_min ({lo:g}), got {hi:g}")
    if fmt != "float32":
        info = np.iinfo(fmt)
        if lo < info.min or hi > info.max or lo != int(lo) or hi != int(hi):
            raise fail(source, "[data] code_min",
                        f"rails {lo:g}..{hi:g} are not integers within {fmt} "
                        f"({info.min}..{info.max})")
    return {"data_format": fmt, "byte_order": order, "code_min": lo, "code_max": hi}


def _parse_ranges(source: str, doc: dict) -> dict:
    ranges = doc.get("ranges")
    if not isinstance(ranges, dict):
        raise fail(source, "[ranges]", "missing table")
    check_keys(source, "ranges", ranges, ("values_v", "kind", "divisions"))
    kind = _choice(source, "[ranges] kind", ranges.get("kind", "span"), RANGE_KINDS)
    divisions = 1
    if kind == "per_division":
        given = ranges.get("divisions")
        if isinstance(given, bool) or not isinstance(given, int) or given < 1:
            raise fail(source, "[ranges] divisions",
                        f"kind = \"per_division\" needs a whole number of divisions >= 1 "
                        f"across the span, got {given!r}")
        divisions = given
    elif "divisions" in ranges:
        raise fail(source, "[ranges] divisions",
                    f"only used with kind = \"per_division\" (kind is {kind!r})")
    values = ranges.get("values_v")
    if not isinstance(values, list) or not values:
        raise fail(source, "[ranges] values_v", "expected a non-empty list of spans in V")
    spans = tuple(number(source, "[ranges] values_v", v, positive=True) for v in values)
    if any(b <= a for a, b in zip(spans, spans[1:], strict=False)):
        raise fail(source, "[ranges] values_v", f"must be strictly ascending, got {list(spans)}")
    return {"ranges_v": spans, "range_kind": kind, "range_divisions": divisions}


def _parse_values(source: str, doc: dict) -> dict:
    values = doc.get("values", {})
    keys = ("output_on", "output_off", "output_on_replies", "output_off_replies")
    check_keys(source, "values", values, keys)
    out = {"output_on": "ON", "output_off": "OFF", "output_on_replies": ("1", "ON"),
           "output_off_replies": ("0", "OFF")}
    for key in ("output_on", "output_off"):
        if key in values:
            if not isinstance(values[key], str) or not values[key]:
                raise fail(source, f"[values] {key}", "expected a non-empty string")
            problem = command_text_problem(values[key])
            if problem is not None:
                raise fail(source, f"[values] {key}", f"{values[key]!r} {problem}")
            out[key] = values[key]
    for key in ("output_on_replies", "output_off_replies"):
        if key in values:
            out[key] = _strings(source, f"[values] {key}", values[key])
    overlap = {v.upper() for v in out["output_on_replies"]} & {
        v.upper() for v in out["output_off_replies"]}
    if overlap:
        raise fail(source, "[values] output_off_replies",
                    f"words both on and off: {sorted(overlap)}")
    return out


def builtin_profiles() -> list[str]:
    """Names of the profiles shipped in drivers/profiles/."""
    return sorted(p.stem for p in PROFILE_DIR.glob("*.toml"))


def load_profile(path_or_name: str | Path) -> Profile:
    """Load and validate a profile from a file path, or a built-in one by name.

    A string without a path separator or ``.toml`` suffix that is not an existing
    file is looked up among :func:`builtin_profiles`.
    """
    path = Path(path_or_name)
    if not path.is_file():
        text = str(path_or_name)
        if "/" not in text and "\\" not in text:
            candidate = PROFILE_DIR / (text if text.endswith(".toml") else text + ".toml")
            if candidate.is_file():
                path = candidate
        if not path.is_file():
            names = ", ".join(builtin_profiles()) or "none"
            raise ProfileError(f"{path_or_name}: no such profile file, and no built-in "
                               f"profile of that name (built-in: {names})")
    try:
        text = path.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as err:
        raise ProfileError(f"{path}: cannot read: {err}") from err
    return parse_profile(text, source=str(path))
