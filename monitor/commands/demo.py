"""``tankside demo``: the simulated bench on loopback, watched live (``make demo``).

Starts the simulated digitiser and generator on 127.0.0.1, writes their bench file
into the sessions folder, and runs a live session on them with the invented demo
hydrophone calibration, shown on the dashboard (or headless). Everything the demo
shows is invented: no real transducer, hydrophone or calibration is involved.
"""

from __future__ import annotations

import argparse
import sys
from collections.abc import Callable
from pathlib import Path

from ..caution import caution_text
from ..errors import ConfigError
from .options import SECONDS, SEED
from .running import run_to_end

CAUTION = caution_text(
    "this demo switches its simulated generator on once you have read this",
    heading="CAUTION: this demo drives a simulated bench with invented data. On a real bench:")

BENCH_FILE_NAME = "demo-bench.toml"
PLAN_FILE_NAME = "demo-scan-plan.toml"
# A raster across the simulated (invented) beam at its focus: 17 x 17 points 0.25 mm
# apart, two traces each at 50 traces/s, so the map fills in about half a minute.
DEMO_PLAN = """\
# tankside demo scan plan: a raster across the simulated beam (invented scene) at the
# focus; written by `tankside demo --scan`, yours to copy for `tankside scan --plan`.
kind = "raster"
settle_s = 0.0
traces = 2
serpentine = true
fixed = { z = 0.0 }

[[axes]]
name = "x"
start_mm = -2.0
stop_mm = 2.0
step_mm = 0.25

[[axes]]
name = "y"
start_mm = -2.0
stop_mm = 2.0
step_mm = 0.25
"""
DEMO_SCAN_TRIGGER_PERIOD_S = 0.02
# The demo alone switches a drive on by itself: its simulated one, after the caution.
DEMO_DRIVE_CAUSE = "demo (simulated generator)"
DEMO_DRIVE_NOTE = ("demo: the simulated generator's output was switched on (simulated "
                   "instruments only; on a real bench tankside never does this by itself)")


def add_parser(subparsers) -> None:
    p = subparsers.add_parser(
        "demo", help="watch a simulated bench live (invented data; no instruments needed)",
        description=("Start a simulated digitiser and signal generator on 127.0.0.1, write "
                     "their bench file into the sessions folder, and watch them live: every "
                     "trace converted to pressure with the invented demo hydrophone "
                     "calibration, checked by the alert rules and recorded in a session "
                     "file. Press q in the dashboard to stop."),
        epilog="The scene, instruments and calibration of the demo are invented.",
        formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("--sessions", default="sessions", metavar="DIR",
                   help="folder for the session file, snapshots and the demo bench file "
                        "(default: ./sessions)")
    p.add_argument("--headless", action="store_true",
                   help="no dashboard: print a status line every few seconds and every alert")
    p.add_argument("--duration", type=SECONDS, metavar="S",
                   help="stop after S seconds (default: until q, Ctrl-C or SIGTERM)")
    p.add_argument("--seed", type=SEED, default=0, metavar="N",
                   help="seed of the simulated digitiser's noise and jitter (default 0)")
    p.add_argument("--scan", action="store_true",
                   help="scan the simulated beam: a simulated stage moves the hydrophone "
                        "through a raster across the focus and the map fills in live "
                        "(about half a minute); the plan is written beside the bench file")
    p.set_defaults(func=run)


def _first_run(folder: Path) -> bool:
    """True when the sessions folder holds no earlier session (show the caution)."""
    try:
        return not any(folder.glob("*.db"))
    except OSError:
        return True


def run(args) -> int:
    from ...simulators.bench import SimulatedBench
    from ..headless import run_headless
    from ..live.benchfile import load_bench
    from ..live.child import session_for_display

    folder = Path(args.sessions).expanduser().resolve()
    try:
        folder.mkdir(parents=True, exist_ok=True)
    except OSError as err:
        raise ConfigError(f"{folder}: cannot create the sessions folder: {err}") from err
    first_run = _first_run(folder)

    try:
        if args.scan:
            bench = SimulatedBench(seed=args.seed, stage=True,
                                   trigger_period_s=DEMO_SCAN_TRIGGER_PERIOD_S)
        else:
            bench = SimulatedBench(seed=args.seed)
    except OSError as err:
        raise ConfigError(f"cannot start the simulated bench on 127.0.0.1: {err}") from err
    with bench:
        try:
            bench_path = bench.write_bench_file(folder / BENCH_FILE_NAME,
                                                session_folder=str(folder))
            plan = None
            if args.scan:
                from ..live.scanplan import load_plan

                plan_path = folder / PLAN_FILE_NAME
                plan_path.write_text(DEMO_PLAN, encoding="utf-8")
                loaded = load_bench(bench_path)
                assert loaded.stage is not None      # the simulated bench has its stage
                plan = load_plan(plan_path, limits=dict(loaded.stage.limits))
        except OSError as err:
            raise ConfigError(f"{folder}: cannot write the demo bench file: {err}") from err
        # with the dashboard the session runs in a child process; the simulated
        # instruments stay here, behind their sockets, like instruments of their own
        session = session_for_display(load_bench(bench_path), own_process=not args.headless,
                                      duration_s=args.duration,
                                      drive_on_at_start=DEMO_DRIVE_CAUSE, scan_plan=plan)
        return _watch(session, bench_path, headless=args.headless, first_run=first_run,
                      run_headless=run_headless)


def _watch(session, bench_path: Path, *, headless: bool, first_run: bool, run_headless) -> int:
    dashboard: Callable[..., int] | None = None
    if not headless:
        from ..dashboard.app import run_dashboard as dashboard

    def show() -> int:
        if first_run or headless:
            print(CAUTION, file=sys.stderr, flush=True)
        print(f"tankside demo: simulated bench on 127.0.0.1 (bench file {bench_path})",
              file=sys.stderr, flush=True)
        print(f"tankside demo: recording to {session.session_path}", file=sys.stderr,
              flush=True)
        if dashboard is None:
            session.start()
            print(f"tankside {DEMO_DRIVE_NOTE}", file=sys.stderr, flush=True)
            return run_headless(session)
        code = dashboard(session, first_run_notice=first_run, start_session=True,
                         started_note=DEMO_DRIVE_NOTE)
        from ..headless import end_summary

        print(end_summary(session), file=sys.stderr)
        return code

    return run_to_end(session, show, leftover_reason="demo ended")
