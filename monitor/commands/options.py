"""Command-line options shared by several commands, so they are spelled and scaled alike."""

from __future__ import annotations

import argparse
import math
from collections.abc import Callable
from typing import Any

from ..errors import ConfigError

PF = 1e-12


def number(*, low: float | None = None, high: float | None = None, low_open: bool = False,
           whole: bool = False, allow_inf: bool = False) -> Callable[[str], float]:
    """An argparse ``type`` for a number checked where it enters.

    The value must be finite (``allow_inf`` admits +inf, meaning "no limit"), at least
    ``low`` (above it with ``low_open``) and at most ``high``; ``whole`` asks for an
    integer. argparse names the option in its message and exits with the usage code.
    """
    def parse(text: str) -> float:
        try:
            value = float(text) if not whole else int(text, 10)
        except ValueError:
            kind = "a whole number" if whole else "a number"
            raise argparse.ArgumentTypeError(f"expected {kind}, got {text!r}") from None
        if math.isnan(value) or (math.isinf(value) and not (allow_inf and value > 0)):
            raise argparse.ArgumentTypeError(f"expected a finite number, got {text!r}")
        if low is not None and (value <= low if low_open else value < low):
            raise argparse.ArgumentTypeError(
                f"must be {'above' if low_open else 'at least'} {low:g}, got {text}")
        if high is not None and value > high:
            raise argparse.ArgumentTypeError(f"must be at most {high:g}, got {text}")
        return value
    parse.__name__ = "whole number" if whole else "number"
    return parse


# Common ranges: wide enough for any bench, narrow enough that arithmetic stays finite.
SECONDS = number(low=0.0, low_open=True, high=1e7)            # up to about 4 months
COUNT = number(low=1, high=10**12, whole=True)
SEED = number(low=0, high=2**32 - 1, whole=True)


def add_loading_options(parser: argparse.ArgumentParser, *, title: str) -> None:
    """Electrical-loading and water options, all defaulting to None (= not given).

    Capacitances are given in pF on the command line and carried in F everywhere else.
    """
    g = parser.add_argument_group(title)
    g.add_argument("--hydrophone-capacitance", metavar="PF",
                   type=number(low=0.0, low_open=True, high=1e6),
                   help="hydrophone capacitance, pF (e.g. 100); it switches on the loading "
                        "correction of an open-circuit calibration")
    g.add_argument("--cable-capacitance", metavar="PF", type=number(low=0.0, high=1e6),
                   help="cable capacitance across the hydrophone, pF (default 0)")
    g.add_argument("--input-resistance", metavar="OHM",
                   type=number(low=0.0, low_open=True, high=1e15),
                   help="digitiser (or preamplifier) input resistance, ohm (default: infinite)")
    g.add_argument("--input-capacitance", metavar="PF", type=number(low=0.0, high=1e6),
                   help="digitiser (or preamplifier) input capacitance, pF (default 0)")
    g.add_argument("--preamp-gain", metavar="DB", type=number(low=-100.0, high=100.0),
                   help="preamplifier voltage gain, dB (default 0)")
    g.add_argument("--temperature", metavar="DEGC", dest="water_temperature",
                   type=number(low=0.0, high=60.0),
                   help="water temperature, degC, for density and sound speed (default 20)")


def add_calibration_check_options(parser: argparse.ArgumentParser) -> None:
    """The calibration loader's plausibility checks, relaxed from the command line.

    ``args.calibration_max_step_db`` is None when not given; ``args.calibration_phase_check``
    is False with ``--no-calibration-phase-check``.
    """
    parser.add_argument("--calibration-max-step", metavar="DB",
                        type=number(low=0.0, low_open=True, allow_inf=True),
                        dest="calibration_max_step_db",
                        help="largest sensitivity step between neighbouring calibration "
                             "rows, dB (default 20; inf: no check); a larger step is refused "
                             "as a likely typing error")
    parser.add_argument("--no-calibration-phase-check", dest="calibration_phase_check",
                        action="store_false",
                        help="accept unwrapped calibration phase that steps by more than "
                             "180 degrees between neighbouring rows")


def calibration_checks(args: argparse.Namespace) -> dict:
    """The keywords of ``load_calibration`` given on the command line (``[calibration]`` keys)."""
    out: dict = {}
    if args.calibration_max_step_db is not None:
        if not args.calibration_max_step_db > 0:
            raise ConfigError("--calibration-max-step must be above 0 dB (inf: no check)")
        out["max_step_db"] = args.calibration_max_step_db
    if not args.calibration_phase_check:
        out["check_phase_steps"] = False
    return out


def add_progress_options(parser: argparse.ArgumentParser) -> None:
    """``--progress`` / ``--no-progress``: ``args.progress`` is True, False or None
    (= on a terminal)."""
    bar = parser.add_mutually_exclusive_group()
    bar.add_argument("--progress", dest="progress", action="store_const", const=True,
                     default=None, help="always show the progress bar (default: on a terminal)")
    bar.add_argument("--no-progress", dest="progress", action="store_const", const=False,
                     help="never show the progress bar")


def loading_overrides(args: argparse.Namespace) -> dict[str, Any]:
    """The loading fields given on the command line, in SI units (Loading field names)."""
    out: dict[str, Any] = {}
    if args.hydrophone_capacitance is not None:
        out["hydrophone_capacitance_f"] = args.hydrophone_capacitance * PF
    if args.cable_capacitance is not None:
        out["cable_capacitance_f"] = args.cable_capacitance * PF
    if args.input_resistance is not None:
        out["input_resistance_ohm"] = args.input_resistance
    if args.input_capacitance is not None:
        out["input_capacitance_f"] = args.input_capacitance * PF
    if args.preamp_gain is not None:
        out["preamp_gain_db"] = args.preamp_gain
    return out
