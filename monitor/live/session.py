"""The live session: acquisition, streaming conversion, rules and actions, and the store.

Three threads, joined by bounded queues::

    acquisition (monitor.acquire) --raw--> processing (here) --items--> writer (monitor.writer)

* Acquisition does the blocking instrument I/O and the instrument actions. A full
  queue blocks it: acquisition is throttled, no trace is dropped.
* Processing converts each trace (``Converter.process``), asks the rules
  (``RuleEngine.on_trace``, and ``on_tick`` about once a second), hands the actions
  to the acquisition thread, updates the running figures and publishes a new
  :class:`~tankside.monitor.live.snapshot.Snapshot` (one reference assignment).
* The writer owns the :class:`~tankside.monitor.record.store.SessionStore`.

Safe-off ordering: after putting trace N in the queue, the acquisition thread waits
until processing has judged trace N (and queued its actions) before it acquires
trace N+1 (``gate=True``, the default). Processing is fast beside an acquisition, so
this costs little, and a safe-off decided on trace N always comes before trace N+1.

No pulse, drive off: the generator's output state arrives as ``drive-on`` /
``drive-off`` events in order with the traces, and each trace gets a pulse-presence
verdict (:mod:`tankside.monitor.acoustics.presence`). A trace with no pulse, or acquired
with the output off, is still stored and converted, flagged (``no_pulse``,
``drive_off``) and shown, but kept out of the running figures; the rules do not judge
drift, conversion, narrowband or range use on it (see :mod:`tankside.monitor.live.rules`).

Displays (the dashboard, :mod:`tankside.monitor.headless`) call only the public
methods of :class:`LiveSession`; they never touch a driver.
"""

from __future__ import annotations

import dataclasses
import queue
import shutil
import sys
import threading
import time
import traceback
from collections.abc import Callable
from pathlib import Path
from typing import Any

import numpy as np

from ..cli import (
    EXIT_INSTRUMENT,
    EXIT_OK,
    EXIT_STOPPED_BY_RULE,
    EXIT_STORE,
)
from ..errors import TanksideError
from .acquisition import (
    EVENT_DRIVE_OFF,
    EVENT_DRIVE_ON,
    AcqEvent,
    Acquired,
    AcquisitionLoop,
    OpenInstrument,
)
from .autorange import range_after
from .figures import FigureSet, RateMeter
from .recorder import (
    END,
    AckItem,
    AlertItem,
    CloseItem,
    EventItem,
    TraceItem,
    Writer,
)
from .rules import Firing, TickObservation, observation_from_trace
from .snapshot import AlertView, InstrumentView, Snapshot

METHODS = ("auto", "deconvolve", "narrowband")
MAX_ALERTS_SHOWN = 300
SNAPSHOT_ARRAYS_EVERY_S = 0.04   # waveform/spectrum arrays at most 25 times a second
TICK_EVERY_S = 1.0

# Exit statuses recorded in the store, with their exit codes; a worse one wins.
STATUS_CODES = {
    "completed": EXIT_OK,
    "operator": EXIT_OK,
    "stopped-by-rule": EXIT_STOPPED_BY_RULE,
    "instrument-failure": EXIT_INSTRUMENT,
    "internal-error": EXIT_INSTRUMENT,
    "store-error": EXIT_STORE,
}
_STATUS_RANK = ("completed", "operator", "stopped-by-rule", "instrument-failure",
                "internal-error", "store-error")


class LiveSession:
    """One live session beside the tank.

    Build it with :meth:`from_bench` for real instruments; the keyword constructor
    takes the pieces directly (tests give it fakes).

    Parameters
    ----------
    open_digitiser : callable () -> OpenInstrument
        Opens the digitiser and applies its settings; called again to reconnect.
    open_generator : callable () -> OpenInstrument, or None
    converter : Converter
        ``.process(voltage_v, dt_s) -> TraceResult`` and ``.with_method(m)``.
    rules : RuleEngine
    open_store : callable (path, metadata) -> SessionStore
    metadata : callable (identities: dict) -> dict
        Builds the session metadata once the instrument identities are known.
    session_path : Path
    trigger_timeout_s : float
    queue_capacity : int
        Bound of the raw-trace queue and of the writer's queue.
    max_traces, duration_s : optional
        Stop cleanly after so many traces or seconds.
    give_up_s : float
        How long to try to reconnect a lost digitiser before ending the session.
    bell : callable () -> None, optional
        Rings the terminal bell (headless); None leaves the bell to the display.
    gate : bool
        Judge trace N before acquiring N+1 (see the module docstring).
    autorange_options : dict, optional
        Keywords for :func:`tankside.monitor.live.autorange.range_after` (``fit_below``,
        ``up_on_clip``).
    resources : dict, optional
        Name -> resource string, for the instrument status view.
    """

    def __init__(self, *, open_digitiser: Callable[[], OpenInstrument],
                 open_generator: Callable[[], OpenInstrument] | None, converter, rules,
                 open_store: Callable[[Path, dict], Any], metadata: Callable[[dict], dict],
                 session_path: str | Path, trigger_timeout_s: float = 2.0,
                 queue_capacity: int = 64, max_traces: int | None = None,
                 duration_s: float | None = None, give_up_s: float = 60.0,
                 bell: Callable[[], None] | None = None, gate: bool = True,
                 autorange_options: dict | None = None, resources: dict | None = None,
                 method: str | None = None):
        self.session_path = Path(session_path)
        self._converter = converter
        self._rules = rules
        self._open_store = open_store
        self._metadata = metadata
        self._bell = bell
        self._duration_s = duration_s
        self._autorange_options = dict(autorange_options or {})
        self._resources = dict(resources or {})
        self._method = method or _method_of(converter)
        self._stop = threading.Event()
        self._raw_q: queue.Queue = queue.Queue(maxsize=queue_capacity)
        self._items_q: queue.Queue = queue.Queue(maxsize=queue_capacity)
        self._acq = AcquisitionLoop(open_digitiser=open_digitiser,
                                    open_generator=open_generator, out=self._raw_q,
                                    stop=self._stop, trigger_timeout_s=trigger_timeout_s,
                                    give_up_s=give_up_s, max_traces=max_traces, gate=gate)
        self._writer = Writer(lambda: self._open_store(self.session_path, self._meta),
                              self._items_q, self._counts)
        self._meta: dict = {}
        self._threads: list[threading.Thread] = []
        self._done = threading.Event()
        self._started = False
        self._status: str | None = None
        self._reason = ""
        self._message = ""
        self._lock = threading.Lock()       # guards the stop status and the alert list
        self._alerts: list[AlertView] = []
        self._next_alert_id = 1
        self._figures = FigureSet()
        self._rate = RateMeter()
        self._acquired = 0
        self._converted = 0
        self._failed = 0
        self._clipped = 0
        self._t_start_mono = time.monotonic()
        self._last_arrays_mono = 0.0
        self._latest: tuple | None = None
        self._pending_method: str | None = None
        self._range_v = float("nan")
        self._fraction = float("nan")
        # Generator output as processing knows it (from the acquisition's events).
        self._drive_on: bool | None = None
        self._drive_cause = ""
        self._pulse_present: bool | None = None
        self._no_pulse = 0
        self._snap = Snapshot(session_path=str(self.session_path), state="starting")
        self.message_for_operator = ""

    # ---------------------------------------------------------------- construction
    @classmethod
    def from_bench(cls, bench, *, session_path: str | Path | None = None,
                   max_traces: int | None = None, duration_s: float | None = None,
                   bell: Callable[[], None] | None = None) -> LiveSession:
        """A session on the instruments of a :class:`~tankside.monitor.live.benchfile.BenchConfig`.

        Loads the calibration and builds the converter and rules here, so that a bad
        file is reported before any instrument is touched.
        """
        from ..record.store import SessionStore, session_metadata
        from . import instruments
        from .rules import RuleEngine

        calibration = bench.calibration()
        loading = bench.loading()
        settings = bench.conversion_settings()
        from ..acoustics.converter import Converter

        converter = Converter(calibration, loading=loading, settings=settings,
                              temperature_c=bench.temperature_c)
        rules = RuleEngine(bench.alert_config())
        dig_settings = bench.digitiser_settings()
        path = new_session_path(bench.session_folder, session_path)
        open_dig = instruments.digitiser_opener(bench.digitiser, dig_settings)
        open_gen = (instruments.generator_opener(bench.generator)
                    if bench.generator is not None else None)

        def metadata(identities: dict) -> dict:
            return session_metadata(
                configuration=bench.tables, instruments=identities, calibration=calibration,
                loading=loading, settings=settings, temperature_c=bench.temperature_c,
                extra={"bench_file": bench.source})

        def open_store(p, meta):
            return SessionStore.create(p, meta, commit_interval_s=bench.commit_interval_s)

        resources = {"digitiser": bench.digitiser.resource}
        if bench.generator is not None:
            resources["generator"] = bench.generator.resource
        return cls(open_digitiser=open_dig, open_generator=open_gen, converter=converter,
                   rules=rules, open_store=open_store, metadata=metadata, session_path=path,
                   trigger_timeout_s=bench.trigger_timeout_s,
                   queue_capacity=bench.queue_capacity, max_traces=max_traces,
                   duration_s=duration_s, give_up_s=bench.reconnect_give_up_s, bell=bell,
                   resources=resources)

    # ---------------------------------------------------------------- public API
    def start(self) -> None:
        """Connect the instruments, create the session file and start the threads.

        Raises the instrument or store error when either cannot be opened (nothing
        keeps running then).
        """
        if self._started:
            raise RuntimeError("session already started")
        self._started = True
        try:
            self._acq.connect()
        except BaseException:
            self._done.set()        # never ran: not running, nothing to wait for
            raise
        identities = {}
        for name, link in (("digitiser", self._acq.digitiser), ("generator", self._acq.generator)):
            if link is not None:
                identities[name] = {"resource": self._resources.get(name, ""),
                                    "identity": link.identity}
        try:
            self._meta = self._metadata(identities)
            wt = threading.Thread(target=self._writer.run, name="tankside-writer", daemon=True)
            wt.start()
            self._writer.ready.wait()
            if self._writer.open_error is not None:
                raise self._writer.open_error
        except BaseException:
            self._acq.close_links()
            self._done.set()
            raise
        self._range_v = self._acq.current_range_v()
        self._t_start_mono = time.monotonic()
        self._acq.last_trigger_mono = self._t_start_mono
        pt = threading.Thread(target=self._process_main, name="tankside-processing",
                              daemon=True)
        at = threading.Thread(target=self._acquire_main, name="tankside-acquisition",
                              daemon=True)
        self._threads = [wt, pt, at]
        self._publish(state="running")
        pt.start()
        at.start()

    def snapshot(self) -> Snapshot:
        """The latest state, with live counters; never blocks."""
        snap = self._snap
        depth, cap = self._queue_load()
        return dataclasses.replace(
            snap, acquired=self._acq.seq, converted=self._converted,
            clipped_traces=self._clipped, stored=self._writer.stored,
            queue_depth=depth, queue_capacity=cap, elapsed_s=self.elapsed_s,
            session_bytes=self._writer.size_bytes(),
            state=self._state_now(snap.state))

    def mark(self, note: str) -> None:
        """Record an operator mark (an event with the note)."""
        self._put(EventItem(time.time(), "mark", {"note": str(note)}, seq=self._last_seq()))

    def acknowledge(self, alert_id: int) -> None:
        """Acknowledge an alert shown in the snapshot (recorded in the store)."""
        with self._lock:
            for view in self._alerts:
                if view.alert_id == alert_id:
                    view.acknowledged = True
                    break
            else:
                return
            self._alerts = list(self._alerts)
        self._snap = dataclasses.replace(self._snap, alerts=self._alerts_copy())
        self._put(AckItem(alert_id, time.time()))

    def set_method(self, method: str) -> None:
        """Switch the conversion method from the next trace on (recorded as an event)."""
        if method not in METHODS:
            raise ValueError(f"method must be one of {', '.join(METHODS)}, not {method!r}")
        self._pending_method = method

    def stop(self, reason: str = "operator") -> None:
        """Ask the session to stop cleanly; returns at once (see :meth:`wait`)."""
        self._request_stop("operator", reason)

    def wait(self, timeout_s: float | None = None) -> bool:
        """Wait until the session has finished; True when it has."""
        return self._done.wait(timeout_s)

    @property
    def running(self) -> bool:
        return self._started and not self._done.is_set()

    @property
    def exit_code(self) -> int:
        return STATUS_CODES.get(self._status or "completed", EXIT_OK)

    @property
    def exit_status(self) -> str:
        return self._status or ""

    @property
    def stop_reason(self) -> str:
        return self._reason

    @property
    def elapsed_s(self) -> float:
        return time.monotonic() - self._t_start_mono

    @property
    def method(self) -> str:
        return self._method

    # ---------------------------------------------------------------- internals
    def _last_seq(self) -> int | None:
        return self._snap.seq if self._snap.seq >= 0 else None

    def _state_now(self, published: str) -> str:
        if self._done.is_set():
            return "stopped"
        if self._stop.is_set():
            return "stopping"
        if self._acq.reconnecting:
            return "reconnecting"
        return published

    def _queue_load(self) -> tuple[int, int]:
        # Report the fuller of the two queues: with the verdict gate the raw queue
        # stays short and a slow disk shows up in the writer's queue.
        loads = [(self._raw_q.qsize(), self._raw_q.maxsize),
                 (self._items_q.qsize(), self._items_q.maxsize)]
        return max(loads, key=lambda dc: dc[0] / dc[1] if dc[1] else 0.0)

    def _counts(self) -> dict:
        return {"acquired": self._acq.seq, "converted": self._converted,
                "conversion_failed": self._failed, "stored": self._writer.stored,
                "committed": self._writer.committed,
                "clipped": self._clipped}

    def _request_stop(self, status: str, reason: str, message: str = "") -> None:
        with self._lock:
            if self._status is None or (_STATUS_RANK.index(status)
                                        > _STATUS_RANK.index(self._status)):
                self._status = status
                self._reason = reason
                if message:
                    self._message = message
                    self.message_for_operator = message
        self._stop.set()

    def _put(self, item) -> None:
        """Hand an item to the writer; blocks while its queue is full, unless it died."""
        while True:
            if self._writer.error is not None or self._writer.closed:
                return
            try:
                self._items_q.put(item, timeout=0.1)
                return
            except queue.Full:
                continue

    # -- acquisition thread -------------------------------------------------------
    def _acquire_main(self) -> None:
        try:
            self._acq.run()
        except BaseException as err:  # a bug: record it, end the session, show it
            traceback.print_exc(file=sys.stderr)
            self._request_stop("internal-error", f"acquisition: {type(err).__name__}: {err}")
        finally:
            if self._acq.fatal is not None:
                self._request_stop("instrument-failure", self._acq.fatal, self._acq.fatal)
            elif self._acq.max_traces is not None and self._acq.seq >= self._acq.max_traces:
                self._request_stop("completed", f"{self._acq.max_traces} traces acquired")
            self._stop.set()
            while True:
                try:
                    self._raw_q.put(END, timeout=0.1)
                    break
                except queue.Full:
                    if self._acq.abandon.is_set():
                        break

    # -- processing thread --------------------------------------------------------
    def _process_main(self) -> None:
        try:
            self._process_loop()
        except BaseException as err:  # a bug: record it, end the session, show it
            traceback.print_exc(file=sys.stderr)
            self._request_stop("internal-error", f"processing: {type(err).__name__}: {err}")
            self._acq.abandon.set()
            self._acq.verdict(1 << 62)
            self._drain_raw()
        finally:
            self._finish()

    def _drain_raw(self) -> None:
        while True:
            try:
                if self._raw_q.get(timeout=0.2) is END:
                    return
            except queue.Empty:
                if not self._threads[2].is_alive():
                    return

    def _process_loop(self) -> None:
        next_tick = time.monotonic() + TICK_EVERY_S
        while True:
            try:
                item = self._raw_q.get(timeout=0.1)
            except queue.Empty:
                item = None
            now = time.monotonic()
            if now >= next_tick:
                next_tick = now + TICK_EVERY_S
                self._tick()
            if self._writer.error is not None:
                self._request_stop("store-error", str(self._writer.error),
                                   f"session store failed: {self._writer.error}")
            if (self._duration_s is not None and not self._stop.is_set()
                    and self.elapsed_s >= self._duration_s):
                self._request_stop("completed", f"duration {self._duration_s:g} s reached")
            if item is None:
                if now - self._last_arrays_mono >= SNAPSHOT_ARRAYS_EVERY_S:
                    self._flush_latest()
                continue
            if item is END:
                return
            if isinstance(item, AcqEvent):
                self._on_event(item)
            elif isinstance(item, Acquired):
                self._on_trace(item)

    def _finish(self) -> None:
        status = self._status or "completed"
        if self._status is None:
            self._status = status
        self._put(CloseItem(status, self._reason or status, self._counts))
        self._threads[0].join()
        if self._writer.error is not None:
            self._request_stop("store-error", str(self._writer.error),
                               f"session store failed: {self._writer.error}; data committed "
                               f"before it is intact in {self.session_path}")
        self._flush_latest()
        self._publish(state="stopped")
        self._done.set()

    def _tick(self) -> None:
        try:
            free = shutil.disk_usage(self.session_path.parent).free
        except OSError:
            free = None
        depth, cap = self._queue_load()
        now_s = time.time()
        tick = TickObservation(now_s=now_s,
                               since_trigger_s=time.monotonic() - self._acq.last_trigger_mono,
                               queue_depth=depth, queue_capacity=cap, disk_free_bytes=free,
                               store_lag_s=self._writer.store_lag_s(now_s))
        self._handle_firings(self._rules.on_tick(tick), raw=None, fraction=float("nan"))
        self._flush_latest()
        self._publish()

    def _on_event(self, ev: AcqEvent) -> None:
        kind = ev.kind
        if kind == "fault" and ev.detail.get("kind") == "connection-lost":
            kind = "connection-lost"
        self._put(EventItem(ev.time_s, kind, ev.detail, seq=ev.seq))
        if ev.alert is not None:
            rule, severity, message = ev.alert
            self._handle_firings([Firing(rule=rule, severity=severity, message=message,
                                         actions=("record",), seq=ev.seq, detail=ev.detail,
                                         time_s=ev.time_s)], raw=None, fraction=float("nan"))
        if kind == "range-change" and ev.detail.get("done"):
            self._range_v = float(ev.detail["to_v"])
        if kind in (EVENT_DRIVE_ON, EVENT_DRIVE_OFF):
            self._drive_on = kind == EVENT_DRIVE_ON
            self._drive_cause = str(ev.detail.get("cause", ""))
            self._publish()
        elif kind == "fault" and ev.detail.get("kind") == "generator-query":
            self._drive_on = None
            self._drive_cause = ""
            self._publish()

    def _on_trace(self, item: Acquired) -> None:
        raw = item.raw
        self._rate.add(time.monotonic())
        if self._pending_method is not None:
            self._switch_method(self._pending_method, raw.seq)
        volts = raw.volts()
        result = None
        flat = None
        error = None
        try:
            result = self._converter.process(volts, raw.dt_s)
            flat = result.flat()
            self._converted += 1
        except TanksideError as err:
            error = f"{type(err).__name__}: {err}"
            self._failed += 1
        obs = observation_from_trace(raw, flat, error, method_in_use=self._method,
                                     volts_v=volts, drive_on=self._drive_on,
                                     **self._rules.presence_options())
        self._range_v = raw.range_v
        self._fraction = obs.fraction_of_full_scale
        self._pulse_present = obs.pulse_present
        firings = self._rules.on_trace(obs)
        self._handle_firings(firings, raw=raw, fraction=obs.fraction_of_full_scale)
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
        if raw.clipped:
            self._clipped += 1
        if flat is not None and not obs.quiet:
            # noise converted to "pressure" is no figure of the field
            self._figures.add(flat)
        self._put(TraceItem(raw, flat, flags, error))
        self._publish_trace(raw, volts, result, flat)

    def _switch_method(self, method: str, seq: int) -> None:
        self._pending_method = None
        if method == self._method:
            return
        old = self._method
        self._converter = self._converter.with_method(method)
        self._method = method
        self._put(EventItem(time.time(), "method-change", {"from": old, "to": method},
                            seq=seq))

    def _handle_firings(self, firings, *, raw, fraction: float) -> None:
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
                self._put(AlertItem(alert_id, time_s, firing.rule, firing.severity,
                                    firing.message, actions, firing.seq))
            cause = {"rule": firing.rule, "seq": firing.seq}
            if "safe-off" in actions:
                self._acq.commands.put(("safe-off", cause))
            if "auto-range" in actions and raw is not None:
                self._auto_range(firing, cause)
            if "bell" in actions and self._bell is not None:
                self._bell()
            if "stop" in actions:
                self._request_stop("stopped-by-rule", f"{firing.rule}: {firing.message}")
        if firings:
            self._snap = dataclasses.replace(self._snap, alerts=self._alerts_copy())

    def _auto_range(self, firing, cause: dict) -> None:
        ranges = self._acq.ranges_v
        if not ranges:
            return
        # A firing judged on a trace from before a range change is stale: range_after
        # returns None for it, so one condition never takes two steps.
        new_v = range_after(firing, ranges, current_v=self._acq.current_range_v(),
                            **self._autorange_options)
        if new_v is not None:
            self._acq.commands.put(("range", float(new_v), cause))

    def _alerts_copy(self) -> list[AlertView]:
        with self._lock:
            return [dataclasses.replace(a) for a in self._alerts]

    def _instrument_views(self) -> list[InstrumentView]:
        views = []
        for name, link in (("digitiser", self._acq.digitiser), ("generator", self._acq.generator)):
            if link is None:
                continue
            connected = self._acq.connected if name == "digitiser" else True
            detail = self._drive_text() if name == "generator" else ""
            views.append(InstrumentView(name=name, resource=self._resources.get(name, ""),
                                        identity=link.identity, connected=connected,
                                        detail=detail))
        return views

    def _drive_text(self) -> str:
        if self._drive_on is None:
            return "output state unknown"
        if self._drive_on:
            return "output on"
        return "output off (safe-off)" if self._drive_cause == "safe-off" else "output off"

    def _publish(self, state: str | None = None, **fields) -> None:
        snap = dataclasses.replace(
            self._snap, **fields, converted=self._converted,
            traces_per_s=self._rate.rate(time.monotonic()),
            range_v=self._range_v, range_fraction_used=self._fraction,
            clipped_traces=self._clipped, instruments=self._instrument_views(),
            drive_on=self._drive_on,
            drive_detail=self._drive_text() if self._acq.generator is not None else "",
            pulse_present=self._pulse_present, no_pulse_traces=self._no_pulse,
            state=state or self._snap.state, stop_reason=self._reason)
        self._snap = snap

    def _publish_trace(self, raw, volts, result, flat, *, force: bool = False) -> None:
        # A snapshot is rebuilt at most SNAPSHOT_ARRAYS_EVERY_S apart (displays refresh
        # 10 to 20 times a second); in between only the latest trace is remembered, so
        # the waveform, spectrum, result and seq of a snapshot always belong together.
        self._latest = (raw, volts, result, flat)
        now = time.monotonic()
        if not force and now - self._last_arrays_mono < SNAPSHOT_ARRAYS_EVERY_S:
            return
        self._last_arrays_mono = now
        self._latest = None
        fields: dict[str, Any] = {"seq": raw.seq, "time_s": raw.time_s, "method": self._method,
                                  "figures": self._figures.views(),
                                  "times_s": raw.times(), "voltage_v": np.array(volts)}
        if flat is not None:
            fields.update(result=dict(flat), narrowband_ok=_opt_bool(flat.get("narrowband_ok")),
                          narrowband_band_hz=(float(flat.get("narrowband_band_low_hz", np.nan)),
                                              float(flat.get("narrowband_band_high_hz",
                                                             np.nan))),
                          narrowband_max_deviation_db=float(
                              flat.get("narrowband_max_deviation_db", np.nan)),
                          method=str(flat.get("method", self._method)))
            fields.update(_result_arrays(result, flat))
        else:
            fields.update(pressure_pa=np.zeros(0), freqs_hz=np.zeros(0),
                          spectrum_db=np.zeros(0), sensitivity_db=np.zeros(0), result={},
                          narrowband_ok=None)
        self._publish(**fields)

    def _flush_latest(self) -> None:
        latest = self._latest
        if latest is not None:
            self._publish_trace(*latest, force=True)


def _result_arrays(result, flat: dict) -> dict:
    spec = np.asarray(result.spectrum_pa, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        top = float(np.nanmax(spec)) if spec.size else 0.0
        spectrum_db = 20.0 * np.log10(spec / top) if top > 0 else np.full_like(spec, np.nan)
        sens = np.abs(np.asarray(result.sensitivity_v_per_pa))
        freqs = np.asarray(result.freqs_hz, dtype=float)
        f_awf = float(flat.get("acoustic_working_frequency_hz", np.nan))
        ref = np.nan
        if np.isfinite(f_awf) and freqs.size:
            finite = np.isfinite(sens)
            if finite.any():
                ref = float(np.interp(f_awf, freqs[finite], sens[finite]))
        sensitivity_db = 20.0 * np.log10(sens / ref) if np.isfinite(ref) and ref > 0 else \
            np.full_like(freqs, np.nan)
    return {"pressure_pa": np.array(result.pressure_pa, dtype=float), "freqs_hz": freqs.copy(),
            "spectrum_db": spectrum_db, "sensitivity_db": sensitivity_db}


def _opt_bool(value) -> bool | None:
    if value is None:
        return None
    try:
        if isinstance(value, float) and not np.isfinite(value):
            return None
    except TypeError:
        return None
    return bool(value)


def _method_of(converter) -> str:
    settings = getattr(converter, "settings", None)
    return str(getattr(settings, "method", "auto"))


def new_session_path(folder: str | Path, session_path: str | Path | None = None) -> Path:
    """The session file to create: ``session_path``, or a new name in ``folder``.

    Raises
    ------
    ConfigError
        The file exists already, or its folder cannot be made.
    """
    from ..errors import ConfigError

    path = Path(session_path) if session_path is not None else default_session_path(folder)
    if path.exists():
        raise ConfigError(f"{path}: session file already exists (choose a new name)")
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
    except OSError as err:
        raise ConfigError(f"{path.parent}: cannot create the session folder: {err}") from err
    return path


def default_session_path(folder: str | Path) -> Path:
    """``FOLDER/session-YYYYmmdd-HHMMSS.db`` (local time), with a suffix if taken."""
    folder = Path(folder)
    stem = time.strftime("session-%Y%m%d-%H%M%S")
    path = folder / f"{stem}.db"
    n = 1
    while path.exists():
        path = folder / f"{stem}-{n}.db"
        n += 1
    return path
