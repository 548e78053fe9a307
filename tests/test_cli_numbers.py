"""Command-line numbers are checked where they enter, with the option named.

A NaN duration once made a session that never stopped; 1e308 gains and seeds of -1
ended in tracebacks. argparse reports a bad value as a usage error (exit 2) naming the
option, before anything is opened.
"""

from __future__ import annotations

import pytest

from tankside.monitor.cli import main
from tankside.monitor.outcome import ExitCode

BAD = [
    (["watch", "--bench", "b.toml", "--duration", "nan"], "--duration", "finite"),
    (["watch", "--bench", "b.toml", "--duration", "inf"], "--duration", "finite"),
    (["watch", "--bench", "b.toml", "--duration", "0"], "--duration", "above 0"),
    (["watch", "--bench", "b.toml", "--traces", "0"], "--traces", "at least 1"),
    (["watch", "--bench", "b.toml", "--traces", "2.5"], "--traces", "whole number"),
    (["watch", "--bench", "b.toml", "--preamp-gain", "1e308"], "--preamp-gain", "at most"),
    (["watch", "--bench", "b.toml", "--range", "-0.1"], "--range", "above 0"),
    (["watch", "--bench", "b.toml", "--temperature", "90"], "--temperature", "at most 60"),
    (["watch", "--bench", "b.toml", "--status-every", "nan"], "--status-every", "finite"),
    (["watch", "--bench", "b.toml", "--hydrophone-capacitance", "x"],
     "--hydrophone-capacitance", "expected a number"),
    (["simulate", "--seed", "-1"], "--seed", "at least 0"),
    (["simulate", "--duration", "nan"], "--duration", "finite"),
    (["simulate", "--port", "70000"], "--port", "at most 65534"),
    (["demo", "--duration", "-5"], "--duration", "above 0"),
    (["export", "s.db", "--trace", "1e30"], "--trace", "whole number"),
    (["probe", "TCPIP0::127.0.0.1::1::SOCKET", "--timeout", "inf"], "--timeout", "finite"),
]


@pytest.mark.parametrize("argv, option, why", BAD, ids=lambda v: " ".join(v)
                         if isinstance(v, list) else None)
def test_bad_number_is_a_usage_error_naming_the_option(argv, option, why, capsys):
    with pytest.raises(SystemExit) as info:
        main(argv)
    assert info.value.code == ExitCode.USAGE
    err = capsys.readouterr().err
    assert f"argument {option}" in err and why in err
    assert "Traceback" not in err


def test_inf_is_accepted_where_it_means_no_limit(tmp_path, capsys):
    # --calibration-max-step inf switches the check off; it must parse (the command then
    # fails on the missing trace file, a usage error of its own)
    code = main(["convert", str(tmp_path / "none.csv"), "--calibration",
                 str(tmp_path / "cal.csv"), "--calibration-max-step", "inf"])
    assert code == ExitCode.USAGE
    assert "argument --calibration-max-step" not in capsys.readouterr().err
