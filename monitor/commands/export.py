"""``tankside export``: results, a trace, the calibration file, a scan's map or everything
out of a session."""

from __future__ import annotations

import argparse
import sys

from ..errors import ConfigError
from ..progress import StopSignals, bar_factory
from .options import add_progress_options, number


def add_parser(subparsers) -> argparse.ArgumentParser:
    p = subparsers.add_parser(
        "export",
        help="write a recorded session's results, traces, calibration or scan map to CSV "
             "or HDF5",
        description=(
            "Export parts of a recorded session. Give one or more of the outputs below; "
            "the session file is only read, also while it is still being recorded."),
    )
    p.add_argument("session", metavar="FILE.db", help="the recorded session file")
    p.add_argument("--results", metavar="OUT.csv",
                   help="one row per trace: seq, time_s and the parameters under the names "
                        "of `convert --json`, then converted, clipped, range_changed, error")
    p.add_argument("--trace", type=number(low=0, high=2**62, whole=True), metavar="SEQ",
                   help="sequence number of one trace to write with --out")
    p.add_argument("--channel", type=number(low=1, high=16, whole=True), metavar="N",
                   help="with --trace: the digitiser channel to write, the hydrophone's "
                        "(default) or the monitor channel recorded with the trace, as raw "
                        "volts (never converted)")
    p.add_argument("--out", metavar="TRACE.csv",
                   help="where --trace goes: time_s,voltage_v in volts, the form `convert` reads")
    p.add_argument("--calibration-out", metavar="CAL.csv",
                   help="the recorded hydrophone calibration file, verbatim")
    p.add_argument("--map", metavar="OUT.csv",
                   help="a scan's map: one row per completed point: index, status, time, "
                        "target and measured position of each axis (mm), traces counted and "
                        "rejected, "
                        "first and last seq, resumed, the mean and spread of each combined "
                        "parameter, note (an error for a session without a scan)")
    p.add_argument("--hdf5", metavar="OUT.h5",
                   help="all traces, results, alerts, events and metadata, units as "
                        "attributes; with a scan, also /scan: its points and, on a line, "
                        "raster or volume, the gridded parameters with coordinate axes in mm")
    add_progress_options(p)
    p.set_defaults(func=run)
    return p


def run(args) -> int:
    from ..record import export
    from ..record.scanexport import require_scan
    from ..record.store import SessionReader

    if (args.trace is None) != (args.out is None):
        raise ConfigError("--trace SEQ and --out TRACE.csv go together")
    if args.channel is not None and args.trace is None:
        raise ConfigError("--channel N goes with --trace SEQ")
    if not any((args.results, args.out, args.calibration_out, args.map, args.hdf5)):
        raise ConfigError("nothing to export: give --results, --trace/--out, "
                          "--calibration-out, --map or --hdf5")
    with StopSignals() as stops, SessionReader(args.session) as reader:
        steps = bar_factory(args.progress, check=stops.check)
        if reader.note:
            print(f"note: {reader.note}", file=sys.stderr)
        if not reader.stopped_cleanly:
            print(f"note: {args.session} has no stop record: the session was not stopped "
                  "cleanly (or is still being recorded)", file=sys.stderr)
        if args.trace is not None:
            # an unknown seq or channel fails before any file is written
            export.trace_channel(reader, args.trace, args.channel)
        if args.map:
            require_scan(reader, "--map")  # so does a session without a scan
        if args.results:
            rows = export.export_results_csv(reader, args.results, progress=steps)
            print(f"wrote {rows} result rows to {args.results}")
        if args.trace is not None:
            n = export.export_trace_csv(reader, args.trace, args.out, channel=args.channel)
            which = "" if args.channel is None else f" channel {args.channel}"
            print(f"wrote trace {args.trace}{which} ({n} samples) to {args.out}")
        if args.calibration_out:
            sha = export.export_calibration(reader, args.calibration_out)
            print(f"wrote the calibration file to {args.calibration_out} (sha256 {sha})")
        if args.map:
            rows = export.export_map_csv(reader, args.map)
            print(f"wrote {rows} scan points to {args.map}")
        if args.hdf5:
            n = export.export_hdf5(reader, args.hdf5, progress=steps)
            print(f"wrote {n} traces with results, alerts and events to {args.hdf5}")
    return 0
