"""Command-line options shared by several commands, so they are spelled and scaled alike."""

from __future__ import annotations

import argparse

from ..errors import ConfigError

PF = 1e-12


def add_loading_options(parser: argparse.ArgumentParser, *, title: str) -> None:
    """Electrical-loading and water options, all defaulting to None (= not given).

    Capacitances are given in pF on the command line and carried in F everywhere else.
    """
    g = parser.add_argument_group(title)
    g.add_argument("--hydrophone-capacitance", metavar="PF", type=float,
                   help="hydrophone capacitance, pF (e.g. 100); it switches on the loading "
                        "correction of an open-circuit calibration")
    g.add_argument("--cable-capacitance", metavar="PF", type=float,
                   help="cable capacitance across the hydrophone, pF (default 0)")
    g.add_argument("--input-resistance", metavar="OHM", type=float,
                   help="digitiser (or preamplifier) input resistance, ohm (default: infinite)")
    g.add_argument("--input-capacitance", metavar="PF", type=float,
                   help="digitiser (or preamplifier) input capacitance, pF (default 0)")
    g.add_argument("--preamp-gain", metavar="DB", type=float,
                   help="preamplifier voltage gain, dB (default 0)")
    g.add_argument("--temperature", metavar="DEGC", dest="water_temperature", type=float,
                   help="water temperature, degC, for density and sound speed (default 20)")


def add_calibration_check_options(parser: argparse.ArgumentParser) -> None:
    """The calibration loader's plausibility checks, relaxed from the command line.

    ``args.calibration_max_step_db`` is None when not given; ``args.calibration_phase_check``
    is False with ``--no-calibration-phase-check``.
    """
    parser.add_argument("--calibration-max-step", metavar="DB", type=float,
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


def loading_overrides(args: argparse.Namespace) -> dict[str, float]:
    """The loading fields given on the command line, in SI units (Loading field names)."""
    out: dict[str, float] = {}
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
