"""The ``tankside`` command: parses arguments and wires objects together, nothing more.

Exit codes (also in the README):

0  success, or a session stopped as asked (duration, trace count, Ctrl-C, SIGTERM, ``q``)
1  a session stopped by an alert rule whose action is ``stop``
2  an expected failure: bad input file, bad settings, instrument not reachable
3  a session that ended on an instrument failure it could not recover from
4  the session store could not be written (disk full, permissions); committed data intact
"""

from __future__ import annotations

import argparse
import importlib
import sys

from ..drivers.errors import InstrumentError
from . import __version__
from .errors import StoreError, TanksideError

EXIT_OK = 0
EXIT_STOPPED_BY_RULE = 1
EXIT_USAGE = 2
EXIT_INSTRUMENT = 3
EXIT_STORE = 4

# Each name is a module in tankside.monitor.commands with add_parser() and run().
COMMANDS = ("convert", "simulate", "probe", "watch", "replay", "export", "demo")


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
        return EXIT_STORE
    except TanksideError as err:
        print(f"tankside: error: {err}", file=sys.stderr)
        return EXIT_USAGE
    except InstrumentError as err:
        print(f"tankside: instrument error: {err}", file=sys.stderr)
        return EXIT_USAGE
    except KeyboardInterrupt:
        print("tankside: interrupted", file=sys.stderr)
        return EXIT_OK
    except BrokenPipeError:
        return EXIT_OK


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
