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
from types import MappingProxyType

from ..acoustics.presence import DEFAULT_EDGE_FRACTION, DEFAULT_FACTOR
from ..errors import ConfigError

SEVERITIES = ("info", "warning", "critical")
ACTIONS = ("record", "bell", "auto-range", "safe-off", "stop")
# Only these rules say which way the vertical range should go.
AUTO_RANGE_RULES = ("clipping", "range_under_use")


@dataclass(frozen=True)
class Param:
    """One threshold of a rule.

    ``kind`` is "int" (whole number), "float" or "optional_float" (may be left
    unset: default None). Values must be ``> low`` (``>= low`` when
    ``low_inclusive``) and, if ``high`` is given, ``<= high``.
    """

    key: str
    kind: str
    default: float | int | None
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
    name: str
    severity: str
    actions: tuple[str, ...]
    params: tuple[Param, ...] = ()


RULES: MappingProxyType[str, RuleSpec] = MappingProxyType({spec.name: spec for spec in (
    RuleSpec("clipping", "warning", ("record", "bell", "auto-range"), (
        Param("min_samples", "int", 1, "samples", 1, True,
              meaning="samples at either rail in one trace"),)),
    RuleSpec("over_pressure", "critical", ("record", "bell", "safe-off"), (
        Param("rated_max_pa", "float", 1.0e7, "Pa", 0.0,
              meaning="hydrophone's rated maximum pressure"),
        Param("limit_pa", "optional_float", None, "Pa", 0.0,
              meaning="optional user limit (the lower one applies)"))),
    RuleSpec("range_under_use", "info", ("record", "auto-range"), (
        Param("below_fraction", "float", 0.3, "1", 0.0, high=1.0,
              meaning="fraction of half the full-scale span"),
        Param("consecutive_traces", "int", 10, "traces", 1, True,
              meaning="under-used traces in a row before firing"))),
    RuleSpec("no_trigger", "warning", ("record", "bell"), (
        Param("after_s", "float", 5.0, "s", 0.0, meaning="time without a trigger"),)),
    RuleSpec("pr_drift", "warning", ("record", "bell"), (
        Param("max_change_percent", "float", 10.0, "%", 0.0,
              meaning="change of p_r relative to the first half"),
        Param("window_traces", "int", 20, "traces", 2, True,
              meaning="traces in the window (at one position)"))),
    RuleSpec("narrowband_fail", "warning", ("record",)),
    RuleSpec("conversion_failed", "warning", ("record",)),
    RuleSpec("no_pulse", "info", ("record",), (
        Param("noise_factor", "float", DEFAULT_FACTOR, "1", 0.0, True,
              meaning="peak over robust noise sigma that counts as a pulse"),
        Param("edge_fraction", "float", DEFAULT_EDGE_FRACTION, "1", 0.0, high=0.5,
              meaning="share of the record at each end for the noise"))),
    RuleSpec("disk_space_low", "warning", ("record", "bell"), (
        Param("min_free_bytes", "int", 1_000_000_000, "bytes", 0, True,
              meaning="free space left on the session disk"),)),
    RuleSpec("falling_behind", "warning", ("record", "bell"), (
        Param("queue_fraction", "float", 0.8, "1", 0.0, high=1.0,
              meaning="share of the processing queue in use"),)),
    RuleSpec("store_lag", "warning", ("record",), (
        Param("max_lag_s", "float", 5.0, "s", 0.0,
              meaning="age of the oldest uncommitted trace"),)),
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
    severity : str
        "info", "warning" or "critical".
    actions : tuple of str
        A subset of "record", "bell", "auto-range", "safe-off", "stop", in order.
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
    severity: str
    actions: tuple[str, ...]
    repeat_after_s: float = 0.0
    params: MappingProxyType = field(default_factory=lambda: MappingProxyType({}))
    clear_after_traces: int = DEFAULT_CLEAR_AFTER

    def as_dict(self) -> dict:
        out = {"enabled": self.enabled, "severity": self.severity,
               "actions": list(self.actions), "repeat_after_s": self.repeat_after_s,
               "clear_after_traces": self.clear_after_traces}
        out.update({k: v for k, v in self.params.items() if v is not None})
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
    if severity not in SEVERITIES:
        raise _error(f"{spec.name}.severity",
                     f"expected one of {', '.join(SEVERITIES)}, got {severity!r}")
    actions = _parse_actions(spec.name, table.get("actions", list(spec.actions)))
    repeat = _parse_number(f"{spec.name}.repeat_after_s", table.get("repeat_after_s", 0.0),
                           Param("repeat_after_s", "float", 0.0, "s", 0.0, True))
    clear_after = _parse_number(f"{spec.name}.clear_after_traces",
                                table.get("clear_after_traces", DEFAULT_CLEAR_AFTER),
                                Param("clear_after_traces", "int", DEFAULT_CLEAR_AFTER,
                                      "traces", 1, True))
    values = {p.key: (_parse_number(f"{spec.name}.{p.key}", table[p.key], p)
                      if p.key in table else p.default) for p in spec.params}
    return RuleConfig(name=spec.name, enabled=enabled, severity=severity, actions=actions,
                      repeat_after_s=float(repeat), params=MappingProxyType(values),
                      clear_after_traces=int(clear_after))


def _parse_actions(rule: str, value) -> tuple[str, ...]:
    key = f"{rule}.actions"
    if not isinstance(value, list | tuple):
        raise _error(key, f"expected a list such as [\"record\", \"bell\"], got {value!r}")
    seen: list[str] = []
    for action in value:
        if action not in ACTIONS:
            raise _error(key, f"unknown action {action!r}; actions: {', '.join(ACTIONS)}")
        if action in seen:
            raise _error(key, f"action {action!r} given twice")
        if action == "auto-range" and rule not in AUTO_RANGE_RULES:
            raise _error(key, "auto-range is only an action of "
                              f"{' and '.join(AUTO_RANGE_RULES)}")
        seen.append(action)
    return tuple(seen)


def _parse_number(key: str, value, param: Param):
    whole = param.kind == "int"
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
