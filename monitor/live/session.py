"""The live session: the threads of one run beside the tank, and its stop status.

Three threads, joined by bounded queues::

    acquisition (live.acquisition) --raw--> processing (live.processing) --items--> recorder

* Acquisition does the blocking instrument I/O and the instrument actions. A full
  queue blocks it: acquisition is throttled, no trace is dropped.
* Processing runs :class:`~tankside.monitor.live.processing.TraceProcessor` on each
  trace and event, and the once-a-second rules (disk, queue, store lag, no trigger).
* The recorder (:mod:`tankside.monitor.live.recorder`) owns the session store.

Safe-off ordering: after putting trace N in the queue, the acquisition thread waits
until processing has judged trace N (and queued its actions) before it acquires
trace N+1 (``gate=True``, the default). Processing is fast beside an acquisition, so
this costs little, and a safe-off decided on trace N always comes before trace N+1.

Building a session from a bench file is :mod:`tankside.monitor.live.build`. Displays
(the dashboard, :mod:`tankside.monitor.headless`) call only the public methods of
:class:`LiveSession`; they never touch a driver.
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

from ..acoustics.settings import Method
from ..errors import ConfigError
from ..outcome import ExitStatus
from ..record.schema import EventKind
from .acquisition import AcqEvent, Acquired, AcquisitionLoop, OpenInstrument
from .benchfile import DEFAULT_MAX_AGE_S
from .generator import DEFAULT_SAFE_OFF_GIVE_UP_S, DriveOff, DriveOn, GeneratorWorker
from .locks import InstrumentLock
from .processing import TraceProcessor
from .recorder import END, AckItem, CloseItem, EventItem, Writer
from .rules import TickObservation
from .scan import ScanCollector, ScanResume, ScanRunner
from .serial_ports import StagePort, ThermometerPort
from .snapshot import Snapshot
from .stage import POLL_S as STAGE_POLL_S
from .stage import StageWorker
from .thermometer import POLL_S as THERMOMETER_POLL_S
from .thermometer import ThermometerWorker

TICK_EVERY_S = 1.0


class LiveSession:
    """One live session beside the tank.

    Build it with :meth:`from_bench` for real instruments; the keyword constructor
    takes the pieces directly (tests give it fakes).

    Parameters
    ----------
    open_digitiser : callable () -> OpenInstrument
        Opens the digitiser and applies its settings; called again to reconnect.
    open_generator : callable () -> OpenInstrument, or None
        Connects and identifies the generator (sets nothing); called again to reopen.
    apply_generator_settings : callable (device) -> None, optional
        Applies the bench's generator settings with the output off, once, after the
        session file exists.
    drive_on_at_start : str, optional
        Switch the generator output on once the session runs, recorded with this
        cause (``--drive-on``, the demo). None (the default) never switches it on.
    leave_drive_on_at_end : bool
        False (the default): the output is switched off, and confirmed off, when the
        session ends, however it ends.
    safe_off_give_up_s : float
        How long a safe-off is retried before the session stops with the status
        ``drive-may-be-on``.
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
    open_stage : callable () -> StagePort, optional
        Opens the positioning stage (called again to reconnect); with ``stage_limits``,
        axis -> (low, high) in mm, the bench file's soft limits.
    open_thermometer : callable () -> ThermometerPort, optional
        Opens the water thermometer (called again to reconnect); ``max_age_s`` is the
        oldest reading a conversion uses, and ``bench_temperature_c`` the fallback.
    serial_poll_s : dict, optional
        ``"stage"`` / ``"thermometer"`` -> reading interval, s (defaults
        :data:`.stage.POLL_S`, :data:`.thermometer.POLL_S`).
    """

    def __init__(self, *, open_digitiser: Callable[[], OpenInstrument],
                 open_generator: Callable[[], OpenInstrument] | None, converter, rules,
                 open_store: Callable[[Path, dict], Any], metadata: Callable[[dict], dict],
                 session_path: str | Path, trigger_timeout_s: float = 2.0,
                 queue_capacity: int = 64, max_traces: int | None = None,
                 duration_s: float | None = None, give_up_s: float = 60.0,
                 bell: Callable[[], None] | None = None, gate: bool = True,
                 autorange_options: dict | None = None, resources: dict | None = None,
                 method: str | None = None,
                 apply_generator_settings: Callable[[Any], None] | None = None,
                 drive_on_at_start: str | None = None, leave_drive_on_at_end: bool = False,
                 safe_off_give_up_s: float = DEFAULT_SAFE_OFF_GIVE_UP_S,
                 open_stage: Callable[[], StagePort] | None = None,
                 stage_limits: dict[str, tuple[float, float]] | None = None,
                 open_thermometer: Callable[[], ThermometerPort] | None = None,
                 max_age_s: float = DEFAULT_MAX_AGE_S, bench_temperature_c: float = 20.0,
                 serial_poll_s: dict[str, float] | None = None,
                 scan_plan: Any = None, scan_resume: ScanResume | None = None,
                 beam_figures: Callable[[Any], dict] | None = None,
                 scan_passive: bool = False):
        self.session_path = Path(session_path)
        self._rules = rules
        self._open_store = open_store
        self._metadata = metadata
        self._duration_s = duration_s
        self._resources = dict(resources or {})
        self._stop = threading.Event()
        self._raw_q: queue.Queue = queue.Queue(maxsize=queue_capacity)
        self._items_q: queue.Queue = queue.Queue(maxsize=queue_capacity)
        self._gen: GeneratorWorker | None = None
        if open_generator is not None:
            # its events go into the acquisition's queue, in order with the traces
            self._gen = GeneratorWorker(
                open_generator=open_generator,
                apply_settings=apply_generator_settings or (lambda device: None),
                emit=lambda kind, detail, alert: self._acq.event(kind, detail, alert),
                current_seq=lambda: self._acq.seq, on_unsafe=self._drive_unsafe,
                safe_off_give_up_s=safe_off_give_up_s)
        # the stage and the thermometer: threads of their own, events in order with the traces
        polls = dict(serial_poll_s or {})
        self._stage: StageWorker | None = None
        if open_stage is not None:
            self._stage = StageWorker(
                open_stage=open_stage, limits=dict(stage_limits or {}),
                emit=lambda kind, detail, alert: self._acq.event(kind, detail, alert),
                current_seq=lambda: self._acq.seq,
                poll_s=polls.get("stage", STAGE_POLL_S))
        self._thermometer: ThermometerWorker | None = None
        if open_thermometer is not None:
            self._thermometer = ThermometerWorker(
                open_thermometer=open_thermometer,
                emit=lambda kind, detail, alert: self._acq.event(kind, detail, alert),
                current_seq=lambda: self._acq.seq,
                poll_s=polls.get("thermometer", THERMOMETER_POLL_S))
        self._scan_resume = scan_resume
        first_seq = 0 if scan_resume is None else scan_resume.first_seq
        self._acq = AcquisitionLoop(open_digitiser=open_digitiser, out=self._raw_q,
                                    stop=self._stop, trigger_timeout_s=trigger_timeout_s,
                                    give_up_s=give_up_s, max_traces=max_traces, gate=gate,
                                    first_seq=first_seq,
                                    hold=None if self._gen is None else self._gen.hold)
        self._scan: ScanCollector | None = None
        self._scan_runner: ScanRunner | None = None
        if scan_plan is not None:
            if self._stage is None:
                raise ConfigError("a scan needs a stage: the bench file has no [stage]")
            self._scan = ScanCollector(
                scan_plan, completed=() if scan_resume is None else scan_resume.completed,
                beam_figures=beam_figures,
                convert=lambda v, dt, res: self._proc.convert_waveform(v, dt, res))
            self._scan_runner = ScanRunner(
                plan=scan_plan, collector=self._scan, stage=self._stage,
                next_seq=lambda: self._acq.seq, drive_on=lambda: self._proc.drive_on,
                needs_drive=self._gen is not None,
                emit=lambda kind, detail, alert: self._acq.event(kind, detail, alert),
                finished=self._scan_finished, stop=self._stop,
                resumed=scan_resume is not None, passive=scan_passive)
        self._drive_on_at_start = drive_on_at_start
        self._locks: list[InstrumentLock] = []
        self._leave_drive_on = bool(leave_drive_on_at_end)
        self._writer = Writer(lambda: self._open_store(self.session_path, self._meta),
                              self._items_q, self._counts)
        self._meta: dict = {}
        self._proc = TraceProcessor(
            converter=converter, rules=rules, acquisition=self._acq, generator=self._gen,
            record=self._put,
            stop_by_rule=lambda reason: self._request_stop(ExitStatus.STOPPED_BY_RULE, reason),
            session_path=self.session_path, method=method or _method_of(converter),
            bell=bell, autorange_options=autorange_options, resources=self._resources,
            stage=self._stage, thermometer=self._thermometer, max_age_s=max_age_s,
            bench_temperature_c=bench_temperature_c, scan=self._scan,
            on_safe_off=self._halt_scan)
        self._writer_thread: threading.Thread | None = None
        self._acquisition_thread: threading.Thread | None = None
        self._done = threading.Event()
        self._started = False
        self._status: ExitStatus | None = None
        self._reason = ""
        self._message = ""
        self._lock = threading.Lock()       # guards the stop status
        self._t_start_mono = time.monotonic()
        self.message_for_operator = ""

    # ---------------------------------------------------------------- construction
    @classmethod
    def from_bench(cls, bench: Any, *, session_path: str | Path | None = None,
                   max_traces: int | None = None, duration_s: float | None = None,
                   bell: Callable[[], None] | None = None,
                   drive_on_at_start: str | None = None, scan_plan: Any = None,
                   resume: bool = False, passive: bool = False) -> LiveSession:
        """A session on the instruments of a bench file (see :mod:`.build`).

        ``drive_on_at_start`` (the cause, e.g. ``"--drive-on"``) switches the generator
        output on once the session runs; None never does. ``scan_plan`` (a
        :class:`~tankside.monitor.live.scanplan.ScanPlan`) runs a scan, recorded in the
        file's metadata; ``resume`` goes on with the scan recorded in ``session_path``
        (its own plan; ``scan_plan`` is not given then); ``passive`` never moves the
        stage (another program does).
        """
        from .build import scan_parts

        return cls(**scan_parts(bench, session_path=session_path, scan_plan=scan_plan,
                                resume=resume),
                   max_traces=max_traces, duration_s=duration_s, bell=bell,
                   drive_on_at_start=drive_on_at_start, scan_passive=passive)

    # ---------------------------------------------------------------- public API
    def start(self) -> None:
        """Connect the instruments, create the session file and start the threads.

        Order: the digitiser is connected and configured, the generator connected and
        identified (nothing is set on it), the session file created, and only then are
        the generator's settings applied, with its output off. A start that fails
        before the file exists touches no generator setting and leaves no file; one
        that fails applying the generator's settings ends the file as an instrument
        failure. The output is never switched on here (see ``drive_on_at_start``).

        Raises the instrument or store error when either cannot be opened (nothing
        keeps running then).
        """
        if self._started:
            raise RuntimeError("session already started")
        self._started = True
        try:
            self._lock_instruments()
            self._acq.connect()
            if self._gen is not None:
                self._gen.connect()
            if self._stage is not None:
                self._stage.connect()
            if self._thermometer is not None:
                self._thermometer.connect()
        except BaseException:
            self._close_instruments()
            self._done.set()        # never ran: not running, nothing to wait for
            raise
        digitiser = self._acq.digitiser
        identities = {"digitiser": {"resource": self._resources.get("digitiser", ""),
                                    "identity": digitiser.identity if digitiser else ""}}
        if self._gen is not None:
            identities["generator"] = {"resource": self._resources.get("generator", ""),
                                       "identity": self._gen.identity}
        if self._stage is not None:
            identities["stage"] = {"resource": self._resources.get("stage", ""),
                                   "identity": self._stage.identity,
                                   "axes": list(self._stage.axes)}
        if self._thermometer is not None:
            identities["thermometer"] = {"resource": self._resources.get("thermometer", ""),
                                         "identity": self._thermometer.identity}
        wt = threading.Thread(target=self._writer.run, name="tankside-writer", daemon=True)
        try:
            self._meta = self._metadata(identities)
            wt.start()
            self._writer.ready.wait()
            if self._writer.open_error is not None:
                raise self._writer.open_error
        except BaseException:
            self._close_instruments()
            if not wt.is_alive():
                _remove_unwritten(self.session_path)
            self._done.set()
            raise
        self._writer_thread = wt
        if self._scan_resume is not None:
            r = self._scan_resume
            self._put(EventItem(time.time(), EventKind.SCAN_RESUMED, {
                "first_point": r.first_point, "completed": len(r.completed),
                "previous_stop": r.previous_stop, "first_seq": r.first_seq,
                "configuration": r.configuration}))
        if self._gen is not None:
            try:
                self._gen.apply_settings()
            except BaseException as err:
                self._close_instruments()
                self._status = ExitStatus.INSTRUMENT_FAILURE
                self._reason = f"generator: {err}"
                self._put(CloseItem(self._status, self._reason, self._counts))
                wt.join()
                self._done.set()
                raise
        self._proc.set_range(self._acq.current_range_v())
        self._t_start_mono = time.monotonic()
        self._acq.last_trigger_mono = self._t_start_mono
        pt = threading.Thread(target=self._process_main, name="tankside-processing",
                              daemon=True)
        at = threading.Thread(target=self._acquire_main, name="tankside-acquisition",
                              daemon=True)
        self._acquisition_thread = at
        self._proc.publish(state="running")
        pt.start()
        if self._gen is not None:
            # asked before the first acquisition, which then waits for it (hold)
            if self._drive_on_at_start:
                self._gen.request(DriveOn(self._drive_on_at_start))
            self._gen.start()
        if self._stage is not None:
            self._stage.start()
        if self._thermometer is not None:
            self._thermometer.start()
        at.start()
        if self._scan_runner is not None:
            self._scan_runner.start()

    def prepare(self) -> None:
        """Nothing to prepare in this process (see ``SessionProcess.prepare``)."""

    def switch_drive(self, on: bool, cause: str = "operator") -> None:
        """Switch the generator output on or off: an operator's action, recorded as an
        event with ``cause``. Returns at once; the state read back is in the snapshot.

        Raises
        ------
        ConfigError
            The bench has no generator.
        """
        if self._gen is None:
            raise ConfigError("the bench has no generator to switch")
        self._gen.request(DriveOn(str(cause)) if on else DriveOff(str(cause)))

    def move_stage(self, target: dict[str, float]) -> dict[str, float]:
        """Move the stage (absolute, axis -> mm; only the axes given); returns at once
        with the checked target. The move is recorded as an event; the snapshot's
        ``bench`` shows the position as the stage reports it.

        Raises
        ------
        ConfigError
            The bench has no stage.
        OutsideLimitsError
            A target outside the bench file's soft limits; nothing is sent.
        ConnectionLost
            The stage is lost (being reconnected); nothing is sent.
        """
        if self._stage is None:
            raise ConfigError("the bench has no stage to move")
        return self._stage.request_move(dict(target))

    def stop_stage(self, cause: str = "operator") -> None:
        """Stop the stage at once (recorded as an event)."""
        if self._stage is None:
            raise ConfigError("the bench has no stage to stop")
        self._stage.request_stop(str(cause))

    def snapshot(self) -> Snapshot:
        """The latest state, with live counters; never blocks."""
        snap = self._proc.snap
        depth, cap = self._queue_load()
        return dataclasses.replace(
            snap, acquired=self._acq.seq, converted=self._proc.converted,
            clipped_traces=self._proc.clipped, stored=self._writer.stored,
            queue_depth=depth, queue_capacity=cap, elapsed_s=self.elapsed_s,
            session_bytes=self._writer.size_bytes(),
            state=self._state_now(snap.state))

    def mark(self, note: str) -> None:
        """Record an operator mark (an event with the note)."""
        item = EventItem(time.time(), EventKind.MARK, {"note": str(note)},
                         seq=self._proc.last_seq())
        self._proc.note_event(item)
        self._put(item)

    def acknowledge(self, alert_id: int) -> None:
        """Acknowledge an alert shown in the snapshot (recorded in the store)."""
        if self._proc.acknowledge(alert_id):
            self._put(AckItem(alert_id, time.time()))

    def set_method(self, method: str) -> None:
        """Switch the conversion method from the next trace on (recorded as an event)."""
        if method not in list(Method):
            raise ValueError(f"method must be one of {', '.join(Method)}, not {method!r}")
        self._proc.pending_method = Method(method)

    def reset_figures(self, cause: str = "operator") -> None:
        """Start the running figures afresh from the next trace (recorded as an event)."""
        self._proc.pending_reset = str(cause)

    def stop(self, reason: str = "operator") -> None:
        """Ask the session to stop cleanly; returns at once (see :meth:`wait`)."""
        self._request_stop(ExitStatus.OPERATOR, reason)

    def wait(self, timeout_s: float | None = None) -> bool:
        """Wait until the session has finished; True when it has (or never started)."""
        if not self._started:
            return True
        return self._done.wait(timeout_s)

    @property
    def running(self) -> bool:
        return self._started and not self._done.is_set()

    @property
    def exit_code(self) -> int:
        return (self._status or ExitStatus.COMPLETED).exit_code

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
        return self._proc.method

    # ---------------------------------------------------------------- internals
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
        return {"acquired": self._acq.seq, "converted": self._proc.converted,
                "conversion_failed": self._proc.failed, "stored": self._writer.stored,
                "committed": self._writer.committed,
                "clipped": self._proc.clipped}

    def _request_stop(self, status: ExitStatus, reason: str, message: str = "") -> None:
        if self._done.is_set():
            return          # ended: its status is final (a stop asked after the end)
        with self._lock:
            if self._status is None or status.rank > self._status.rank:
                self._status = status
                self._reason = reason
                if message:
                    self._message = message
                    self.message_for_operator = message
        self._stop.set()

    def _scan_finished(self, why: str, complete: bool) -> None:
        if complete:
            total = 0 if self._scan is None else self._scan.total
            self._request_stop(ExitStatus.COMPLETED, f"scan complete ({total} points)")
        elif why.startswith("safe-off"):
            self._request_stop(ExitStatus.STOPPED_BY_RULE, f"scan ended: {why}")
        elif why.startswith("scan thread"):
            self._request_stop(ExitStatus.INTERNAL_ERROR, why)

    def _halt_scan(self, why: str) -> None:
        if self._scan_runner is not None:
            self._scan_runner.halt(why)

    def _drive_unsafe(self, message: str) -> None:
        self._request_stop(ExitStatus.DRIVE_MAY_BE_ON, "output not confirmed off", message)

    def _lock_instruments(self) -> None:
        # every instrument this session opens (the resources are only those it opens)
        for resource in filter(None, self._resources.values()):
            lock = InstrumentLock(resource, session_path=str(self.session_path))
            lock.acquire()
            self._locks.append(lock)

    def _close_instruments(self) -> None:
        self._acq.close_links()
        if self._gen is not None:
            self._gen.close()
        if self._stage is not None:
            self._stage.close()
        if self._thermometer is not None:
            self._thermometer.close()
        for lock in self._locks:
            lock.release()
        self._locks = []

    def _put(self, item: Any) -> None:
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
            self._request_stop(ExitStatus.INTERNAL_ERROR,
                               f"acquisition: {type(err).__name__}: {err}")
        finally:
            if self._acq.fatal is not None:
                self._request_stop(ExitStatus.INSTRUMENT_FAILURE, self._acq.fatal, self._acq.fatal)
            elif self._acq.max_traces is not None and self._acq.seq >= self._acq.max_traces:
                self._request_stop(ExitStatus.COMPLETED, f"{self._acq.max_traces} traces acquired")
            self._stop.set()
            if self._scan_runner is not None:
                # its scan-end event goes in before the end marker
                self._scan_runner.join(5.0)
            if self._gen is not None:
                # recorded before the end marker, so the file holds the final state
                self._gen.stop(leave_on=self._leave_drive_on)
            if self._stage is not None:
                self._stage.stop("end of session")
            if self._thermometer is not None:
                self._thermometer.stop()
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
            self._request_stop(ExitStatus.INTERNAL_ERROR,
                               f"processing: {type(err).__name__}: {err}")
            self._acq.release_all()
            self._drain_raw()
        finally:
            self._finish()

    def _drain_raw(self) -> None:
        while True:
            try:
                if self._raw_q.get(timeout=0.2) is END:
                    return
            except queue.Empty:
                if self._acquisition_thread is None or not self._acquisition_thread.is_alive():
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
                self._request_stop(ExitStatus.STORE_ERROR, str(self._writer.error),
                                   f"session store failed: {self._writer.error}")
            if (self._duration_s is not None and not self._stop.is_set()
                    and self.elapsed_s >= self._duration_s):
                self._request_stop(ExitStatus.COMPLETED, f"duration {self._duration_s:g} s reached")
            if item is None:
                self._proc.flush_due()
                continue
            if item is END:
                return
            if isinstance(item, AcqEvent):
                self._proc.on_event(item)
            elif isinstance(item, Acquired):
                self._proc.on_trace(item)

    def _finish(self) -> None:
        status = self._status or ExitStatus.COMPLETED
        if self._status is None:
            self._status = status
        self._put(CloseItem(status, self._reason or status, self._counts))
        if self._writer_thread is not None:
            self._writer_thread.join()
        if self._writer.error is not None:
            self._request_stop(ExitStatus.STORE_ERROR, str(self._writer.error),
                               f"session store failed: {self._writer.error}; data committed "
                               f"before it is intact in {self.session_path}")
        self._proc.flush_latest()
        self._proc.publish(state="stopped", stop_reason=self._reason)
        for lock in self._locks:      # the instruments were closed by their threads
            lock.release()
        self._locks = []
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
                               store_lag_s=self._writer.store_lag_s(now_s),
                               water_reading_c=self._proc.water_reading_for_rules(now_s))
        self._proc.handle_firings(self._rules.on_tick(tick), judged_trace=False)
        self._proc.flush_latest()
        self._proc.publish(stop_reason=self._reason)


def _remove_unwritten(path: Path) -> None:
    """Remove what a store that failed to open left behind (it holds no data)."""
    for p in (path, path.with_name(path.name + "-wal"), path.with_name(path.name + "-shm"),
              path.with_name(path.name + "-journal")):
        try:
            p.unlink(missing_ok=True)
        except OSError:
            pass  # cannot remove: the error that brought us here is the one to report


def _method_of(converter: Any) -> str:
    settings = getattr(converter, "settings", None)
    return str(getattr(settings, "method", Method.AUTO))

