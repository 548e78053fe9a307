"""The alert rules' settings: names, defaults, units, and parsing of the ``[alerts]`` table.

:data:`RULES` is the single source of truth for every rule's default severity,
actions and thresholds; the table in :mod:`tankside.monitor.live.rules` documents it
(and a test keeps the two equal). :meth:`AlertConfig.from_table` turns the bench
file's ``[alerts]`` table into an :class:`AlertConfig`, naming the key of anything
it cannot use.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from enum import StrEnum
from types import MappingProxyType

from ..acoustics.presence import DEFAULT_EDGE_FRACTION, DEFAULT_FACTOR
from ..errors import ConfigError


class Severity(StrEnum):
    """How serious an alert is (the display orders and colours by it)."""

    INFO = "info"
    WARNING = "warning"
    CRITICAL = "critical"


class Action(StrEnum):
    """What a rule's firing does."""

    RECORD = "record"          # into the session file
    BELL = "bell"              # the terminal bell
    AUTO_RANGE = "auto-range"  # step the digitiser's range (clipping, range_under_use)
    SAFE_OFF = "safe-off"      # switch the generator output off before the next trace
    STOP = "stop"              # end the session (exit code of a rule stop)


class ParamKind(StrEnum):
    """The kind of value a threshold takes."""

    INT = "int"                        # a whole number
    FLOAT = "float"
    OPTIONAL_FLOAT = "optional_float"  # may be left unset (default None)
    WORDS = "words"                    # a list of words (a tuple of str)


SEVERITIES = tuple(Severity)
# A clipped trace's pressure is a floor on the true one: over_pressure counts it when
# that floor reaches (1 - CLIPPED_MARGIN) of the limit. 0.5 assumes the rails hide at
# most a factor of 2 of the peak (the signal at most twice the rail: about one step of
# a 1-2-5 range ladder); a deeper clip that still measures below half the limit is not
# caught. 1 counts every clipped trace as an over-pressure.
CLIPPED_MARGIN = 0.5
ACTIONS = tuple(Action)
# Only these rules say which way the vertical range should go.
AUTO_RANGE_RULES = ("clipping", "range_under_use")


@dataclass(frozen=True, kw_only=True)
class Param:
    """One threshold of a rule.

    Values must be ``> low`` (``>= low`` when ``low_inclusive``) and, if ``high`` is
    given, ``<= high``; ``unit`` is the unit of the value (``"1"`` for a ratio).
    """

    key: str
    kind: ParamKind
    default: float | int | tuple[str, ...] | None
    unit: str
    low: float
    low_inclusive: bool = False
    high: float | None = None
    meaning: str = ""

    def describe_range(self) -> str:
        low = f"{'>=' if self.low_inclusive else '>'} {self.low:g}"
        return low if self.high is None else f"{low} and <= {self.high:g}"


@dataclass(frozen=True)
class RuleSpec:
    """A rule's name, default severity and actions, and its thresholds."""

    name: str
    severity: Severity
    actions: tuple[Action, ...]
    params: tuple[Param, ...] = ()


RULES: MappingProxyType[str, RuleSpec] = MappingProxyType({spec.name: spec for spec in (
    RuleSpec("clipping", Severity.WARNING, (Action.RECORD, Action.BELL, Action.AUTO_RANGE), (
        Param(key="min_samples", kind=ParamKind.INT, default=1, unit="samples", low=1,
              low_inclusive=True,
              meaning="samples at either rail in one trace"),)),
    RuleSpec("over_pressure", Severity.CRITICAL, (Action.RECORD, Action.BELL, Action.SAFE_OFF), (
        Param(key="rated_max_pa", kind=ParamKind.FLOAT, default=1.0e7, unit="Pa", low=0.0,
              meaning="hydrophone's rated maximum pressure"),
        Param(key="limit_pa", kind=ParamKind.OPTIONAL_FLOAT, default=None, unit="Pa", low=0.0,
              meaning="optional user limit (the lower one applies)"),
        Param(key="clipped_margin", kind=ParamKind.FLOAT, default=CLIPPED_MARGIN, unit="1",
              low=0.0, low_inclusive=True, high=1.0,
              meaning=("share of the limit a clipped trace's peak may fall short of "
                       "and still count")))),
    RuleSpec("range_under_use", Severity.INFO, (Action.RECORD, Action.AUTO_RANGE), (
        Param(key="below_fraction", kind=ParamKind.FLOAT, default=0.3, unit="1", low=0.0, high=1.0,
              meaning="fraction of half the full-scale span"),
        Param(key="consecutive_traces", kind=ParamKind.INT, default=10, unit="traces", low=1,
              low_inclusive=True,
              meaning="under-used traces in a row before firing"))),
    RuleSpec("no_trigger", Severity.WARNING, (Action.RECORD, Action.BELL), (
        Param(key="after_s", kind=ParamKind.FLOAT, default=5.0, unit="s", low=0.0,
              meaning="time without a trigger"),)),
    RuleSpec("pr_drift", Severity.WARNING, (Action.RECORD, Action.BELL), (
        Param(key="max_change_percent", kind=ParamKind.FLOAT, default=10.0, unit="%", low=0.0,
              meaning="change of p_r relative to the first half"),
        Param(key="window_traces", kind=ParamKind.INT, default=20, unit="traces", low=2,
              low_inclusive=True,
              meaning="traces in the window (at one position)"))),
    RuleSpec("narrowband_fail", Severity.WARNING, (Action.RECORD,)),
    RuleSpec("doubtful_result", Severity.INFO, (Action.RECORD,), (
        Param(key="consecutive_traces", kind=ParamKind.INT, default=5, unit="traces", low=1,
              low_inclusive=True,
              meaning="traces in a row whose result carries a warning"),
        Param(key="ignore", kind=ParamKind.WORDS, default=("mi_not_derated",), unit="codes",
              low=0.0, meaning="warning codes that do not count"))),
    RuleSpec("conversion_failed", Severity.WARNING, (Action.RECORD,)),
    RuleSpec("no_pulse", Severity.INFO, (Action.RECORD,), (
        Param(key="noise_factor", kind=ParamKind.FLOAT, default=DEFAULT_FACTOR, unit="1", low=0.0,
              low_inclusive=True,
              meaning="peak over robust noise sigma that counts as a pulse"),
        Param(key="edge_fraction", kind=ParamKind.FLOAT, default=DEFAULT_EDGE_FRACTION, unit="1",
              low=0.0, high=0.5,
              meaning="share of the record at each end for the noise"))),
    RuleSpec("disk_space_low", Severity.WARNING, (Action.RECORD, Action.BELL), (
        Param(key="min_free_bytes", kind=ParamKind.INT, default=1_000_000_000, unit="bytes", low=0,
              low_inclusive=True,
              meaning="free space left on the session disk"),)),
    RuleSpec("falling_behind", Severity.WARNING, (Action.RECORD, Action.BELL), (
        Param(key="queue_fraction", kind=ParamKind.FLOAT, default=0.8, unit="1", low=0.0, high=1.0,
              meaning="share of the processing queue in use"),)),
    RuleSpec("store_lag", Severity.WARNING, (Action.RECORD,), (
        Param(key="max_lag_s", kind=ParamKind.FLOAT, default=5.0, unit="s", low=0.0,
              meaning="age of the oldest uncommitted trace"),)),
    RuleSpec("water_temperature", Severity.WARNING, (Action.RECORD, Action.BELL), (
        Param(key="band_c", kind=ParamKind.FLOAT, default=2.0, unit="degC", low=0.0,
              low_inclusive=True,
              meaning="half-width of the band around [water] temperature_c (0: no band check)"),
        Param(key="max_change_c", kind=ParamKind.FLOAT, default=1.0, unit="degC", low=0.0,
              low_inclusive=True,
              meaning="change from the session's first reading (0: no change check)"))),
)})

COMMON_KEYS = ("enabled", "severity", "actions", "repeat_after_s", "clear_after_traces")
# Observations a condition must stay clear before its rule re-arms (anti-flap hold).
DEFAULT_CLEAR_AFTER = 3


@dataclass(frozen=True)
class RuleConfig:
    """The settings of one rule after parsing.

    Attributes
    ----------
    name : str
    enabled : bool
    severity : Severity
    actions : tuple of Action
        In the order the bench file gives them.
    repeat_after_s : float
        0: fire once per episode; above 0: fire again every so many seconds while
        the condition stands.
    clear_after_traces : int
        Observations in a row (traces; ticks for the once-a-second rules) on which
        the condition must be clear before the rule re-arms and may fire again.
    params : mapping
        Threshold key -> value (units in the key name or in :data:`RULES`).
    """

    name: str
    enabled: bool
    severity: Severity
    actions: tuple[Action, ...]
    repeat_after_s: float = 0.0
    params: MappingProxyType = field(default_factory=lambda: MappingProxyType({}))
    clear_after_traces: int = DEFAULT_CLEAR_AFTER

    def as_dict(self) -> dict:
        out = {"enabled": self.enabled, "severity": str(self.severity),
               "actions": [str(a) for a in self.actions], "repeat_after_s": self.repeat_after_s,
               "clear_after_traces": self.clear_after_traces}
        out.update({k: list(v) if isinstance(v, tuple) else v
                    for k, v in self.params.items() if v is not None})
        return out


@dataclass(frozen=True)
class AlertConfig:
    """Settings of every rule, keyed by rule name (all rules always present)."""

    rules: MappingProxyType

    @classmethod
    def defaults(cls) -> AlertConfig:
        return cls.from_table({})

    @classmethod
    def from_table(cls, table: dict | None) -> AlertConfig:
        """Parse the bench file's ``[alerts]`` table.

        Parameters
        ----------
        table : dict or None
            ``{rule_name: {key: value}}`` as read by :mod:`tomllib`; missing rules
            and keys take the defaults of :data:`RULES`.

        Raises
        ------
        ConfigError
            Unknown rule or key, or a bad value; the message starts with the key,
            e.g. ``"clipping.min_samples: ..."``, also kept in ``err.key``.
        """
        table = {} if table is None else table
        if not isinstance(table, dict):
            raise _error("alerts", "expected a table of rules")
        for name in table:
            if name not in RULES:
                raise _error(name, f"unknown alert rule; known rules: {', '.join(RULES)}")
        rules = {name: _parse_rule(spec, table.get(name, {})) for name, spec in RULES.items()}
        return cls(rules=MappingProxyType(rules))

    def __getitem__(self, name: str) -> RuleConfig:
        return self.rules[name]

    def as_dict(self) -> dict:
        """JSON- and TOML-able form; ``from_table(as_dict())`` gives an equal config."""
        return {name: rule.as_dict() for name, rule in self.rules.items()}


def protection_warnings(config: AlertConfig) -> tuple[str, ...]:
    """What the settings switch off of the hydrophone's protection, in operator words.

    Empty when ``over_pressure`` is enabled and its actions include ``safe-off``. Such
    settings are accepted (a bench may have no drive to protect), but said aloud: the
    commands print each line and the session records them in its metadata
    (``protection_warnings``).
    """
    rule = config["over_pressure"]
    if not rule.enabled:
        return ("over_pressure is disabled (over_pressure.enabled = false): no pressure, "
                "however high, raises an alert or switches the drive off",)
    if not rule.actions:
        return ("over_pressure has no actions (over_pressure.actions = []): an over-pressure "
                "is shown but neither recorded nor followed by a safe-off",)
    if Action.SAFE_OFF not in rule.actions:
        listed = ", ".join(f'"{a}"' for a in rule.actions)
        return (f"over_pressure does not switch the drive off (over_pressure.actions = "
                f"[{listed}], without \"safe-off\")",)
    return ()


def _error(key: str, problem: str) -> ConfigError:
    err = ConfigError(f"{key}: {problem}")
    err.key = key
    return err


def _parse_rule(spec: RuleSpec, table) -> RuleConfig:
    if not isinstance(table, dict):
        raise _error(spec.name, "expected a table ([alerts." + spec.name + "])")
    params = {p.key: p for p in spec.params}
    for key in table:
        if key not in params and key not in COMMON_KEYS:
            known = ", ".join((*COMMON_KEYS, *params))
            raise _error(f"{spec.name}.{key}", f"unknown key; known keys: {known}")

    enabled = table.get("enabled", True)
    if not isinstance(enabled, bool):
        raise _error(f"{spec.name}.enabled", f"expected true or false, got {enabled!r}")
    severity = table.get("severity", spec.severity)
    if not isinstance(severity, str) or severity not in SEVERITIES:
        raise _error(f"{spec.name}.severity",
                     f"expected one of {', '.join(SEVERITIES)}, got {severity!r}")
    actions = _parse_actions(spec.name, table.get("actions", list(spec.actions)))
    repeat = _parse_number(f"{spec.name}.repeat_after_s", table.get("repeat_after_s", 0.0),
                           Param(key="repeat_after_s", kind=ParamKind.FLOAT, default=0.0, unit="s",
                                 low=0.0, low_inclusive=True))
    clear_after = _parse_number(f"{spec.name}.clear_after_traces",
                                table.get("clear_after_traces", DEFAULT_CLEAR_AFTER),
                                Param(key="clear_after_traces", kind=ParamKind.INT,
                                      default=DEFAULT_CLEAR_AFTER, unit="traces", low=1,
                                      low_inclusive=True))
    values = {p.key: (_parse_value(f"{spec.name}.{p.key}", table[p.key], p)
                      if p.key in table else p.default) for p in spec.params}
    return RuleConfig(name=spec.name, enabled=enabled, severity=Severity(severity),
                      actions=actions,
                      repeat_after_s=float(repeat), params=MappingProxyType(values),
                      clear_after_traces=int(clear_after))


def _parse_actions(rule: str, value) -> tuple[Action, ...]:
    key = f"{rule}.actions"
    if not isinstance(value, list | tuple):
        raise _error(key, f"expected a list such as [\"record\", \"bell\"], got {value!r}")
    seen: list[Action] = []
    for action in value:
        if not isinstance(action, str) or action not in ACTIONS:
            raise _error(key, f"unknown action {action!r}; actions: {', '.join(ACTIONS)}")
        if action in seen:
            raise _error(key, f"action {action!r} given twice")
        if action == "auto-range" and rule not in AUTO_RANGE_RULES:
            raise _error(key, "auto-range is only an action of "
                              f"{' and '.join(AUTO_RANGE_RULES)}")
        seen.append(Action(action))
    return tuple(seen)


def _parse_value(key: str, value, param: Param):
    if param.kind is not ParamKind.WORDS:
        return _parse_number(key, value, param)
    if not isinstance(value, list | tuple) or not all(isinstance(w, str) for w in value):
        raise _error(key, f"expected a list of words such as [\"mi_not_derated\"], "
                          f"got {value!r}")
    return tuple(value)


def _parse_number(key: str, value, param: Param):
    whole = param.kind is ParamKind.INT
    if isinstance(value, bool) or not isinstance(value, int | float):
        raise _error(key, f"expected a {'whole ' if whole else ''}number in "
                          f"{param.unit}, got {value!r}")
    if whole and not isinstance(value, int):
        if not (math.isfinite(value) and float(value).is_integer()):
            raise _error(key, f"expected a whole number of {param.unit}, got {value!r}")
        value = int(value)
    if not math.isfinite(value):
        raise _error(key, f"expected a finite number, got {value!r}")
    below = value < param.low if param.low_inclusive else value <= param.low
    if below or (param.high is not None and value > param.high):
        raise _error(key, f"must be {param.describe_range()} ({param.unit}), got {value!r}")
    return value if whole else float(value)
