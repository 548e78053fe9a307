"""The live dashboard: reads the session's latest snapshot at a fixed rate, never a driver.

``run_dashboard(session)`` runs it on a started :class:`LiveSession` (or anything with
the same methods) and stops the session cleanly when the operator quits.
"""

from __future__ import annotations

import sys
import time
from pathlib import Path

from textual.app import App, ComposeResult
from textual.binding import Binding
from textual.containers import Horizontal
from textual.widgets import Footer

from ...drivers.errors import InstrumentError
from ..acoustics.settings import Method
from ..errors import TanksideError
from ..live.snapshot import Snapshot
from .alerts import AlertList, open_alerts
from .banner import Banner
from .capture import write_columns_csv
from .caution import CautionScreen
from .driveconfirm import DriveConfirmScreen
from .eventlog import EventLogScreen
from .figures import RunningFigures
from .marknote import MarkNoteScreen
from .scanmap import ScanMap
from .spectrum import SpectrumView
from .status import BenchStatus
from .units import clock
from .waveform import PressureTrace

REFRESH_HZ = 10.0
STATE_STYLE = {
    "starting": "#ffb35c", "running": "#7fd88f", "reconnecting": "#ffb35c",
    "stopping": "#ffb35c", "stopped": "#ff6b6b",
}
STOP_WAIT_S = 30.0
# q and c act on a second press within this time: one stray key never ends a long run
CONFIRM_WITHIN_S = 3.0  # (r too: a reset loses the figures since the start)
# `watch` and `demo` run the session in a process of its own
# (tankside.monitor.live.child). Where threads that answer instruments share
# this process with the display (a LiveSession given directly, the demo's simulated
# instruments), each blocking read that returns while the display is drawing waits
# up to the switch interval for the GIL: 1 ms instead of the default 5 ms.
GIL_SWITCH_INTERVAL_S = 0.001


class DashboardApp(App[None]):
    """The tankside live view: trace, spectrum, running figures, alerts and bench status."""

    CSS_PATH = "dashboard.tcss"
    TITLE = "tankside"
    ENABLE_COMMAND_PALETTE = False
    BINDINGS = [
        Binding("space", "hold", "hold"),
        Binding("m", "mark", "mark"),
        Binding("a", "ack_one", "ack"),
        # shown in the README's key table: the 80-column footer has no room for it
        Binding("A", "ack_all", "ack all", show=False),
        Binding("c", "cycle_method", "method"),
        Binding("r", "reset_figures", "reset"),
        Binding("l", "toggle_scale", "dB"),
        # the scan map's parameter; only while a scan runs, and no room in the footer
        Binding("p", "cycle_map_parameter", "param", show=False),
        Binding("z", "toggle_zoom", "zoom"),
        Binding("s", "save_capture", "save"),
        Binding("d", "drive", "drive"),
        Binding("e", "event_log", "log"),
        Binding("q", "quit_session", "quit"),
    ]

    def __init__(self, session, *, first_run_notice: bool = True,
                 capture_dir: str | Path | None = None, refresh_hz: float = REFRESH_HZ,
                 start_session: bool = False, started_note: str = ""):
        super().__init__()
        self.session = session
        self.first_run_notice = first_run_notice
        # Start the session here, after the caution: nothing reaches an instrument first.
        self.start_session = start_session
        self.started_note = started_note
        self.start_error: BaseException | None = None
        self._first_press: dict[str, float] = {}
        self.capture_dir = Path(capture_dir) if capture_dir is not None else None
        self.refresh_hz = refresh_hz
        self.held = False
        self.latest: Snapshot | None = None     # the newest snapshot read
        self.shown: Snapshot | None = None      # the one the plots show (older while held)
        self.method_requested = _initial_method(session)
        self.saved: list[Path] = []             # files written by the last save
        self._bell_seen = -1
        self._alerts_key: tuple = ()
        self._previous_switch_interval_s = sys.getswitchinterval()

    def compose(self) -> ComposeResult:
        # kept as attributes: a modal on top must not hide them from the refresh
        self.banner = Banner(id="banner")
        self.trace = PressureTrace(id="trace")
        self.spectrum = SpectrumView(id="spectrum")
        self.scan_map = ScanMap(id="scanmap")
        self.figures = RunningFigures(id="figures")
        self.status = BenchStatus(id="status")
        self.alert_list = AlertList(id="alerts")
        yield self.banner
        with Horizontal(id="plots"):
            yield self.trace
            yield self.spectrum
            yield self.scan_map
        with Horizontal(id="middle"):
            yield self.figures
            yield self.status
        yield self.alert_list
        yield Footer(compact=True)

    def on_mount(self) -> None:
        self._previous_switch_interval_s = sys.getswitchinterval()
        sys.setswitchinterval(min(GIL_SWITCH_INTERVAL_S, self._previous_switch_interval_s))
        self._fit_to_size(self.size.width, self.size.height)
        self.set_interval(1.0 / self.refresh_hz, self.refresh_from_session)
        self.refresh_from_session()
        if self.first_run_notice:
            self.push_screen(CautionScreen(), callback=lambda _: self._begin())
        else:
            self._begin()

    def _begin(self) -> None:
        if self.start_session:
            self.run_worker(self._start_in_thread, thread=True, exclusive=True,
                            name="session-start")
        elif self.started_note:
            self.notify(self.started_note, timeout=8)

    def _start_in_thread(self) -> None:
        # connecting blocks (a slow or unreachable instrument): not on the UI thread
        try:
            self.session.start()
        except BaseException as err:  # noqa: BLE001 - re-raised by run_dashboard
            self.start_error = err
            self.call_from_thread(self.exit)
            return
        if self.started_note:
            self.call_from_thread(self.notify, self.started_note, timeout=8)

    def on_unmount(self) -> None:
        sys.setswitchinterval(self._previous_switch_interval_s)

    def on_resize(self, event) -> None:
        self._fit_to_size(event.size.width, event.size.height)

    def _fit_to_size(self, width: int, height: int) -> None:
        # more room: taller alert list and figures, a wider status panel
        self.screen.set_class(height >= 40, "-tall")
        self.screen.set_class(100 <= width < 140, "-roomy")
        self.screen.set_class(width >= 140, "-wide")

    # -- refresh -------------------------------------------------------------------

    def refresh_from_session(self) -> None:
        """Read the latest snapshot (never blocks) and redraw what changed."""
        snap = self.session.snapshot()
        self._draw_banner(snap)
        if self.figures.stale:
            self.figures.tick()     # the age grows with no new snapshot
        if snap is self.latest:
            return
        self.latest = snap
        # while a scan runs its map takes the spectrum's place (on the dashboard's own
        # screen: a dialog may be on top)
        self.screen_stack[0].set_class(snap.scan is not None, "-scan")
        self.status.show(snap)
        alerts_key = tuple((a.alert_id, a.acknowledged) for a in snap.alerts)
        if alerts_key != self._alerts_key:
            self._alerts_key = alerts_key
            self.alert_list.show(snap)
            self._ring_for_new_alerts(snap)
        shown = self.shown
        if not self.held and (shown is None or snap.seq != shown.seq
                              or snap.pressure_pa is not shown.pressure_pa):
            self._show_plots(snap)
        if not self.held and snap.scan is not self.scan_map.view:
            self.scan_map.show(snap.scan)     # the scan moves on between traces too

    def _show_plots(self, snap: Snapshot) -> None:
        self.shown = snap
        self.trace.show(snap)
        self.spectrum.show(snap)
        self.figures.show(snap)
        self.scan_map.show(snap.scan)

    def _ring_for_new_alerts(self, snap: Snapshot) -> None:
        fresh = [a for a in snap.alerts if a.alert_id > self._bell_seen]
        if fresh:
            self._bell_seen = max(a.alert_id for a in fresh)
            if any("bell" in a.actions for a in fresh):
                self.bell()

    def _draw_banner(self, snap: Snapshot) -> None:
        colour = STATE_STYLE.get(snap.state, "#d7dde2")
        state = snap.state
        if snap.state == "stopped" and snap.stop_reason:
            state = f"stopped: {snap.stop_reason} (q to leave)"
        source, source_colour = source_state(snap)
        if source and snap.state != "stopped":
            # running, but on noise: the banner must not read as all well
            state, colour = f"{state}, {source}", source_colour
        used = f": {snap.method}" if snap.method and snap.method != self.method_requested else ""
        parts = [
            "[b]tankside[/b]",
            f"[{colour}]● {state}[/]",
            clock(snap.elapsed_s),
            f"#{snap.seq}" if snap.seq >= 0 else "#-",
            f"method {self.method_requested}{used}",
        ]
        if self.held:
            parts.insert(1, "[reverse #ffb35c] HELD [/]")
        self.banner.set_markup("  ".join(parts))

    # -- actions ---------------------------------------------------------------------

    def action_hold(self) -> None:
        """Freeze the trace, spectrum and figures; alerts and status keep updating."""
        self.held = not self.held
        if not self.held and self.latest is not None:
            self._show_plots(self.latest)
        if self.latest is not None:
            self._draw_banner(self.latest)

    def action_mark(self) -> None:
        self.push_screen(MarkNoteScreen(), self._record_mark)

    def _record_mark(self, note: str | None) -> None:
        if note is None:
            return
        if self._call_session(self.session.mark, note):
            self.notify(f"mark recorded: {note or '(no note)'}", timeout=3)

    def action_ack_one(self) -> None:
        """Acknowledge the newest open alert."""
        pending = open_alerts(self.latest.alerts) if self.latest else []
        if not pending:
            self.notify("no open alerts", timeout=2)
            return
        self._call_session(self.session.acknowledge, pending[-1].alert_id)
        self.refresh_from_session()

    def action_ack_all(self) -> None:
        pending = open_alerts(self.latest.alerts) if self.latest else []
        if not pending:
            self.notify("no open alerts", timeout=2)
            return
        for alert in pending:
            if not self._call_session(self.session.acknowledge, alert.alert_id):
                break
        self.refresh_from_session()

    def action_cycle_method(self) -> None:
        methods = list(Method)
        nxt = methods[(methods.index(self.method_requested) + 1) % len(methods)] \
            if self.method_requested in methods else methods[0]
        if not self._confirmed("c", f"press c again to switch the conversion method to {nxt}"):
            return
        if self._call_session(self.session.set_method, nxt):
            self.method_requested = nxt
            self.notify(f"conversion method: {nxt}", timeout=2)
        if self.latest is not None:
            self._draw_banner(self.latest)

    def action_reset_figures(self) -> None:
        """Start the running figures afresh (a second press confirms; recorded as an event)."""
        if not self._confirmed("r", "press r again to start the running figures afresh"):
            return
        if self._call_session(self.session.reset_figures, "operator (dashboard)"):
            self.notify("running figures start afresh from the next trace", timeout=3)

    def action_event_log(self) -> None:
        """The session's events and alerts in a scrollable list (Escape closes)."""
        self.push_screen(EventLogScreen(self.latest))

    @property
    def map_shown(self) -> bool:
        """The scan map is on screen (in the spectrum's place)."""
        return self.screen_stack[0].has_class("-scan")

    def action_toggle_scale(self) -> None:
        """dB or linear: of the scan map while it is shown, else of the spectrum."""
        if self.map_shown:
            self.scan_map.set_db(not self.scan_map.db)
        else:
            self.spectrum.set_linear(not self.spectrum.linear)

    def action_cycle_map_parameter(self) -> None:
        """The scan map shows the next parameter: p_r, p_c, PII, I_pa, MI."""
        if not self.map_shown:
            self.notify("no scan running: no map", timeout=2)
            return
        self.notify(f"map: {self.scan_map.cycle_parameter()}", timeout=2)

    def action_toggle_zoom(self) -> None:
        """The trace panel shows the pulse, or the whole record."""
        self.trace.set_zoom(not self.trace.zoomed)

    def action_save_capture(self) -> None:
        """Save the screen as SVG, and the shown trace in volts and in pascals as CSV."""
        snap = self.shown or self.latest
        if snap is None:
            return
        folder = self.capture_dir
        if folder is None:
            base = Path(snap.session_path).parent if snap.session_path else Path.cwd()
            folder = base / "captures"
        stem = f"capture-{time.strftime('%Y%m%d-%H%M%S')}-seq{snap.seq}"
        try:
            folder.mkdir(parents=True, exist_ok=True)
            saved = [Path(self.save_screenshot(filename=f"{stem}.svg", path=str(folder)))]
            if snap.times_s.size and snap.voltage_v.size == snap.times_s.size:
                saved.append(write_columns_csv(folder / f"{stem}-voltage.csv",
                                               ("time_s", "voltage_v"), snap.times_s,
                                               snap.voltage_v))
            if snap.times_s.size and snap.pressure_pa.size == snap.times_s.size:
                saved.append(write_columns_csv(folder / f"{stem}-pressure.csv",
                                               ("time_s", "pressure_pa"), snap.times_s,
                                               snap.pressure_pa))
        except OSError as err:
            self.notify(f"capture not saved: {err}", severity="error", timeout=6)
            return
        self.saved = saved
        self.notify(f"saved {len(saved)} files in {folder}", timeout=4)

    def action_drive(self) -> None:
        """Switch the generator output off at once, or on after a confirmation."""
        snap = self.latest
        if snap is None or not snap.drive_detail:
            self.notify("no generator on this bench", severity="warning", timeout=4)
            return
        if snap.drive_on:
            self._call_session(self.session.switch_drive, False, "operator (dashboard)")
            self.notify("switching the generator output off", timeout=4)
            return

        def confirmed(yes: bool | None) -> None:
            if yes and self._call_session(self.session.switch_drive, True,
                                          "operator (dashboard, confirmed)"):
                self.notify("switching the generator output ON", severity="warning",
                            timeout=6)
            elif not yes:
                self.notify("drive left off", timeout=3)
        self.push_screen(DriveConfirmScreen(), callback=confirmed)

    def action_quit_session(self) -> None:
        """Stop the session cleanly, then leave (a second press confirms while recording)."""
        if self.session.running and not self._confirmed(
                "q", "press q again to stop the recording and quit"):
            return
        self._call_session(self.session.stop, "operator")
        self.exit()

    def _confirmed(self, key: str, question: str) -> bool:
        """True on the second press of ``key`` within CONFIRM_WITHIN_S; else ask."""
        now = time.monotonic()
        last = self._first_press.get(key)
        if last is not None and now - last <= CONFIRM_WITHIN_S:
            self._first_press.pop(key)
            return True
        self._first_press[key] = now
        self.notify(question, timeout=CONFIRM_WITHIN_S)
        return False

    def _call_session(self, method, *args) -> bool:
        # expected failures (a rejected method name, a closed store) go on screen, not a traceback
        try:
            method(*args)
        except (TanksideError, InstrumentError, ValueError) as err:
            self.notify(str(err), severity="error", timeout=6)
            return False
        return True


def source_state(snap: Snapshot) -> tuple[str, str]:
    """What the banner says about the source when it is not driving a pulse, and its colour.

    ("safe-off", red) after a safe-off, ("drive off", amber) with the output off,
    ("drive state unknown", amber) while a switch-off is unconfirmed, ("no pulse",
    amber) when the latest trace holds none; ("", "") when a pulse arrives.
    """
    if snap.drive_on is False:
        if "safe-off" in snap.drive_detail:
            return "safe-off", "#ff6b6b"
        return "drive off", "#ffb35c"
    if snap.drive_on is None and snap.drive_detail:
        return "drive state unknown", "#ffb35c"
    if snap.pulse_present is False:
        return "no pulse", "#ffb35c"
    return "", ""


def _initial_method(session) -> Method:
    """The conversion method the session was started with (``AUTO`` when it cannot say)."""
    for name in ("method_requested", "method"):
        method = getattr(session, name, None)
        if method in list(Method):
            return Method(method)
    return Method.AUTO


def run_dashboard(session, *, first_run_notice: bool = True,
                  capture_dir: str | Path | None = None, start_session: bool = False,
                  started_note: str = "") -> int:
    """Show the dashboard on a live session until the operator quits.

    Parameters
    ----------
    session : LiveSession or SessionProcess
        The dashboard calls only its start/snapshot/mark/acknowledge/set_method/
        switch_drive/stop/wait methods and its ``exit_code`` and ``running`` attributes.
    first_run_notice : bool
        Show the caution about high-power ultrasound before the live view.
    start_session : bool
        The session is not started yet: start it once the caution is acknowledged (so
        nothing is sent to an instrument before); a failure to start is raised here.
    started_note : str
        Shown once the session runs (e.g. that the demo switched its drive on).
    capture_dir : path, optional
        Where the save key writes; default ``captures/`` beside the session file.

    Returns
    -------
    int
        The session's exit code (see :mod:`tankside.monitor.cli`).
    """
    app = DashboardApp(session, first_run_notice=first_run_notice, capture_dir=capture_dir,
                       start_session=start_session, started_note=started_note)
    if start_session:
        session.prepare()
    try:
        app.run()
    finally:
        if session.running:
            session.stop("operator")
        session.wait(timeout_s=STOP_WAIT_S)
    if app.start_error is not None:
        raise app.start_error
    return session.exit_code
