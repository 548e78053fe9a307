"""Alert rules: from per-trace and once-a-second observations to firings with actions.

Pure logic: no threads, no I/O, no clocks. Time arrives in the observations
(``TraceObservation.time_s``, ``TickObservation.now_s``); the live pipeline builds
the observations, calls :meth:`RuleEngine.on_trace` and :meth:`RuleEngine.on_tick`,
and carries out the actions of each :class:`Firing`.

Every rule, its thresholds with units and defaults, and the bench-file layout of
``[alerts]`` are tabled in the README ("Alerts"); :data:`RULES` in
:mod:`tankside.monitor.live.rule_specs` is the single source of those defaults (a test
keeps the README's tables equal to it). Every threshold is inclusive: a rule fires when
its value *reaches* the threshold. The default ``rated_max_pa`` is a placeholder of the
order of a needle hydrophone's rating (common practice); set it from the hydrophone's
data sheet.

Latching
--------
A rule fires when its condition starts, then stays quiet while the condition
stands, and re-arms when it has been clear for ``clear_after_traces`` observations
in a row (or fires again after ``repeat_after_s``): a condition that flickers on and
off from one trace to the next raises one alert, not one per flicker. A
change of vertical range re-arms clipping and range_under_use (the condition on a
new range is a new one, so auto-range can take the next step); a change of
position or of vertical range restarts the p_r drift window, and clipped traces are
left out of it (their p_r is a floor, not a measurement). For the same reason
over_pressure counts a clipped trace whose pressure comes within ``clipped_margin``
of the limit (see :data:`~tankside.monitor.live.rule_specs.CLIPPED_MARGIN`), whether or
not auto-range could still step the range up. A rule that cannot be evaluated on a trace
(for example no result because the conversion failed) keeps its state.

No pulse, drive off
-------------------
A trace with no pulse (see :mod:`tankside.monitor.acoustics.presence`; decided by
:func:`observation_from_trace` with the no_pulse thresholds), or one acquired while
the generator output is known to be off, is noise: range_under_use, pr_drift,
narrowband_fail and conversion_failed keep their state and do not fire on it, its
p_r stays out of the drift window and it does not count as an under-used trace (so
auto-range does not step down on noise). When the pulse is back the drift window
starts afresh. clipping, over_pressure, no_trigger and the once-a-second rules stay
live. no_pulse itself fires once when the pulse goes and re-arms when it is back.
"""

from __future__ import annotations

import math
from collections import deque
from dataclasses import dataclass, field

import numpy as np

from ..acoustics.presence import (
    DEFAULT_EDGE_FRACTION,
    DEFAULT_FACTOR,
    pulse_presence,
)
from ..acoustics.settings import Method
from .rule_specs import (
    AUTO_RANGE_RULES,
    RULES,
    SEVERITIES,
    AlertConfig,
    RuleConfig,
)

__all__ = [
    "AUTO_RANGE_RULES",
    "RULES",
    "SEVERITIES",
    "AlertConfig",
    "Firing",
    "RuleConfig",
    "RuleEngine",
    "TickObservation",
    "TraceObservation",
    "observation_from_trace",
]

_SEVERITY_ORDER = {"critical": 0, "warning": 1, "info": 2}


@dataclass(frozen=True)
class TraceObservation:
    """What the rules see of one trace.

    Attributes
    ----------
    seq : int
        Sequence number of the trace.
    time_s : float
        Acquisition time, s (any fixed origin; the pipeline uses the Unix epoch).
    clipped_low, clipped_high : int
        Samples at the lower and upper ADC rail.
    range_v : float
        Vertical range in use (full-scale span, peak to peak), V.
    fraction_of_full_scale : float
        Largest distance from mid-scale over half the full scale, both from the volts
        per code and the rails (:meth:`RawTrace.fraction_of_full_scale`): 1 means the
        signal reaches a rail.
    result : dict or None
        ``TraceResult.flat()``, or None when the conversion failed.
    error : str or None
        Why the conversion failed.
    method_in_use : Method
        Conversion method configured.
    position : tuple or None
        Stage position, or None without a stage (treated as one fixed position).
    pulse_present : bool
        The trace holds a pulse above its noise (see
        :mod:`tankside.monitor.acoustics.presence`).
    drive_on : bool or None
        Generator output state when the trace was acquired; None when unknown
        (no generator, or it did not answer).
    peak_to_noise : float
        Peak of the trace from its median over the robust noise sigma (NaN if not
        computed).
    warning_codes : tuple of str
        The codes of the result's warnings (``()`` when none or no result).
    """

    seq: int
    time_s: float
    clipped_low: int
    clipped_high: int
    range_v: float
    fraction_of_full_scale: float
    result: dict | None = None
    error: str | None = None
    method_in_use: str = Method.AUTO
    position: tuple | None = None
    pulse_present: bool = True
    drive_on: bool | None = None
    peak_to_noise: float = float("nan")
    warning_codes: tuple[str, ...] = ()

    @property
    def quiet(self) -> bool:
        """No pulse to judge: none in the trace, or the generator output is off."""
        return not self.pulse_present or self.drive_on is False


@dataclass(frozen=True)
class TickObservation:
    """What the rules see once a second.

    Attributes
    ----------
    now_s : float
        Current time, s (same origin as ``TraceObservation.time_s``).
    since_trigger_s : float or None
        Seconds since the last trigger (or since the start before the first one);
        None when unknown.
    queue_depth, queue_capacity : int
        Traces waiting for processing, and the bound of that queue (0: unbounded).
    disk_free_bytes : int or None
        Free space on the disk holding the session file; None when unknown.
    store_lag_s : float
        Age of the oldest trace not yet committed to the store, s (0 when none).
    water_reading_c : float or None
        The thermometer's latest reading when it is fresh enough to be used, degC; None
        without a thermometer or when the reading is too old.
    """

    now_s: float
    since_trigger_s: float | None = None
    queue_depth: int = 0
    queue_capacity: int = 0
    disk_free_bytes: int | None = None
    store_lag_s: float = 0.0
    water_reading_c: float | None = None


@dataclass(frozen=True)
class Firing:
    """One alert raised by a rule.

    Attributes
    ----------
    rule : str
        Rule name (a key of :data:`RULES`).
    severity : str
        "info", "warning" or "critical".
    message : str
        Operator wording, with values and units.
    actions : tuple of str
        What the pipeline should do, in order.
    seq : int or None
        The trace that raised it (None for rules checked on the tick).
    detail : dict
        JSON-able values behind the message.
    time_s : float
        Time of the observation that raised it, s.
    """

    rule: str
    severity: str
    message: str
    actions: tuple[str, ...]
    seq: int | None
    detail: dict = field(default_factory=dict)
    time_s: float = float("nan")


def observation_from_trace(raw, result: dict | None = None, error: str | None = None, *,
                           method_in_use: str = Method.AUTO, position: tuple | None = None,
                           volts_v=None, drive_on: bool | None = None,
                           warning_codes: tuple[str, ...] = (),
                           noise_factor: float = DEFAULT_FACTOR,
                           edge_fraction: float = DEFAULT_EDGE_FRACTION) -> TraceObservation:
    """Build a :class:`TraceObservation` from a ``RawTrace`` and its conversion outcome.

    ``volts_v`` (the trace in volts) saves converting the codes again when the
    caller already has it. ``noise_factor`` and ``edge_fraction`` are the no_pulse
    thresholds (:meth:`RuleEngine.presence_options` gives the configured ones);
    ``drive_on`` is the generator output state, None when unknown.
    """
    volts = raw.volts() if volts_v is None else volts_v
    with np.errstate(all="ignore"):     # an overflowing trace gives inf or nan: kept
        fraction = raw.fraction_of_full_scale(volts)
    if len(volts) and np.all(np.isfinite(volts)):
        presence = pulse_presence(volts, factor=noise_factor, edge_fraction=edge_fraction,
                                  resolution_v=abs(float(raw.volts_per_code))
                                  if raw.data_format != "float32" else 0.0)
        present, ratio = presence.present, presence.peak_to_noise
    else:
        present, ratio = False, float("nan")
    return TraceObservation(seq=raw.seq, time_s=raw.time_s, clipped_low=raw.clipped_low,
                            clipped_high=raw.clipped_high, range_v=raw.range_v,
                            fraction_of_full_scale=fraction, result=result, error=error,
                            method_in_use=method_in_use, position=position,
                            pulse_present=present, drive_on=drive_on, peak_to_noise=ratio,
                            warning_codes=tuple(warning_codes))


def _fmt_pa(value_pa: float) -> str:
    size = abs(value_pa)
    if size >= 1e6:
        return f"{value_pa / 1e6:.4g} MPa"
    if size >= 1e3:
        return f"{value_pa / 1e3:.4g} kPa"
    return f"{value_pa:.4g} Pa"


def _fmt_bytes(value: float) -> str:
    for unit, size in (("TB", 1e12), ("GB", 1e9), ("MB", 1e6), ("kB", 1e3)):
        if abs(value) >= size:
            return f"{value / size:.3g} {unit}"
    return f"{int(value)} bytes"


def _fmt_v(value_v: float) -> str:
    return f"{value_v:g} V"


def _number(result: dict, key: str) -> float:
    value = result.get(key)
    if isinstance(value, bool) or not isinstance(value, int | float):
        return float("nan")
    return float(value)


class _Latch:
    """Fires on the rising edge of a condition, then again only after repeat_after_s.

    Once fired it stays latched until the condition has been clear on
    ``clear_after`` observations in a row, so a flickering condition fires once.
    """

    def __init__(self, repeat_after_s: float, clear_after: int = 1):
        self.repeat_after_s = repeat_after_s
        self.clear_after = max(1, int(clear_after))
        self.active = False
        self.clear_run = 0
        self.last_fired_s = float("nan")

    def step(self, condition: bool, now_s: float) -> bool:
        if not condition:
            if self.active:
                self.clear_run += 1
                if self.clear_run >= self.clear_after:
                    self.active = False
                    self.clear_run = 0
            return False
        self.clear_run = 0
        if not self.active:
            self.active = True
            self.last_fired_s = now_s
            return True
        if self.repeat_after_s > 0 and now_s - self.last_fired_s >= self.repeat_after_s:
            self.last_fired_s = now_s
            return True
        return False

    def reset(self) -> None:
        self.active = False
        self.clear_run = 0


# An evaluator returns None when the rule cannot be judged on this observation
# (its state is kept), else (condition, message, detail).
_Verdict = tuple[bool, str, dict] | None


class RuleEngine:
    """Applies an :class:`AlertConfig` to a stream of observations.

    All state (latches, counters, the drift window) lives in the engine; one
    engine per session, fed from one thread.
    """

    def __init__(self, config: AlertConfig | None = None, *, water_reference_c: float = 20.0):
        self.config = config if config is not None else AlertConfig.defaults()
        # the centre of water_temperature's band: the bench file's [water] temperature_c
        self.water_reference_c = float(water_reference_c)
        self._first_water_c: float | None = None
        self._latches = {name: _Latch(rule.repeat_after_s, rule.clear_after_traces)
                         for name, rule in self.config.rules.items()}
        self._range_v: float | None = None
        self._under_used = 0
        self._doubtful_run = 0       # converted traces in a row with a counted warning
        self._position: object = _UNSET
        self._quiet = False
        window = self.config.rules["pr_drift"].params["window_traces"]
        self._pr_window: deque[float] = deque(maxlen=window)
        self._pr_window_traces = int(window)

    # -- public -----------------------------------------------------------------
    @property
    def active(self) -> frozenset[str]:
        """Names of the latched rules: condition standing, or not yet clear for the hold."""
        return frozenset(name for name, latch in self._latches.items() if latch.active)

    def doubtful_codes(self, codes: tuple[str, ...]) -> tuple[str, ...]:
        """The warning codes that make a result doubtful: all but the doubtful_result
        rule's ``ignore`` codes (by default mi_not_derated)."""
        ignored = self.config.rules["doubtful_result"].params["ignore"]
        return tuple(c for c in codes if c not in ignored)

    def presence_options(self) -> dict:
        """The no_pulse thresholds as keywords of :func:`observation_from_trace`."""
        params = self.config.rules["no_pulse"].params
        return {"noise_factor": params["noise_factor"],
                "edge_fraction": params["edge_fraction"]}

    @property
    def under_used_traces(self) -> int:
        """Consecutive under-used traces on the current range."""
        return self._under_used

    def reset(self, rule: str | None = None) -> None:
        """Re-arm one rule (or all), e.g. after the operator cleared a fault."""
        for name, latch in self._latches.items():
            if rule is None or name == rule:
                latch.reset()

    def on_trace(self, obs: TraceObservation) -> list[Firing]:
        """Judge one trace; returns the firings, critical ones first."""
        if self._range_v is not None and obs.range_v != self._range_v:
            self._under_used = 0
            self._latches["clipping"].reset()
            self._latches["range_under_use"].reset()
            # p_r from before a range step (often clipped) is no baseline for drift
            self._pr_window.clear()
        self._range_v = obs.range_v
        if obs.position != self._position:
            self._pr_window.clear()
            self._latches["pr_drift"].reset()
            self._position = obs.position
        quiet = obs.quiet
        if self._quiet and not quiet:
            # The drive is back (perhaps at a new amplitude): p_r from before the
            # pause is no baseline for drift.
            self._pr_window.clear()
        self._quiet = quiet
        clipped = obs.clipped_low + obs.clipped_high > 0
        if clipped:
            self._under_used = 0
        elif quiet:
            pass    # noise is no measure of the range's use: the count waits for the pulse
        elif obs.fraction_of_full_scale <= self.config.rules["range_under_use"].params[
                "below_fraction"]:
            self._under_used += 1
        else:
            self._under_used = 0
        if obs.result is not None and not clipped and not quiet:
            # a clipped trace's p_r is a floor, not a measurement: keep it out of the window
            pr = abs(_number(obs.result, "peak_rarefactional_pa"))
            if math.isfinite(pr):
                self._pr_window.append(pr)

        verdicts = {
            "clipping": self._clipping(obs),
            "over_pressure": self._over_pressure(obs),
            "range_under_use": None if quiet else self._range_under_use(obs),
            "pr_drift": None if quiet else self._pr_drift(obs),
            "narrowband_fail": None if quiet else self._narrowband_fail(obs),
            "doubtful_result": None if quiet else self._doubtful_result(obs),
            "conversion_failed": None if quiet else self._conversion_failed(obs),
            "no_pulse": self._no_pulse(obs),
        }
        return self._fire(verdicts, obs.time_s, obs.seq)

    def on_tick(self, tick: TickObservation) -> list[Firing]:
        """Judge the once-a-second state of the session."""
        verdicts = {
            "no_trigger": self._no_trigger(tick),
            "disk_space_low": self._disk_space_low(tick),
            "falling_behind": self._falling_behind(tick),
            "store_lag": self._store_lag(tick),
            "water_temperature": self._water_temperature(tick),
        }
        return self._fire(verdicts, tick.now_s, None)

    # -- machinery ----------------------------------------------------------------
    def _fire(self, verdicts: dict[str, _Verdict], now_s: float, seq: int | None):
        firings = []
        for name, verdict in verdicts.items():
            rule = self.config.rules[name]
            if not rule.enabled or verdict is None:
                continue
            condition, message, detail = verdict
            if self._latches[name].step(condition, now_s):
                firings.append(Firing(rule=name, severity=rule.severity, message=message,
                                      actions=rule.actions, seq=seq, detail=detail,
                                      time_s=now_s))
        firings.sort(key=lambda f: _SEVERITY_ORDER[f.severity])
        return firings

    def _p(self, rule: str, key: str):
        return self.config.rules[rule].params[key]

    # -- trace rules ----------------------------------------------------------------
    def _clipping(self, obs: TraceObservation) -> _Verdict:
        count = obs.clipped_low + obs.clipped_high
        minimum = self._p("clipping", "min_samples")
        message = (f"Digitiser clipping: {count} samples at the ADC rails "
                   f"({obs.clipped_low} low, {obs.clipped_high} high) on the "
                   f"{_fmt_v(obs.range_v)} range, trace {obs.seq}.")
        detail = {"clipped_low": obs.clipped_low, "clipped_high": obs.clipped_high,
                  "min_samples": minimum, "range_v": obs.range_v, "clipped": True,
                  "fraction_of_full_scale": obs.fraction_of_full_scale}
        return count >= minimum, message, detail

    def _over_pressure(self, obs: TraceObservation) -> _Verdict:
        if obs.result is None:
            return None
        p_c = _number(obs.result, "peak_compressional_pa")
        p_r = abs(_number(obs.result, "peak_rarefactional_pa"))
        finite = [p for p in (p_c, p_r) if math.isfinite(p)]
        if not finite:
            return None
        peak = max(finite)
        rated = self._p("over_pressure", "rated_max_pa")
        user = self._p("over_pressure", "limit_pa")
        if user is not None and user < rated:
            limit, source = user, "user limit"
        else:
            limit, source = rated, "hydrophone rated maximum"
        which = "p_c" if peak == p_c else "p_r"
        detail = {"peak_pa": peak, "peak_compressional_pa": p_c,
                  "peak_rarefactional_pa": p_r, "limit_pa": limit, "limit_source": source,
                  "clipped": False}
        if obs.clipped_low + obs.clipped_high > 0:
            # The rails cut the trace: its pressure is a floor on the true peak, which
            # may lie above the limit even when the floor does not reach it.
            margin = self._p("over_pressure", "clipped_margin")
            counts_from = limit * (1.0 - margin)
            message = (f"Over-pressure: {which} at least {_fmt_pa(peak)} (clipped), within "
                       f"{100 * margin:.3g} % of the {source} of {_fmt_pa(limit)} "
                       f"(counts from {_fmt_pa(counts_from)}; p_c {_fmt_pa(p_c)}, "
                       f"p_r {_fmt_pa(p_r)}, {obs.clipped_low + obs.clipped_high} samples at "
                       f"the rails of the {_fmt_v(obs.range_v)} range), trace {obs.seq}.")
            detail.update(clipped=True, clipped_margin=margin, counts_from_pa=counts_from)
            return peak >= counts_from, message, detail
        message = (f"Over-pressure: {which} = {_fmt_pa(peak)} is at or above the {source} of "
                   f"{_fmt_pa(limit)} (p_c {_fmt_pa(p_c)}, p_r {_fmt_pa(p_r)}), trace {obs.seq}.")
        return peak >= limit, message, detail

    def _range_under_use(self, obs: TraceObservation) -> _Verdict:
        fraction = self._p("range_under_use", "below_fraction")
        needed = self._p("range_under_use", "consecutive_traces")
        used = obs.fraction_of_full_scale
        message = (f"Vertical range under-used: the signal spans {100 * used:.3g} % of the "
                   f"{_fmt_v(obs.range_v)} range for {self._under_used} traces in a row "
                   f"(limit {100 * fraction:.3g} %), trace {obs.seq}.")
        detail = {"fraction_of_full_scale": used, "below_fraction": fraction,
                  "under_used_traces": self._under_used, "consecutive_traces": needed,
                  "range_v": obs.range_v, "clipped": False}
        return self._under_used >= needed, message, detail

    def _pr_drift(self, obs: TraceObservation) -> _Verdict:
        window = self._pr_window
        if obs.result is None or len(window) < self._pr_window_traces:
            return None
        half = len(window) // 2
        values = list(window)
        first = sum(values[:half]) / half
        last = sum(values[-half:]) / half
        if first <= 0:
            return None
        change_percent = 100.0 * abs(last - first) / first
        limit = self._p("pr_drift", "max_change_percent")
        message = (f"p_r drift at a fixed position: {_fmt_pa(first)} -> {_fmt_pa(last)} "
                   f"({change_percent:.3g} %, limit {limit:.3g} %) over the last "
                   f"{len(window)} traces, trace {obs.seq}.")
        detail = {"first_half_mean_pa": first, "last_half_mean_pa": last,
                  "change_percent": change_percent, "max_change_percent": limit,
                  "window_traces": len(window),
                  "position": list(obs.position) if obs.position is not None else None}
        return change_percent >= limit, message, detail

    def _narrowband_fail(self, obs: TraceObservation) -> _Verdict:
        if obs.result is None:
            return None
        in_use = Method.NARROWBAND in (obs.method_in_use, obs.result.get("method"))
        ok = obs.result.get("narrowband_ok")
        if not isinstance(ok, bool):
            return None
        low = _number(obs.result, "narrowband_band_low_hz")
        high = _number(obs.result, "narrowband_band_high_hz")
        deviation = _number(obs.result, "narrowband_max_deviation_db")
        message = (f"Narrowband check failed while the narrowband method is in use: the "
                   f"sensitivity varies by {deviation:.3g} dB over {low / 1e6:.4g} to "
                   f"{high / 1e6:.4g} MHz, trace {obs.seq}; pressure may be wrong.")
        detail = {"narrowband_ok": ok, "band_low_hz": low, "band_high_hz": high,
                  "max_deviation_db": deviation, "method_in_use": obs.method_in_use}
        return in_use and not ok, message, detail

    def _doubtful_result(self, obs: TraceObservation) -> _Verdict:
        if obs.result is None:
            return None
        codes = self.doubtful_codes(obs.warning_codes)
        self._doubtful_run = self._doubtful_run + 1 if codes else 0
        needed = self._p("doubtful_result", "consecutive_traces")
        message = (f"Doubtful results: {self._doubtful_run} traces in a row carry warnings "
                   f"({', '.join(sorted(set(codes))) or '-'}), trace {obs.seq}; see the "
                   "result's warnings.")
        return self._doubtful_run >= needed, message, {"codes": codes,
                                                      "consecutive": self._doubtful_run}

    def _conversion_failed(self, obs: TraceObservation) -> _Verdict:
        failed = obs.result is None or obs.error is not None
        text = obs.error if obs.error is not None else "no result"
        message = f"Conversion to pressure failed on trace {obs.seq}: {text}"
        return failed, message, {"error": text}

    def _no_pulse(self, obs: TraceObservation) -> _Verdict:
        factor = self._p("no_pulse", "noise_factor")
        why = "generator output off" if obs.drive_on is False else "source off?"
        ratio = obs.peak_to_noise
        ratio_txt = f"{ratio:.3g}" if math.isfinite(ratio) else "-"
        message = (f"No pulse in the traces ({why}): peak {ratio_txt} x noise sigma, below "
                   f"{factor:g} x, from trace {obs.seq}; raw traces are still recorded, "
                   f"drift, conversion, narrowband and range-use alerts wait for the pulse.")
        detail = {"peak_to_noise": ratio if math.isfinite(ratio) else None,
                  "noise_factor": factor, "drive_on": obs.drive_on}
        return not obs.pulse_present, message, detail

    # -- tick rules ---------------------------------------------------------------------
    def _no_trigger(self, tick: TickObservation) -> _Verdict:
        if tick.since_trigger_s is None:
            return None
        limit = self._p("no_trigger", "after_s")
        message = (f"No trigger for {tick.since_trigger_s:.1f} s (limit {limit:g} s): "
                   f"check the trigger cable, level and the generator output.")
        detail = {"since_trigger_s": tick.since_trigger_s, "after_s": limit}
        return tick.since_trigger_s >= limit, message, detail

    def _disk_space_low(self, tick: TickObservation) -> _Verdict:
        if tick.disk_free_bytes is None:
            return None
        limit = self._p("disk_space_low", "min_free_bytes")
        message = (f"Disk space low: {_fmt_bytes(tick.disk_free_bytes)} free on the "
                   f"session disk (limit {_fmt_bytes(limit)}).")
        detail = {"disk_free_bytes": tick.disk_free_bytes, "min_free_bytes": limit}
        return tick.disk_free_bytes <= limit, message, detail

    def _falling_behind(self, tick: TickObservation) -> _Verdict:
        if tick.queue_capacity <= 0:
            return None
        used = tick.queue_depth / tick.queue_capacity
        limit = self._p("falling_behind", "queue_fraction")
        message = (f"Processing falling behind: {tick.queue_depth} of {tick.queue_capacity} "
                   f"queue places in use ({100 * used:.3g} %, limit {100 * limit:.3g} %); "
                   f"acquisition is being throttled.")
        detail = {"queue_depth": tick.queue_depth, "queue_capacity": tick.queue_capacity,
                  "queue_fraction": used, "limit_fraction": limit}
        return used >= limit, message, detail

    def _store_lag(self, tick: TickObservation) -> _Verdict:
        limit = self._p("store_lag", "max_lag_s")
        message = (f"Session store lagging: the oldest uncommitted trace is "
                   f"{tick.store_lag_s:.1f} s old (limit {limit:g} s).")
        detail = {"store_lag_s": tick.store_lag_s, "max_lag_s": limit}
        return tick.store_lag_s >= limit, message, detail


    def _water_temperature(self, tick: TickObservation) -> _Verdict:
        reading = tick.water_reading_c
        if reading is None or not math.isfinite(reading):
            return None
        if self._first_water_c is None:
            self._first_water_c = reading
        band = self._p("water_temperature", "band_c")
        max_change = self._p("water_temperature", "max_change_c")
        centre, first = self.water_reference_c, self._first_water_c
        change = reading - first
        outside = band > 0 and abs(reading - centre) >= band
        changed = max_change > 0 and abs(change) >= max_change
        why = []
        if outside:
            why.append(f"outside the band {centre - band:.4g} to {centre + band:.4g} degC "
                       f"([water] temperature_c {centre:g} +/- {band:g})")
        if changed:
            why.append(f"changed by {change:+.3g} degC since the session's first reading "
                       f"{first:.4g} degC (limit {max_change:g} degC)")
        message = (f"Water temperature {reading:.4g} degC: {' and '.join(why) or 'in band'}; "
                   "the conversion's sound speed and density follow it.")
        detail = {"reading_c": reading, "reference_c": centre, "band_c": band,
                  "first_reading_c": first, "change_c": change, "max_change_c": max_change,
                  "outside_band": outside, "changed": changed}
        return outside or changed, message, detail


class _Unset:
    def __repr__(self) -> str:
        return "<unset>"


_UNSET = _Unset()
