"""The per-trace stage of a live session: convert, judge, act, count, publish.

:class:`TraceProcessor` runs on the session's processing thread. For each acquired
trace it converts the voltage (``Converter.process``), builds the rules' observation,
asks the rules, carries out the actions of each firing (record, bell, stop, and the
instrument actions handed to the acquisition thread as typed commands), releases the
acquisition gate for the next trace, updates the running figures and publishes a new
:class:`~tankside.monitor.live.snapshot.Snapshot` (one reference assignment). Events
from the acquisition thread (range changes, faults, the generator's output state)
arrive in order with the traces and are handled here too.

No pulse, drive off: a trace with no pulse, or acquired with the output off, is
stored and converted, flagged (``no_pulse``, ``drive_off``) and shown, but kept out of
the running figures; the rules do not judge drift, conversion, narrowband or range
use on it (see :mod:`tankside.monitor.live.rules`).
"""

from __future__ import annotations

import dataclasses
import sys
import threading
import time
import traceback
from collections.abc import Callable
from pathlib import Path
from typing import Any

import numpy as np

from ..acoustics.water import Water
from ..errors import TanksideError
from ..record.benchstate import TraceBench
from ..record.schema import EventKind, FaultKind, PointStatus, WaterSource
from .acquisition import AcqEvent, Acquired, AcquisitionLoop
from .actions import Cause, SafeOff, SetRange
from .autorange import range_after
from .benchfile import DEFAULT_MAX_AGE_S
from .figures import FigureSet, RateMeter
from .generator import GeneratorWorker
from .recorder import AlertItem, EventItem, PointItem, TraceItem
from .rules import Firing, observation_from_trace
from .scan import ScanCollector
from .snapshot import AlertView, BenchView, EventView, InstrumentView, Snapshot
from .stage import StageWorker
from .thermometer import ThermometerWorker, WaterChoice, water_for_trace
from .views import drive_text, event_text, optional_bool, result_arrays

MAX_ALERTS_SHOWN = 300
SNAPSHOT_ARRAYS_EVERY_S = 0.04   # waveform/spectrum arrays at most 25 times a second


def figures_left_out(flat: dict | None, *, no_pulse: bool, drive_off: bool,
                     clipped: bool = False, doubtful: bool = False) -> str:
    """Why a trace is kept out of the running figures, or "" when it counts.

    Noise converted to "pressure" is no figure of the field (drive off, no pulse), a
    trace that did not convert has no figures, the peaks of a clipped trace are floors
    hidden by the rails, and a doubtful result (a counted warning) may be off.
    """
    if drive_off:
        return "drive off"
    if no_pulse:
        return "no pulse"
    if flat is None:
        return "not converted"
    if clipped:
        return "clipped"
    return "doubtful" if doubtful else ""


class TraceProcessor:
    """Conversion, rules and actions for one session, trace by trace.

    Parameters
    ----------
    converter : Converter
        ``.process(voltage_v, dt_s) -> TraceResult`` and ``.with_method(m)``.
    rules : RuleEngine
    acquisition : AcquisitionLoop
        Where range changes go, and what the digitiser's view is read from.
    generator : GeneratorWorker or None
        Where safe-off goes (None: no generator; a safe-off then raises an alert).
    record : callable (item) -> None
        Hands an item to the recorder (blocks while its queue is full).
    stop_by_rule : callable (reason) -> None
        Ends the session because a rule's action is ``stop``.
    session_path : Path
    method : str
        The conversion method in use at the start.
    bell : callable () -> None, optional
    autorange_options : dict, optional
        Keywords for :func:`tankside.monitor.live.autorange.range_after`.
    resources : dict, optional
        Instrument name -> resource string, for the instrument views.
    stage : StageWorker, optional
        Its latest position goes with each trace; a safe-off also stops it.
    thermometer : ThermometerWorker, optional
        Its latest reading sets each trace's water (see :func:`.thermometer.water_for_trace`).
    max_age_s : float
        The oldest reading a conversion uses, s (``[thermometer] max_age_s``).
    bench_temperature_c : float
        The bench file's ``[water] temperature_c``: the fallback.
    """

    def __init__(self, *, converter: Any, rules: Any, acquisition: AcquisitionLoop,
                 generator: GeneratorWorker | None, record: Callable[[Any], None],
                 stop_by_rule: Callable[[str], None],
                 session_path: Path, method: str, bell: Callable[[], None] | None = None,
                 autorange_options: dict | None = None, resources: dict | None = None,
                 stage: StageWorker | None = None, thermometer: ThermometerWorker | None = None,
                 max_age_s: float = DEFAULT_MAX_AGE_S, bench_temperature_c: float = 20.0,
                 scan: ScanCollector | None = None,
                 on_safe_off: Callable[[str], None] | None = None):
        self._scan = scan
        self._on_safe_off = on_safe_off
        self._converter = converter
        self._rules = rules
        self._acq = acquisition
        self._generator = generator
        self._record_item = record
        self._stop_by_rule = stop_by_rule
        self._bell = bell
        self._autorange_options = dict(autorange_options or {})
        self._resources = dict(resources or {})
        self.method = method
        self.pending_method: str | None = None
        self.pending_reset: str | None = None      # the cause of an asked-for reset
        self._lock = threading.Lock()       # guards the alert list
        self._alerts: list[AlertView] = []
        self._events: list[EventView] = []       # guarded by the lock too
        self._next_alert_id = 1
        self._figures = FigureSet()
        self._rate = RateMeter()
        self.converted = 0
        self.failed = 0
        self.clipped = 0
        self.doubtful = 0           # converted traces whose result carries warnings
        self._last_warnings: tuple[str, ...] = ()
        self._no_pulse = 0
        self._last_arrays_mono = 0.0
        self._latest: tuple | None = None
        self._range_v = float("nan")
        self._fraction = float("nan")
        # Generator output as processing knows it (from the acquisition's events).
        self._drive_on: bool | None = None
        self._drive_cause = ""
        self._pulse_present: bool | None = None
        self._figures_time_s = float("nan")   # the last trace the figures took
        self._figures_left_out = ""            # why the latest trace was not taken
        self._left_out_counts: dict[str, int] = {}
        self._figures_since = (float("nan"), "")
        self._numeric_error_shown = False   # the first one's traceback goes to stderr
        self._stage = stage
        self._thermometer = thermometer
        self.max_age_s = float(max_age_s)
        self.bench_temperature_c = float(bench_temperature_c)
        self._water_source: WaterSource | None = None   # of the latest trace's conversion
        self._water_used_c = float("nan")
        self._stage_moving = False      # the latest trace was acquired while it moved
        self.snap = Snapshot(session_path=str(session_path), state="starting")

    # -- what the session reads and asks --------------------------------------------
    def convert_waveform(self, volts: np.ndarray, dt_s: float, resolution_v: float) -> dict:
        """One waveform converted as the latest trace was (method, water); its
        ``TraceResult.flat()``. Raises what the converter raises."""
        water_kw = {} if self._thermometer is None or not np.isfinite(self._water_used_c) \
            else {"water": Water.at(self._water_used_c)}
        return self._converter.process(volts, dt_s, resolution_v=resolution_v,
                                       **water_kw).flat()

    @property
    def drive_on(self) -> bool | None:
        """The generator output as processing last learnt it (None: unknown)."""
        return self._drive_on

    def set_range(self, range_v: float) -> None:
        self._range_v = range_v

    def acknowledge(self, alert_id: int) -> bool:
        """Mark an alert acknowledged; False when no shown alert has that id."""
        with self._lock:
            for view in self._alerts:
                if view.alert_id == alert_id:
                    view.acknowledged = True
                    break
            else:
                return False
            self._alerts = list(self._alerts)
        self.snap = dataclasses.replace(self.snap, alerts=self._alerts_copy())
        return True

    def note_event(self, item: EventItem) -> None:
        """Keep an event for the displays' log (any thread); the next snapshot has it."""
        view = EventView(time_s=float(item.time_s), kind=str(item.kind),
                         text=event_text(str(item.kind), dict(item.detail)), seq=item.seq)
        with self._lock:
            self._events = [*self._events[-(MAX_ALERTS_SHOWN - 1):], view]

    def _record(self, item: Any) -> None:
        if isinstance(item, EventItem):
            self.note_event(item)
        self._record_item(item)

    def last_seq(self) -> int | None:
        return self.snap.seq if self.snap.seq >= 0 else None

    # -- items from the acquisition thread --------------------------------------------
    def on_event(self, ev: AcqEvent) -> None:
        kind = ev.kind
        if kind == EventKind.FAULT and ev.detail.get("kind") == FaultKind.CONNECTION_LOST:
            kind = EventKind.CONNECTION_LOST
        self._record(EventItem(ev.time_s, kind, ev.detail, seq=ev.seq))
        if ev.alert is not None:
            self.handle_firings([Firing(rule=ev.alert.rule, severity=ev.alert.severity,
                                        message=ev.alert.message, actions=("record",),
                                        seq=ev.seq, detail=ev.detail, time_s=ev.time_s)],
                                judged_trace=False)
        if kind == EventKind.RANGE_CHANGE and ev.detail.get("done"):
            self._range_v = float(ev.detail["to_v"])
            # pressures on two ranges are not one series (quantisation, clipping differ)
            self._restart_figures(ev.time_s, "range change")
        if kind in (EventKind.DRIVE_ON, EventKind.DRIVE_OFF):
            self._drive_on = kind == EventKind.DRIVE_ON
            self._drive_cause = str(ev.detail.get("cause", ""))
            self.publish()
        elif (kind == EventKind.FAULT and ev.detail.get("kind") == FaultKind.GENERATOR_QUERY) or (
                kind in (EventKind.SAFE_OFF, EventKind.DRIVE_OFF_FAILED)
                and ev.detail.get("done") is False):
            # the output state is not known while a switch-off is unconfirmed
            self._drive_on = None
            self._drive_cause = ""
            self.publish()

    def on_trace(self, item: Acquired) -> None:
        raw = item.raw
        self._rate.add(time.monotonic())
        if self.pending_method is not None:
            self._switch_method(self.pending_method, raw.seq)
        self._reset_if_asked(raw.seq)
        result = None
        flat = None
        error = None
        with np.errstate(all="ignore"):     # codes x scale may overflow: judged below
            volts = raw.volts()
        bench, water, position = self._bench_at(raw)
        # (without a thermometer the converter is called as it always was)
        water_kw = {} if water is None else {"water": water}
        # one code's worth of volts: the noise floor of a quantised quiet record
        resolution_v = abs(float(raw.volts_per_code))
        try:
            result = self._converter.process(volts, raw.dt_s, resolution_v=resolution_v,
                                             **water_kw)
            flat = result.flat()
            self.converted += 1
        except TanksideError as err:
            error = f"{type(err).__name__}: {err}"
            self.failed += 1
        except (ArithmeticError, ValueError, IndexError) as err:
            # numerics meeting data they were not written for (an overflowing value, an
            # odd length): this trace is stored raw with the error, the session goes on
            error = f"{type(err).__name__}: {err}"
            self.failed += 1
            if not self._numeric_error_shown:
                self._numeric_error_shown = True
                traceback.print_exc(file=sys.stderr)
        codes = () if result is None else tuple(str(w.code) for w in result.warnings)
        obs = observation_from_trace(raw, flat, error, method_in_use=self.method,
                                     volts_v=volts, drive_on=self._drive_on, position=position,
                                     warning_codes=codes, **self._rules.presence_options())
        self._range_v = raw.range_v
        self._fraction = obs.fraction_of_full_scale
        self._pulse_present = obs.pulse_present
        self.handle_firings(self._rules.on_trace(obs), judged_trace=True)
        # Actions for trace N are queued: trace N+1 may be acquired now.
        self._acq.verdict(raw.seq)
        flags = dict(item.flags)
        flags["clipped"] = raw.clipped > 0
        flags.setdefault("range_changed", False)
        if not obs.pulse_present:
            flags["no_pulse"] = True
            self._no_pulse += 1
        if self._drive_on is False:
            flags["drive_off"] = True
        if self._stage_moving:
            flags["stage_moving"] = True        # the position is only where it was read
        if raw.clipped:
            self.clipped += 1
        if result is not None:
            self._last_warnings = self._rules.doubtful_codes(codes)
            if self._last_warnings:
                self.doubtful += 1
        left_out = figures_left_out(flat, no_pulse=not obs.pulse_present,
                                    drive_off=self._drive_on is False,
                                    clipped=raw.clipped > 0,
                                    doubtful=result is not None and bool(self._last_warnings))
        self._figures_left_out = left_out
        if left_out:
            self._left_out_counts[left_out] = self._left_out_counts.get(left_out, 0) + 1
        elif flat is not None:          # always so when nothing left it out
            self._figures.add(flat)
            self._figures_time_s = float(raw.time_s)
        point, completed = (None, None) if self._scan is None else self._scan.on_trace(
            raw.seq, flat, flags, None if bench is None else bench.positions_mm,
            volts=volts, dt_s=float(raw.dt_s), resolution_v=resolution_v)
        self._record(TraceItem(raw, flat, flags, error, bench, point))
        if completed is not None:       # after the trace that completed it
            self._record(PointItem(completed))
            if completed.status != PointStatus.DONE:
                self._record(EventItem(time.time(), EventKind.SCAN_POINT_FAILED,
                                       {"point": completed.index, "why": completed.note},
                                       seq=raw.seq))
        self._publish_trace(raw, volts, result, flat)

    # -- stage position and water, per trace ------------------------------------------
    def _bench_at(self, raw: Any) -> tuple[TraceBench | None, Water | None, tuple | None]:
        """The bench state to record with ``raw``, the water its conversion uses (None:
        the converter's own, no thermometer) and its position for the rules."""
        if self._stage is None and self._thermometer is None:
            return None, None, None
        positions: dict[str, float] = {}
        position = None
        self._stage_moving = False
        if self._stage is not None:
            reading = self._stage.latest()
            if reading is not None:
                positions = dict(reading.positions_mm)
                self._stage_moving = reading.moving
                # to a micrometre, so that read-back jitter is not a new position for drift
                position = tuple((axis, round(mm, 3)) for axis, mm in sorted(positions.items()))
        if self._thermometer is None:
            return TraceBench(positions_mm=positions), None, position
        choice = water_for_trace(self._thermometer.latest(), raw.time_s,
                                 max_age_s=self.max_age_s, bench_c=self.bench_temperature_c)
        if choice.source != self._water_source:
            self._water_source_changed(choice, raw)
        self._water_used_c = choice.temperature_c
        bench = TraceBench(positions_mm=positions, water_reading_c=choice.reading_c,
                           water_reading_age_s=choice.age_s, water_source=choice.source)
        return bench, Water.at(choice.temperature_c), position

    def _water_source_changed(self, choice: WaterChoice, raw: Any) -> None:
        first = self._water_source is None
        self._water_source = choice.source
        detail = {"source": choice.source, "reading_c": choice.reading_c,
                  "age_s": choice.age_s, "max_age_s": self.max_age_s,
                  "temperature_c": choice.temperature_c, "from_seq": raw.seq}
        self._record(EventItem(raw.time_s, EventKind.WATER_SOURCE, detail, seq=raw.seq))
        if choice.source == WaterSource.BENCH:
            self.handle_firings([Firing(
                rule="water-reading-old", severity="warning",
                message=(f"Water temperature from the bench file ({choice.temperature_c:g} "
                         f"degC) from trace {raw.seq}: {choice.why}"),
                actions=("record",), seq=raw.seq, detail=detail, time_s=raw.time_s)],
                judged_trace=False)
        elif not first:
            self.publish()

    def water_reading_for_rules(self, now_s: float) -> float | None:
        """The thermometer's latest reading when a conversion at ``now_s`` would use it."""
        if self._thermometer is None:
            return None
        choice = water_for_trace(self._thermometer.latest(), now_s, max_age_s=self.max_age_s,
                                 bench_c=self.bench_temperature_c)
        return choice.reading_c if choice.source == WaterSource.THERMOMETER else None

    def _bench_view(self) -> BenchView | None:
        stage, thermo = self._stage, self._thermometer
        if stage is None and thermo is None:
            return None
        view = BenchView(water_temperature_c=self._water_used_c,
                         water_source=str(self._water_source or ""), max_age_s=self.max_age_s)
        if stage is not None:
            reading = stage.latest()
            view.has_stage = True
            view.stage_connected = stage.connected
            view.stage_ended = stage.ended
            if reading is not None:
                view.position_mm = dict(reading.positions_mm)
                view.stage_moving = reading.moving
        if thermo is not None:
            latest = thermo.latest()
            view.has_thermometer = True
            view.thermometer_connected = thermo.connected
            view.thermometer_ended = thermo.ended
            if latest is not None:
                view.reading_c = latest.temperature_c
                view.reading_age_s = max(0.0, time.time() - latest.time_s)
        return view

    def _switch_method(self, method: str, seq: int) -> None:
        self.pending_method = None
        if method == self.method:
            return
        old = self.method
        self._converter = self._converter.with_method(method)
        self.method = method
        now = time.time()
        self._record(EventItem(now, EventKind.METHOD_CHANGE,
                               {"from": old, "to": method}, seq=seq))
        self._restart_figures(now, "method change")

    def _reset_if_asked(self, seq: int | None) -> None:
        cause = self.pending_reset
        if cause is None:
            return
        self.pending_reset = None
        now = time.time()
        self._record(EventItem(now, EventKind.FIGURES_RESET, {"cause": cause}, seq=seq))
        self._restart_figures(now, "reset")

    def _restart_figures(self, time_s: float, reason: str) -> None:
        """Start the running figures afresh: ``reason`` says why on the display."""
        self._figures = FigureSet()
        self._left_out_counts = {}
        self._figures_time_s = float("nan")
        self._figures_since = (float(time_s), reason)
        self.publish(figures=self._figures.views())

    # -- firings and their actions ----------------------------------------------------
    def handle_firings(self, firings: list[Firing], *, judged_trace: bool) -> None:
        """Show, record and act on firings.

        ``judged_trace`` is False for firings of the once-a-second rules and of
        instrument events: auto-range acts only on a firing judged on a trace.
        """
        for firing in firings:
            actions = tuple(firing.actions)
            time_s = firing.time_s if np.isfinite(firing.time_s) else time.time()
            with self._lock:
                alert_id = self._next_alert_id
                self._next_alert_id += 1
                self._alerts.append(AlertView(alert_id=alert_id, time_s=time_s,
                                              rule=firing.rule, severity=firing.severity,
                                              message=firing.message, actions=actions,
                                              seq=firing.seq))
                if len(self._alerts) > MAX_ALERTS_SHOWN:
                    self._alerts = self._alerts[-MAX_ALERTS_SHOWN:]
            if "record" in actions:
                self._record(AlertItem(alert_id, time_s, firing.rule, firing.severity,
                                       firing.message, actions, firing.seq))
            cause = Cause(rule=firing.rule, seq=firing.seq)
            if "safe-off" in actions:
                self._safe_off(cause, time_s)
            if "auto-range" in actions and judged_trace:
                self._auto_range(firing, cause)
            if "bell" in actions and self._bell is not None:
                self._bell()
            if "stop" in actions:
                self._stop_by_rule(f"{firing.rule}: {firing.message}")
        if firings:
            self.snap = dataclasses.replace(self.snap, alerts=self._alerts_copy())

    def _safe_off(self, cause: Cause, time_s: float) -> None:
        if self._stage is not None:
            self._stage.request_stop("safe-off")
        if self._on_safe_off is not None:
            self._on_safe_off(f"safe-off ({cause.rule})")
        if self._generator is not None:
            self._generator.request(SafeOff(cause))
            return
        detail = {"done": False, "why": "no generator configured", **cause.as_detail()}
        self._record(EventItem(time_s, EventKind.SAFE_OFF, detail, seq=cause.seq))
        self.handle_firings([Firing(rule="safe-off-failed", severity="critical",
                                    message="safe-off asked for but no generator is configured",
                                    actions=("record",), seq=cause.seq, detail=detail,
                                    time_s=time_s)], judged_trace=False)

    def _auto_range(self, firing: Firing, cause: Cause) -> None:
        ranges = self._acq.ranges_v
        if not ranges:
            return
        # A firing judged on a trace from before a range change is stale: range_after
        # returns None for it, so one condition never takes two steps.
        new_v = range_after(firing, ranges, current_v=self._acq.current_range_v(),
                            **self._autorange_options)
        if new_v is not None:
            self._acq.commands.put(SetRange(float(new_v), cause))

    def _events_copy(self) -> list[EventView]:
        with self._lock:
            return list(self._events)       # the views are never changed once made

    def _alerts_copy(self) -> list[AlertView]:
        with self._lock:
            return [dataclasses.replace(a) for a in self._alerts]

    # -- snapshots --------------------------------------------------------------------
    def _instrument_views(self) -> list[InstrumentView]:
        views = []
        if self._acq.digitiser is not None:
            views.append(InstrumentView(name="digitiser",
                                        resource=self._resources.get("digitiser", ""),
                                        identity=self._acq.digitiser.identity,
                                        connected=self._acq.connected,
                                        ended=self._acq.ended))
        if self._generator is not None:
            views.append(InstrumentView(name="generator",
                                        resource=self._resources.get("generator", ""),
                                        identity=self._generator.identity, connected=True,
                                        detail=drive_text(self._drive_on, self._drive_cause)))
        return views

    def publish(self, state: str | None = None, stop_reason: str | None = None,
                **fields: Any) -> None:
        """Replace the snapshot with one holding the current counts and ``fields``."""
        has_generator = self._generator is not None
        self.snap = dataclasses.replace(
            self.snap, **fields, converted=self.converted,
            traces_per_s=self._rate.rate(time.monotonic()),
            range_v=self._range_v, range_fraction_used=self._fraction,
            clipped_traces=self.clipped, instruments=self._instrument_views(),
            drive_on=self._drive_on,
            drive_detail=drive_text(self._drive_on, self._drive_cause) if has_generator else "",
            pulse_present=self._pulse_present, no_pulse_traces=self._no_pulse,
            doubtful_traces=self.doubtful, last_warnings=self._last_warnings,
            figures_time_s=self._figures_time_s, figures_left_out=self._figures_left_out,
            figures_left_out_counts=dict(self._left_out_counts),
            figures_since_s=self._figures_since[0], figures_since_reason=self._figures_since[1],
            events=self._events_copy(), bench=self._bench_view(),
            scan=None if self._scan is None else self._scan.view(),
            state=state or self.snap.state,
            stop_reason=self.snap.stop_reason if stop_reason is None else stop_reason)

    def _publish_trace(self, raw: Any, volts: np.ndarray, result: Any, flat: dict | None,
                       *, force: bool = False) -> None:
        # A snapshot is rebuilt at most SNAPSHOT_ARRAYS_EVERY_S apart (displays refresh
        # 10 to 20 times a second); in between only the latest trace is remembered, so
        # the waveform, spectrum, result and seq of a snapshot always belong together.
        self._latest = (raw, volts, result, flat)
        now = time.monotonic()
        if not force and now - self._last_arrays_mono < SNAPSHOT_ARRAYS_EVERY_S:
            return
        self._last_arrays_mono = now
        self._latest = None
        fields: dict[str, Any] = {"seq": raw.seq, "time_s": raw.time_s, "method": self.method,
                                  "figures": self._figures.views(),
                                  "times_s": raw.times(), "voltage_v": np.array(volts)}
        if flat is not None:
            fields.update(
                result=dict(flat), narrowband_ok=optional_bool(flat.get("narrowband_ok")),
                narrowband_band_hz=(float(flat.get("narrowband_band_low_hz", np.nan)),
                                    float(flat.get("narrowband_band_high_hz", np.nan))),
                narrowband_max_deviation_db=float(
                    flat.get("narrowband_max_deviation_db", np.nan)),
                method=str(flat.get("method", self.method)))
            fields.update(result_arrays(result, flat))
        else:
            fields.update(pressure_pa=np.zeros(0), freqs_hz=np.zeros(0),
                          spectrum_db=np.zeros(0), sensitivity_db=np.zeros(0), result={},
                          narrowband_ok=None)
        self.publish(**fields)

    def flush_latest(self) -> None:
        """Publish the latest trace if a snapshot has not shown it yet."""
        latest = self._latest
        if latest is not None:
            self._publish_trace(*latest, force=True)

    def flush_due(self) -> None:
        """Publish the latest trace when the array interval has passed."""
        self._reset_if_asked(self.last_seq())   # asked for while no trace arrives
        if time.monotonic() - self._last_arrays_mono >= SNAPSHOT_ARRAYS_EVERY_S:
            self.flush_latest()
