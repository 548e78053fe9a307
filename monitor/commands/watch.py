"""``tankside watch``: a live session on the bench described by a bench file."""

from __future__ import annotations

import argparse
import sys
import tomllib
from collections.abc import Callable
from pathlib import Path

from ..acoustics.settings import Method
from ..caution import caution_text
from ..errors import ConfigError
from .options import (
    COUNT,
    SECONDS,
    add_calibration_check_options,
    add_loading_options,
    calibration_checks,
    loading_overrides,
    number,
)
from .running import run_to_end

# exit codes 3 and 4 of a live session, the same for watch and scan
LIVE_FAILURE_CODES = """\
  3  an instrument lost during the session that could not be reconnected
  4  the session file could not be written (disk full, permissions); committed data intact
"""

EPILOG = """\
exit codes:
  0  stopped as asked (duration, trace count, Ctrl-C, SIGTERM, q in the dashboard)
  1  stopped by an alert rule whose actions include "stop"
  2  bad bench file or setting, or an instrument that cannot be reached at the start
""" + LIVE_FAILURE_CODES + """
The session file records why and how the session ended; a file without that record
was not stopped cleanly (killed or crashed), and every committed trace in it is readable.
"""


def add_parser(subparsers) -> None:
    p = subparsers.add_parser(
        "watch", help="live session: acquire, convert to pressure, alert, record",
        description=("Acquire every trace from the digitiser of a bench file, convert it to\n"
                     "pressure, check the alert rules, carry out their actions and record\n"
                     "everything in a session file. Shows the dashboard unless --headless;\n"
                     "with the dashboard the session runs in a process of its own and\n"
                     "stops cleanly if the dashboard goes away."),
        epilog=EPILOG, formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("--bench", required=True, metavar="BENCH.toml",
                   help="bench file describing instruments, calibration, limits and the "
                        "session folder")
    p.add_argument("--session", metavar="FILE.db",
                   help="new session file (default: session-DATE-TIME.db in the bench "
                        "file's session folder); must not exist")
    stop = p.add_mutually_exclusive_group()
    stop.add_argument("--duration", type=SECONDS, metavar="S",
                      help="stop after S seconds (default: run until stopped)")
    stop.add_argument("--traces", type=COUNT, metavar="N", help="stop after N traces")
    add_live_options(p)
    p.set_defaults(func=run)


def add_live_options(p) -> None:
    """The options ``watch`` and ``scan`` share: display, drive, caution, overrides."""
    p.add_argument("--headless", action="store_true",
                   help="no dashboard: print a status line every few seconds and every alert")
    p.add_argument("--status-every", type=number(low=0.05, high=3600.0), default=2.0,
                   metavar="S",
                   help="headless status line interval, s (default 2)")
    p.add_argument("--drive-on", action="store_true",
                   help="switch the generator output on once the session runs (recorded "
                        "as an operator action); without it tankside never switches the "
                        "drive on: use the dashboard's drive key (d)")
    p.add_argument("--accept-caution", action="store_true",
                   help="headless without a terminal: the safety caution (README, 'Safety "
                        "first') has been read; needed on the first session in a folder")

    o = p.add_argument_group("overrides of the bench file")
    o.add_argument("--digitiser", metavar="RESOURCE",
                   help="digitiser VISA resource, e.g. TCPIP0::192.168.1.20::5025::SOCKET")
    o.add_argument("--digitiser-profile", metavar="NAME|FILE",
                   help="digitiser profile: built-in name or TOML file")
    o.add_argument("--range", type=number(low=0.0, low_open=True, high=1e4), metavar="V",
                   dest="range_v",
                   help="starting vertical range, full-scale span peak to peak, V")
    o.add_argument("--generator", metavar="RESOURCE", help="generator VISA resource")
    o.add_argument("--generator-profile", metavar="NAME|FILE",
                   help="generator profile: built-in name or TOML file")
    o.add_argument("--no-generator", action="store_true",
                   help="ignore the bench file's generator (safe-off is then unavailable)")
    o.add_argument("--calibration", metavar="CAL.csv", help="hydrophone calibration file")
    add_calibration_check_options(o)
    o.add_argument("--method", choices=[m.value for m in Method],
                   help="conversion method at the start (can be switched live)")
    o.add_argument("--pressure-limit", type=number(low=0.0, low_open=True, high=1e10),
                   metavar="PA",
                   help="over-pressure alert limit, Pa (the lower of this and the rated "
                        "maximum applies)")
    o.add_argument("--rated-max", type=number(low=0.0, low_open=True, high=1e10),
                   metavar="PA",
                   help="hydrophone's rated maximum pressure, Pa")
    o.add_argument("--alert", action="append", default=[], metavar="RULE.KEY=VALUE",
                   help="set any alert setting, e.g. no_trigger.after_s=10 or "
                        "'over_pressure.actions=[\"record\",\"safe-off\",\"stop\"]' "
                        "(VALUE in TOML syntax; repeatable)")
    add_loading_options(p, title="overrides of the bench file: electrical loading and water")


def _abs(path: str) -> str:
    # Paths on the command line are relative to the working folder, not the bench file's.
    return str(Path(path).expanduser().resolve())


def _profile(name: str) -> str:
    p = Path(name).expanduser()
    return str(p.resolve()) if (p.exists() or "/" in name or "\\" in name) else name


def _parse_alert(text: str) -> tuple[str, object]:
    key, sep, value = text.partition("=")
    key = key.strip()
    if not sep or "." not in key:
        raise ConfigError(f"--alert {text!r}: expected RULE.KEY=VALUE")
    try:
        parsed = tomllib.loads(f"v = {value.strip()}")["v"]
    except tomllib.TOMLDecodeError:
        parsed = value.strip()      # a bare word such as warning
    return f"alerts.{key}", parsed


def overrides_from_args(args) -> dict:
    """The ``section.key`` overrides given on the command line."""
    o: dict = {}
    if args.digitiser:
        o["digitiser.resource"] = args.digitiser
    if args.digitiser_profile:
        o["digitiser.profile"] = _profile(args.digitiser_profile)
    if args.range_v is not None:
        o["digitiser.range_v"] = args.range_v
    if args.no_generator:
        o["generator"] = None
    else:
        if args.generator:
            o["generator.resource"] = args.generator
        if args.generator_profile:
            o["generator.profile"] = _profile(args.generator_profile)
    if args.calibration:
        o["calibration.file"] = _abs(args.calibration)
    for key, value in calibration_checks(args).items():
        o[f"calibration.{key}"] = value
    for key, value in loading_overrides(args).items():
        o[f"loading.{key}"] = value
    if args.method:
        o["conversion.method"] = args.method
    if args.water_temperature is not None:
        o["water.temperature_c"] = args.water_temperature
    if args.pressure_limit is not None:
        o["alerts.over_pressure.limit_pa"] = args.pressure_limit
    if args.rated_max is not None:
        o["alerts.over_pressure.rated_max_pa"] = args.rated_max
    for text in args.alert:
        alert_key, alert_value = _parse_alert(text)
        o[alert_key] = alert_value
    return o


def _first_run(folder: Path, current: Path) -> bool:
    """True when the session folder holds no earlier session (show the caution)."""
    try:
        return not any(p != current for p in folder.glob("*.db"))
    except OSError:
        return True


CAUTION = caution_text("use --drive-on, or the dashboard's d key")


def acknowledge_caution_headless(*, accepted: bool) -> None:
    """Show the caution and have it acknowledged before anything reaches an instrument.

    On a terminal the operator presses Enter; without one, ``--accept-caution`` is the
    acknowledgement.

    Raises
    ------
    ConfigError
        No terminal to ask, and the caution not accepted on the command line.
    """
    print(CAUTION, flush=True)
    if accepted:
        print("caution accepted (--accept-caution)", flush=True)
        return
    if not sys.stdin or not sys.stdin.isatty():
        raise ConfigError("first session in this folder: read the caution above, then run "
                          "again with --accept-caution (nothing was sent to any instrument)")
    try:
        input("press Enter to continue (Ctrl-C to leave; nothing has been sent yet) ")
    except EOFError as err:
        raise ConfigError("the caution was not acknowledged; nothing was sent") from err


def run(args) -> int:
    from ..live.benchfile import load_bench

    bench = load_bench(args.bench, overrides_from_args(args))
    return run_live(args, bench, max_traces=args.traces, duration_s=args.duration,
                    session_path=_abs(args.session) if args.session else None)


def run_live(args, bench, *, session_path: str | None, max_traces: int | None = None,
             duration_s: float | None = None, scan_plan=None, resume: bool = False,
             passive: bool = False) -> int:
    """Run a live session on ``bench`` with the display ``args`` ask for (``watch``,
    ``scan``); the exit code."""
    from ..headless import end_summary, run_headless
    from ..live.child import session_for_display
    from ..live.instruments import unapplied_note

    for warning in bench.protection_warnings():
        print(f"tankside: WARNING: protection off: {warning}", file=sys.stderr, flush=True)
    note = unapplied_note(bench)
    if note is not None:
        print(f"tankside: note: {note}", file=sys.stderr, flush=True)

    dashboard: Callable[..., int] | None = None
    if not args.headless:
        try:
            from ..dashboard.app import run_dashboard as dashboard
        except ImportError as err:
            print(f"tankside: dashboard not available ({err}); running headless",
                  file=sys.stderr)
    headless = dashboard is None

    def bell() -> None:
        sys.stdout.write("\a")
        sys.stdout.flush()

    # with the dashboard, the session runs in a process of its own: drawing never
    # takes the interpreter from acquisition and conversion
    session = session_for_display(
        bench, own_process=not headless, session_path=session_path,
        max_traces=max_traces, duration_s=duration_s, bell=bell if headless else None,
        drive_on_at_start="--drive-on" if args.drive_on else None,
        scan_plan=scan_plan, resume=resume, passive=passive)
    first_run = _first_run(session.session_path.parent, session.session_path)

    def show() -> int:
        if dashboard is None:       # headless
            if first_run:
                acknowledge_caution_headless(accepted=args.accept_caution)
            session.start()
            print(f"tankside: recording to {session.session_path}", file=sys.stderr,
                  flush=True)
            return run_headless(session, status_every_s=args.status_every)
        print(f"tankside: recording to {session.session_path}", file=sys.stderr, flush=True)
        code = dashboard(session, first_run_notice=first_run, start_session=True,
                         started_note=("generator output switched on (--drive-on)"
                                       if args.drive_on else ""))
        print(end_summary(session), file=sys.stderr)
        return session.exit_code if session.exit_code else code

    return run_to_end(session, show, leftover_reason="dashboard closed")
