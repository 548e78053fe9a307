"""``tankside scan``: a live session that moves the stage through a plan, point by point."""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from ..errors import ConfigError
from .options import number
from .watch import LIVE_FAILURE_CODES, _abs, add_live_options, overrides_from_args, run_live

EPILOG = """\
exit codes:
  0  the scan completed, or stopped as asked (Ctrl-C, SIGTERM, q in the dashboard)
  1  stopped by an alert rule (an over-pressure's safe-off ends the scan: the stage and
     the drive are stopped; resume it with --resume once the cause is understood)
  2  bad bench file, plan or setting (a point outside the soft limits is named), or an
     instrument that cannot be reached at the start
""" + LIVE_FAILURE_CODES + """
The scan waits with the drive off: tankside never switches the generator output on by
itself (use the dashboard's d key, or --drive-on). Traces are recorded throughout; those
acquired while the stage moves or settles belong to no point. A scan interrupted in any
way (a crash, kill -9, power loss, the operator) goes on with --resume FILE.db from the
first point not completed, in the same file; no point is ever recorded twice.
"""


def add_parser(subparsers) -> None:
    p = subparsers.add_parser(
        "scan", help="scan: move the stage point by point, acquire, map the beam live",
        description=("Run the scan plan of --plan (or the bench file's [scan] table): at each\n"
                     "point move the stage (within the bench file's soft limits), wait the\n"
                     "settle time, acquire the plan's traces and combine them; the map and\n"
                     "the beam figures update as points arrive. Everything of `watch`\n"
                     "applies: alerts, actions, the dashboard or --headless, the record."),
        epilog=EPILOG, formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("--bench", required=True, metavar="BENCH.toml",
                   help="bench file describing instruments (a [stage] with its soft "
                        "limits), calibration, limits and the session folder")
    p.add_argument("--plan", metavar="PLAN.toml",
                   help="scan plan (default: the bench file's [scan] table)")
    p.add_argument("--session", metavar="FILE.db",
                   help="new session file (default: session-DATE-TIME.db in the bench "
                        "file's session folder); must not exist")
    p.add_argument("--resume", metavar="FILE.db",
                   help="go on with the scan recorded in FILE.db from its first point not "
                        "completed, in the same file (its own plan; not with --plan or "
                        "--session)")
    p.add_argument("--passive", action="store_true",
                   help="never move the stage: another program moves it, and each point of "
                        "the plan is measured when the stage comes to rest there (so also "
                        "with a stage profile that has no move command)")
    p.add_argument("--dry-run", action="store_true",
                   help="print the points, the travel and an estimate of the time, and "
                        "exit; nothing is sent to any instrument")
    p.add_argument("--trace-rate", type=number(low=0.0, low_open=True, high=1e6),
                   default=20.0, metavar="HZ",
                   help="traces per second the digitiser delivers, for the --dry-run "
                        "estimate (default 20)")
    add_live_options(p)
    p.set_defaults(func=run)


def _plan(args, bench):
    from ..live.scanplan import load_plan

    limits = dict(bench.stage.limits) if bench.stage is not None else {}
    if args.plan:
        return load_plan(_abs(args.plan), limits=limits)
    plan = getattr(bench, "scan", None)
    if plan is None:
        raise ConfigError(f"{args.bench}: no scan plan: give --plan PLAN.toml or a [scan] "
                          "table in the bench file")
    return plan


def run(args) -> int:
    from ..live.benchfile import load_bench
    from ..live.scanplan import summarise_plan

    if args.resume and (args.plan or args.session):
        raise ConfigError("--resume goes on with the plan and file it names; leave out "
                          "--plan and --session")
    bench = load_bench(args.bench, overrides_from_args(args))
    if bench.stage is None:
        raise ConfigError(f"{args.bench}: a scan needs a stage: the bench file has no "
                          "[stage] (see the README, 'Serial instruments')")
    if args.resume:
        path = Path(_abs(args.resume))
        if args.dry_run:
            from ..live.build import scan_resume

            plan, resumed = scan_resume(path, bench)
            left = len(plan.points) - len(resumed.completed)
            print(f"{path}: {len(resumed.completed)} of {len(plan.points)} points completed; "
                  f"{left} to go from point {resumed.first_point}")
            print(summarise_plan(plan, trace_rate_hz=args.trace_rate).text())
            return 0
        return run_live(args, bench, session_path=str(path), resume=True,
                        passive=args.passive)
    plan = _plan(args, bench)
    if args.dry_run:
        print(summarise_plan(plan, trace_rate_hz=args.trace_rate).text())
        return 0
    if plan.notes:
        for note in plan.notes:
            print(f"tankside: note: {note}", file=sys.stderr, flush=True)
    return run_live(args, bench, session_path=_abs(args.session) if args.session else None,
                    scan_plan=plan, passive=args.passive)
