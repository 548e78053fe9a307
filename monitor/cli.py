"""The ``tankside`` command: parses arguments and wires objects together, nothing more.

Exit codes (:class:`tankside.monitor.outcome.ExitCode`, also in the README):

0  success, or a session stopped as asked (duration, trace count, Ctrl-C, SIGTERM, ``q``)
1  a session stopped by an alert rule whose action is ``stop``
2  an expected failure: bad input file, bad settings, instrument not reachable
3  a session that ended on an instrument failure it could not recover from
4  the session store could not be written (disk full, permissions); committed data intact
5  a session that ended on an internal error (a bug); committed data intact
6  the generator output could not be confirmed off: the drive may still be on
130  interrupted by Ctrl-C or SIGTERM before it finished; no partial output is left
"""

from __future__ import annotations

import argparse
import importlib
import sys

from ..drivers.errors import InstrumentError
from . import __version__
from .errors import StoreError, TanksideError
from .outcome import ExitCode

# Each name is a module in tankside.monitor.commands with add_parser() and run().
COMMANDS = ("convert", "simulate", "probe", "watch", "scan", "replay", "export", "demo")


def _command_modules():
    for name in COMMANDS:
        yield importlib.import_module(f"tankside.monitor.commands.{name}")


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="tankside",
        description="Live hydrophone-pressure monitor for ultrasound measurements in a water tank.",
    )
    parser.add_argument("--version", action="version", version=f"tankside {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    sub.required = True
    for module in _command_modules():
        module.add_parser(sub)
    return parser


def main(argv: list[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    try:
        return int(args.func(args) or 0)
    except StoreError as err:
        print(f"tankside: store error: {err}", file=sys.stderr)
        return ExitCode.STORE
    except TanksideError as err:
        print(f"tankside: error: {err}", file=sys.stderr)
        return ExitCode.USAGE
    except InstrumentError as err:
        print(f"tankside: instrument error: {err}", file=sys.stderr)
        return ExitCode.USAGE
    except KeyboardInterrupt as err:
        # A running session handles Ctrl-C and SIGTERM itself and ends as asked; reaching
        # here means a command did not finish (export, replay and convert write their
        # outputs whole or not at all).
        print(f"tankside: interrupted ({getattr(err, 'signal_name', 'Ctrl-C')})",
              file=sys.stderr)
        return ExitCode.INTERRUPTED
    except BrokenPipeError:
        return ExitCode.OK


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
