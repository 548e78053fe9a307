"""``tankside probe``: what works on an instrument, tried through its profile.

The trying is :class:`tankside.drivers.probe.Prober` (it leaves the instrument as it
was); this command opens the link, runs it and prints its report.
"""

from __future__ import annotations

import argparse

from ...drivers.errors import ConnectionLost
from ...drivers.line_probe import LARGEST_PROBE_MOVE_MM, probe_stage, probe_thermometer
from ...drivers.probe import Outcome, Prober, Row
from ...drivers.profile import load_profile
from ...drivers.scpi import ScpiLink
from ...drivers.stage import load_stage_profile, open_stage
from ...drivers.thermometer import load_thermometer_profile, open_thermometer
from ..errors import ConfigError
from ..outcome import ExitCode
from .options import number

EPILOG = """\
results:
  ok         the instrument accepted the operation (and reported no error)
  failed     it did not (no reply, an error in its queue, or a reply that does not parse)
  not tried  trying it would change a setting that cannot be restored (or needs --acquire)

exit codes:
  0  every operation tried worked
  2  the instrument cannot be reached, or the profile cannot be loaded
  3  at least one operation failed
"""



def add_parser(subparsers) -> None:
    p = subparsers.add_parser(
        "probe", help="identify an instrument and try each operation of its profile",
        description=("Identify the instrument at RESOURCE and, with --profile, try each "
                     "operation the profile defines, reporting which work. Settings are "
                     "read first and written back unchanged; a setting the profile cannot "
                     "read back is not touched."),
        epilog=EPILOG, formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("resource", metavar="RESOURCE", nargs="?",
                   help='VISA resource string, e.g. "TCPIP0::192.168.1.20::5025::SOCKET" '
                        "(not with --stage or --thermometer)")
    p.add_argument("--profile", metavar="P",
                   help="instrument profile: a built-in name or a path to a TOML file; "
                        "without it only *IDN?, *OPC? and the error queue are tried")
    p.add_argument("--visa-library", default="@py", metavar="L",
                   help='VISA library for pyvisa (default "@py", the pure-Python backend)')
    p.add_argument("--timeout", type=number(low=0.001, high=3600.0), default=None,
                   metavar="S",
                   help="I/O timeout in seconds (default: the profile's, else 5)")
    p.add_argument("--acquire", action="store_true",
                   help="also arm one acquisition and fetch it (a digitiser that was "
                        "free-running is left stopped after a single acquisition)")
    p.add_argument("--trigger-timeout", type=number(low=0.001, high=3600.0), default=5.0,
                   metavar="S",
                   help="with --acquire: how long to wait for the trigger, s (default 5)")
    add_line_arguments(p)
    p.set_defaults(func=run)


def add_line_arguments(p) -> None:
    """Options for the serial (line-protocol) instruments: a stage or a thermometer."""
    line = p.add_argument_group("serial instruments (stage, thermometer)")
    which = line.add_mutually_exclusive_group()
    which.add_argument("--stage", metavar="P",
                       help="probe a stage described by stage profile P (TOML)")
    which.add_argument("--thermometer", metavar="P",
                       help="probe a thermometer described by thermometer profile P (TOML)")
    where = line.add_mutually_exclusive_group()
    where.add_argument("--port", metavar="DEV",
                       help="serial device path, e.g. /dev/ttyUSB0")
    where.add_argument("--address", metavar="HOST:PORT",
                       help="raw TCP address of the controller instead of a serial port")
    line.add_argument("--baud-rate", type=number(low=50, high=10_000_000, whole=True),
                      default=None, metavar="N", help="override the profile's baud rate")
    line.add_argument("--move", type=number(low=-LARGEST_PROBE_MOVE_MM,
                                            high=LARGEST_PROBE_MOVE_MM), default=None,
                      metavar="MM",
                      help=f"with --stage: move the first axis by MM (at most "
                           f"{LARGEST_PROBE_MOVE_MM:g} mm either way) and back, then stop; "
                           "without it the stage is never moved. Make sure the hydrophone "
                           "has that much free travel")


def run_line(args) -> int:
    """``probe --stage`` / ``--thermometer``."""
    if args.resource:
        raise ConfigError("probe: give a RESOURCE (SCPI instrument) or --stage / "
                          "--thermometer with --port or --address, not both")
    if args.port is None and args.address is None:
        raise ConfigError("probe: --stage and --thermometer need --port DEV or "
                          "--address HOST:PORT")
    where = {"port": args.port, "address": args.address, "baud_rate": args.baud_rate,
             "timeout_s": args.timeout}
    try:
        if args.stage:
            stage = open_stage(load_stage_profile(args.stage), **where)
            source, close = stage.profile.source, stage.close
            try:
                rows = probe_stage(stage, move_mm=args.move)
            finally:
                close()
        else:
            if args.move is not None:
                raise ConfigError("probe: --move is for --stage")
            thermometer = open_thermometer(load_thermometer_profile(args.thermometer),
                                           **where)
            source, close = thermometer.profile.source, thermometer.close
            try:
                rows = probe_thermometer(thermometer)
            finally:
                close()
    except ValueError as err:          # a malformed --address
        raise ConfigError(f"probe: {err}") from err
    print(f"{args.port or args.address}: profile {source}")
    print(format_table(rows))
    failed = sum(r.result == Outcome.FAILED for r in rows)
    skipped = sum(r.result == Outcome.NOT_TRIED for r in rows)
    print(f"{len(rows) - failed - skipped} ok, {failed} failed, {skipped} not tried")
    return ExitCode.INSTRUMENT if failed else ExitCode.OK


def format_table(rows: list[Row]) -> str:
    """The rows as a fixed-width text table."""
    head = Row("operation", "command", "result", "detail")
    width = [max(len(getattr(r, f)) for r in [head, *rows])
             for f in ("operation", "command", "result")]
    lines = []
    for r in [head, *rows]:
        lines.append(f"{r.operation:<{width[0]}}  {r.command:<{width[1]}}  "
                     f"{r.result:<{width[2]}}  {r.detail}".rstrip())
    lines.insert(1, "-" * min(100, max(len(line) for line in lines)))
    return "\n".join(lines)


def run(args) -> int:
    if args.stage or args.thermometer:
        return run_line(args)
    if args.resource is None:
        raise ConfigError("probe: give a RESOURCE, or --stage / --thermometer P with "
                          "--port or --address")
    profile = load_profile(args.profile) if args.profile else None
    timeout_s = args.timeout or (profile.timeout_s if profile else 5.0)
    terms = ({"read_termination": profile.read_termination,
              "write_termination": profile.write_termination} if profile else {})
    link = ScpiLink.open(args.resource, visa_library=args.visa_library,
                               timeout_s=timeout_s, error_policy="raise",
                               resync_timeout_s=max(2.0, 3 * timeout_s), **terms)
    if profile is not None and profile.has("get_error"):
        link.error_query = profile.command("get_error")
    prober = Prober(link, profile, trigger_timeout_s=args.trigger_timeout)
    try:
        prober.run(args.acquire)
    except ConnectionLost:
        print(format_table(prober.rows))
        raise
    finally:
        link.close(quiet=True)
    print(f"{args.resource}: {link.identity or 'no identity'}")
    if profile is not None:
        print(f"profile: {profile.source} ({profile.kind})")
    print(format_table(prober.rows))
    failed = sum(r.result == Outcome.FAILED for r in prober.rows)
    skipped = sum(r.result == Outcome.NOT_TRIED for r in prober.rows)
    print(f"{len(prober.rows) - failed - skipped} ok, {failed} failed, {skipped} not tried")
    return ExitCode.INSTRUMENT if failed else ExitCode.OK
