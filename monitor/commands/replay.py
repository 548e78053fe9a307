"""``tankside replay``: recompute every result of a stored session into a new session file."""

from __future__ import annotations

import argparse
import sys

from ..acoustics.settings import Method
from ..progress import StopSignals, bar_factory
from .options import add_calibration_check_options, add_progress_options, calibration_checks


def add_parser(subparsers) -> argparse.ArgumentParser:
    p = subparsers.add_parser(
        "replay",
        help="recompute the results of a recorded session into a new session file",
        description=(
            "Re-run the conversion on every raw trace of a recorded session and write a new "
            "session file with the new results. The recorded file is only read. With the "
            "session's own calibration and settings the results equal the recorded ones "
            "exactly; give --calibration or --method to reprocess differently."),
    )
    p.add_argument("session", metavar="FILE.db", help="the recorded session file")
    p.add_argument("--out", required=True, metavar="NEW.db",
                   help="the new session file to write (must not be FILE.db)")
    p.add_argument("--calibration", metavar="CAL.csv",
                   help="use this hydrophone calibration file instead of the recorded one")
    add_calibration_check_options(p)
    p.add_argument("--method", choices=[m.value for m in Method],
                   help="conversion method for every trace, instead of the recorded one(s)")
    p.add_argument("--force", action="store_true", help="replace NEW.db if it exists")
    p.add_argument("--check", action="store_true",
                   help="also count the traces whose new results differ from the recorded ones")
    add_progress_options(p)
    p.set_defaults(func=run)
    return p


def run(args) -> int:
    from ..record.replay import replay_session

    with StopSignals() as stops:
        summary = replay_session(args.session, args.out, calibration_path=args.calibration,
                                 calibration_checks=calibration_checks(args),
                                 method=args.method, force=args.force, check=args.check,
                                 progress=bar_factory(args.progress, check=stops.check))
    if summary.note:
        print(f"note: {summary.note}", file=sys.stderr)
    line = (f"replayed {summary.traces} traces into {summary.out_path}: "
            f"{summary.converted} converted, {summary.failed} failed, "
            f"{summary.seconds:.1f} s")
    if summary.differences is not None:
        line += f"; {summary.differences} differ from the recorded results"
    print(line)
    return 0
