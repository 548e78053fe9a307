"""``tankside probe``: what works on an instrument, tried through its profile.

The trying is :class:`tankside.drivers.probe.Prober` (it leaves the instrument as it
was); this command opens the link, runs it and prints its report.
"""

from __future__ import annotations

import argparse

from ...drivers.errors import ConnectionLost
from ...drivers.probe import Outcome, Prober, Row
from ...drivers.profile import load_profile
from ...drivers.scpi import ScpiLink
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
    p.add_argument("resource", metavar="RESOURCE",
                   help='VISA resource string, e.g. "TCPIP0::192.168.1.20::5025::SOCKET"')
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
    p.set_defaults(func=run)


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
