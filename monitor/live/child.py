"""A live session in a process of its own, watched from the dashboard's process.

The dashboard redraws ten times a second. In the live chain's own process every frame
holds the interpreter lock that acquisition, conversion and the store need: about
11 ms a frame at 160x48, which cost the chain some 15 % of its trace rate when it ran
flat out (tests/bench/bench_dashboard.py). So ``watch`` and ``demo`` with the
dashboard run the :class:`~tankside.monitor.live.session.LiveSession` in a child process
and the display in the parent, joined by two pipes:

* snapshots: the parent asks for one and collects the answer on its next read, so at
  most one request is in flight and the answer is the session's latest state when
  the child's snapshot thread took it (never one queued earlier). A display that
  stops reading stops the requests; it never blocks the chain.
* commands, parent to child: mark, acknowledge and set_method are answered (an
  expected error comes back and is raised in the parent, so it shows as a notice);
  stop is not, so that it can be sent from a signal handler at any moment.

The child ignores Ctrl-C and hangups (the parent decides when to stop), ends its
session cleanly when the parent goes away (its end of the pipes closes), and exits
with the session's exit code. What it prints goes to a temporary file, which
:meth:`SessionProcess.wait` copies to the parent's stderr once the child has exited
(the display is closed by then), so it never lands on the dashboard.
"""

from __future__ import annotations

import contextlib
import dataclasses
import multiprocessing
import multiprocessing.connection
import os
import signal
import sys
import tempfile
import threading
import time
from pathlib import Path
from typing import TYPE_CHECKING, Any, TextIO

from ...drivers.errors import InstrumentError
from ..acoustics.settings import Method
from ..errors import TanksideError
from ..outcome import ExitCode, ExitStatus
from .snapshot import Snapshot

if TYPE_CHECKING:
    from .benchfile import BenchConfig

#: The session methods the parent may call in the child (stop has no answer).
COMMANDS = ("mark", "acknowledge", "set_method", "switch_drive", "reset_figures",
            "move_stage", "stop_stage")
#: How long a command waits for the child's answer, s.
ANSWER_WAIT_S = 10.0
#: How long the child waits, after its session has ended, for the parent to ask for
#: the last snapshot (the parent asks every 50 ms while it waits for the child), s.
FINAL_SNAPSHOT_WAIT_S = 5.0


@dataclasses.dataclass(frozen=True)
class SessionSpec:
    """What the child needs to build the session (all of it picklable)."""

    bench: BenchConfig
    session_path: Path
    max_traces: int | None = None
    duration_s: float | None = None
    drive_on_at_start: str | None = None
    scan_plan: Any = None
    resume: bool = False
    passive: bool = False


@dataclasses.dataclass
class SessionStatus:
    """The parts of a session's state that are not in its snapshot (final once
    ``exit_status`` is set)."""

    exit_code: int = 0
    exit_status: str = ""
    stop_reason: str = ""
    message_for_operator: str = ""
    method: str = Method.AUTO


class SessionProcess:
    """A :class:`LiveSession` run in a child process, with the same public methods.

    Parameters
    ----------
    spec : SessionSpec
        The bench and session file; the file must not exist yet.
    report : text stream, optional
        Where what the child printed is copied once it has exited (default stderr).

    A snapshot read returns the answer to the request made by the read before it, so
    a display reading ten times a second shows the session as it was at most about
    0.1 s earlier.
    """

    def __init__(self, spec: SessionSpec, *, report: TextIO | None = None):
        self.spec = spec
        self.report = report
        self.session_path = Path(spec.session_path)
        self._status = SessionStatus()
        self._snap = Snapshot(session_path=str(self.session_path), state="starting")
        self._process: multiprocessing.process.BaseProcess | None = None
        self._commands: multiprocessing.connection.Connection | None = None
        self._snapshots: multiprocessing.connection.Connection | None = None
        self._asked = False            # a snapshot request is in flight
        self._serial = 0               # of the last command sent
        self._ended = False            # the child has exited (or was never started)
        self._log_path: Path | None = None
        self._reported = ""            # what the child printed, once copied to report

    # ---------------------------------------------------------------- start
    def prepare(self) -> None:
        """Start multiprocessing's helper process now, while the standard streams are
        the terminal's: a display that captures them (Textual does) would make the
        spawn in :meth:`start` fail. Sends nothing to any instrument."""
        from multiprocessing import resource_tracker

        resource_tracker.ensure_running()

    def start(self) -> None:
        """Start the child and wait until its session is running.

        Raises
        ------
        TanksideError, InstrumentError
            The child's session could not start (a bad file, an unreachable
            instrument): the child's own error, raised here.
        """
        if self._process is not None:
            raise RuntimeError("session already started")
        context = multiprocessing.get_context("spawn")
        commands, child_commands = context.Pipe(duplex=True)
        snapshots, child_snapshots = context.Pipe(duplex=True)
        fd, log = tempfile.mkstemp(prefix="tankside-session-", suffix=".log")
        os.close(fd)
        self._log_path = Path(log)
        self._process = context.Process(
            target=child_main, name="tankside-session",
            args=(self.spec, child_commands, child_snapshots, str(self._log_path)))
        self._process.start()
        # the parent keeps only its own ends, so that the child sees the parent go away
        child_commands.close()
        child_snapshots.close()
        self._commands, self._snapshots = commands, snapshots
        # until the child's first message or its exit (a message sent before exiting is read)
        multiprocessing.connection.wait([commands, self._process.sentinel])
        kind: str
        payload: Any
        try:
            kind, payload = commands.recv() if commands.poll() else ("gone", None)
        except (EOFError, OSError):
            kind, payload = "gone", None
        if kind == "started":
            self._status = payload
            self._snap = dataclasses.replace(self._snap, state="running")
            self._drain()                       # the first request
            return
        self.wait(10)
        if kind == "failed":
            raise payload
        raise TanksideError(f"the session process ended while starting (exit code "
                            f"{self._process.exitcode}){self._output_hint()}")

    # ---------------------------------------------------------------- the session's methods
    def snapshot(self) -> Snapshot:
        """The newest snapshot the child has sent; never blocks for long.

        When the child has gone without a last snapshot (killed, crashed), the one
        returned says so: state "stopped" and the reason.
        """
        self._drain()
        # the snapshot pipe closed (the commands' pipe is still open): the child is exiting.
        # While start() spawns the child neither pipe is set yet, and there is nothing
        # to join: a display reading then sees "starting".
        if (self._snapshots is None and self._commands is not None and not self._ended
                and self._process is not None):
            self._process.join(1.0)
            if not self._process.is_alive():
                self._finish()
        return self._snap

    def mark(self, note: str) -> None:
        self._call("mark", str(note))

    def acknowledge(self, alert_id: int) -> None:
        self._call("acknowledge", int(alert_id))

    def set_method(self, method: str) -> None:
        self._call("set_method", str(method))

    def switch_drive(self, on: bool, cause: str = "operator") -> None:
        self._call("switch_drive", bool(on), str(cause))

    def reset_figures(self, cause: str = "operator") -> None:
        self._call("reset_figures", str(cause))

    def move_stage(self, target: dict[str, float]) -> None:
        """Move the stage (see ``LiveSession.move_stage``; a target outside the soft
        limits raises OutsideLimitsError here, nothing sent)."""
        self._call("move_stage", {str(axis): mm for axis, mm in dict(target).items()})

    def stop_stage(self, cause: str = "operator") -> None:
        self._call("stop_stage", str(cause))

    def stop(self, reason: str = "operator") -> None:
        """Ask the child to stop its session cleanly; returns at once.

        Safe in a signal handler: one small message, no answer awaited.
        """
        if self._commands is None or self._ended:
            return
        with contextlib.suppress(OSError, ValueError):
            self._commands.send((None, "stop", (str(reason),)))

    def wait(self, timeout_s: float | None = None) -> bool:
        """Wait until the child has ended its session and exited; True when it has.

        Once it has, what the child printed is copied to :attr:`report` (once) and its
        log file removed.
        """
        if self._process is None:
            return True
        deadline = None if timeout_s is None else time.monotonic() + timeout_s
        while self._process.is_alive():
            # keep asking: the child answers one last request before it exits
            self._drain()
            left = 0.05 if deadline is None else min(0.05, deadline - time.monotonic())
            if left <= 0:
                return False
            self._process.join(left)
        self._finish()
        self._report_output()
        return True

    @property
    def running(self) -> bool:
        if self._process is None or self._ended:
            return False
        self._drain()
        return self._process.is_alive()

    @property
    def exit_code(self) -> int:
        return self._status.exit_code

    @property
    def exit_status(self) -> str:
        return self._status.exit_status

    @property
    def stop_reason(self) -> str:
        return self._status.stop_reason

    @property
    def message_for_operator(self) -> str:
        return self._status.message_for_operator

    @property
    def method(self) -> str:
        return self._status.method

    @property
    def pid(self) -> int | None:
        """The child's process id (None before :meth:`start`)."""
        return self._process.pid if self._process is not None else None

    def child_output(self) -> str:
        """What the child printed (tracebacks of a bug, warnings); "" when nothing."""
        if self._log_path is None:
            return self._reported
        try:
            return self._log_path.read_text(errors="replace")
        except OSError:
            return ""

    # ---------------------------------------------------------------- internals
    def _call(self, op: str, *args) -> None:
        if (self._commands is None or self._ended or self._process is None
                or not self._process.is_alive()):
            raise TanksideError("the session has ended")
        self._serial += 1
        deadline = time.monotonic() + ANSWER_WAIT_S
        try:
            self._commands.send((self._serial, op, args))
            while True:   # an answer that came too late for an earlier command is dropped
                left = deadline - time.monotonic()
                if left <= 0 or not self._commands.poll(left):
                    raise TanksideError(f"the session did not answer {op} within "
                                        f"{ANSWER_WAIT_S:g} s")
                serial, kind, payload = self._commands.recv()
                if serial == self._serial:
                    break
        except (EOFError, OSError) as err:
            raise TanksideError("the session has ended") from err
        if kind == "error":
            raise payload

    def _drain(self) -> None:
        """Take the answer to the last request if it has come, and ask for the next."""
        conn = self._snapshots
        if conn is None:
            return
        try:
            if self._asked and conn.poll(0):
                snap, self._status, payload = conn.recv()
                self._snap = _with_scan(snap, self._snap, payload)
                self._asked = False
            if not self._asked:
                conn.send(None)
                self._asked = True
        except (EOFError, OSError):
            conn.close()                      # the child's end is closed: it is exiting
            self._snapshots = None

    def _finish(self) -> None:
        """The child has exited: take its last words and settle the status."""
        if self._ended:
            return
        self._drain()
        self._ended = True
        for conn in (self._commands, self._snapshots):
            if conn is not None:
                conn.close()
        self._commands = self._snapshots = None
        code = self._process.exitcode if self._process is not None else 0
        status = self._status
        if status.exit_status or code == status.exit_code:
            return
        # the child died without a clean end of its session: say so, with its code
        status.exit_code = ExitCode.INTERNAL
        status.exit_status = ExitStatus.INTERNAL_ERROR
        status.stop_reason = f"session process ended unexpectedly (exit code {code})"
        status.message_for_operator = status.stop_reason + self._output_hint()
        self._snap = dataclasses.replace(self._snap, state="stopped",
                                         stop_reason=status.stop_reason)

    def _output_hint(self) -> str:
        return "; what it printed is shown above" if self.child_output() else ""

    def _report_output(self) -> None:
        """Copy what the exited child printed to :attr:`report`, then remove its log."""
        if self._log_path is None:
            return
        text = self.child_output()
        if text:
            out = self.report if self.report is not None else sys.stderr
            out.write(f"tankside: the session process wrote:\n{text}")
            if not text.endswith("\n"):
                out.write("\n")
            out.flush()
        with contextlib.suppress(OSError):
            self._log_path.unlink()
        self._log_path, self._reported = None, text


# -------------------------------------------------------------------- the child
def child_main(spec: SessionSpec, commands, snapshots, log_path: str) -> None:
    """The child process: build and start the session, serve the parent, stop cleanly."""
    _quiet_output(log_path)
    if hasattr(signal, "SIGHUP"):
        signal.signal(signal.SIGHUP, signal.SIG_IGN)
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    from .session import LiveSession

    try:
        session = LiveSession.from_bench(spec.bench, session_path=spec.session_path,
                                         max_traces=spec.max_traces,
                                         duration_s=spec.duration_s,
                                         drive_on_at_start=spec.drive_on_at_start,
                                         scan_plan=spec.scan_plan, resume=spec.resume,
                                         passive=spec.passive)
        session.start()
    except (TanksideError, InstrumentError) as err:
        _send_quietly(commands, ("failed", err))
        _remove_if_empty(log_path)
        sys.exit(ExitCode.USAGE)
    signal.signal(signal.SIGTERM, lambda signum, frame: session.stop("signal SIGTERM"))
    _send_quietly(commands, ("started", _status_of(session)))
    answering = threading.Thread(target=_answer_snapshots, args=(session, snapshots),
                                 name="tankside-snapshot-pipe", daemon=True)
    answering.start()
    try:
        _serve_commands(session, commands)
    finally:
        if session.running:
            session.stop("display closed")
        session.wait()
        answering.join(FINAL_SNAPSHOT_WAIT_S)
        sys.stdout.flush()
        sys.stderr.flush()
        _remove_if_empty(log_path)   # a parent that has gone cannot do it
    sys.exit(session.exit_code)


def _serve_commands(session, commands) -> None:
    """Answer the parent's commands until the session ends or the parent goes away."""
    while session.running:
        try:
            if not commands.poll(0.2):
                continue
            serial, op, args = commands.recv()
        except (EOFError, OSError):
            session.stop("display closed")     # the parent has gone
            return
        if op == "stop":
            session.stop(*args)
            continue
        answer: tuple[int, str, BaseException | None]
        try:
            if op not in COMMANDS:
                raise ValueError(f"unknown session command {op!r}")
            getattr(session, op)(*args)
        except (TanksideError, InstrumentError, ValueError) as err:
            answer = (serial, "error", err)
        else:
            answer = (serial, "ok", None)
        if not _send_quietly(commands, answer):
            session.stop("display closed")
            return


def _answer_snapshots(session, snapshots) -> None:
    """Answer each request with the latest snapshot and status, the last one after the end.

    A scan's view (its per-point arrays) goes only when it changed: the snapshot goes
    without it, and the version the parent already holds stands for it
    (:func:`_with_scan`)."""
    sent_version: int | None = None
    while True:
        try:
            if not snapshots.poll(0.2):
                continue
            snapshots.recv()
        except (EOFError, OSError):
            return                              # the parent has gone; the commands see it
        done = not session.running
        snap = session.snapshot()
        scan = snap.scan
        if scan is not None and scan.version == sent_version:
            snap = dataclasses.replace(snap, scan=None)
            payload: object = sent_version
        else:
            payload = None
            sent_version = None if scan is None else scan.version
        if not _send_quietly(snapshots, (snap, _status_of(session), payload)) or done:
            return


def _with_scan(snap: Snapshot, held: Snapshot | None, payload: object) -> Snapshot:
    """The snapshot the child sent, with the scan view the parent holds when the child
    left it out as unchanged (``payload`` its version)."""
    if payload is None or held is None or held.scan is None or held.scan.version != payload:
        return snap
    return dataclasses.replace(snap, scan=held.scan)


def _status_of(session) -> SessionStatus:
    running = session.running
    return SessionStatus(exit_code=0 if running else session.exit_code,
                         exit_status=("" if running
                                      else session.exit_status or ExitStatus.COMPLETED),
                         stop_reason=session.stop_reason,
                         message_for_operator=session.message_for_operator,
                         method=session.method)


def _send_quietly(conn, message) -> bool:
    try:
        conn.send(message)
        return True
    except (OSError, ValueError):
        return False


def _quiet_output(log_path: str) -> None:
    """Send the child's stdout and stderr (file descriptors 1 and 2) to ``log_path``."""
    with open(log_path, "ab", buffering=0) as log:
        os.dup2(log.fileno(), 1)
        os.dup2(log.fileno(), 2)


def _remove_if_empty(path: str) -> None:
    with contextlib.suppress(OSError):
        if os.path.getsize(path) == 0:
            os.unlink(path)


def session_for_display(bench, *, own_process: bool, session_path: str | Path | None = None,
                        max_traces: int | None = None, duration_s: float | None = None,
                        bell=None, drive_on_at_start: str | None = None,
                        scan_plan: Any = None, resume: bool = False,
                        passive: bool = False):
    """The session a command shows: in this process (headless), or in a child (dashboard).

    Parameters
    ----------
    bench : BenchConfig
    own_process : bool
        Run the session in a child process (:class:`SessionProcess`); False builds a
        :class:`~tankside.monitor.live.session.LiveSession` here (``bell`` rings on alerts).
    session_path, max_traces, duration_s, drive_on_at_start, scan_plan, resume, passive
        As for :meth:`LiveSession.from_bench`.
    """
    from .build import session_file
    from .session import LiveSession

    if not own_process:
        return LiveSession.from_bench(bench, session_path=session_path, max_traces=max_traces,
                                      duration_s=duration_s, bell=bell,
                                      drive_on_at_start=drive_on_at_start,
                                      scan_plan=scan_plan, resume=resume, passive=passive)
    path = session_file(bench.session_folder, session_path, resume=resume)
    return SessionProcess(SessionSpec(bench, path, max_traces=max_traces, duration_s=duration_s,
                                      drive_on_at_start=drive_on_at_start,
                                      scan_plan=scan_plan, resume=resume,
                                      passive=passive))
