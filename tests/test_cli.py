"""The command line as a whole: every command is there, has help, and shares option spellings."""

from __future__ import annotations

import pytest

from tankside.monitor.cli import COMMANDS, build_parser, main
from tankside.monitor.commands.watch import overrides_from_args

LOADING_OPTIONS = ("--hydrophone-capacitance", "--cable-capacitance", "--input-resistance",
                   "--input-capacitance", "--preamp-gain", "--temperature")


def test_every_command_is_registered():
    parser = build_parser()
    sub = next(a for a in parser._actions if a.dest == "command")
    assert set(sub.choices) == set(COMMANDS)


@pytest.mark.parametrize("command", COMMANDS)
def test_help_of_every_command(command, capsys):
    with pytest.raises(SystemExit) as exit_info:
        main([command, "--help"])
    assert exit_info.value.code == 0
    out = capsys.readouterr().out
    assert out.startswith(f"usage: tankside {command}")


@pytest.mark.parametrize("command", ["convert", "watch"])
def test_loading_options_spelled_alike(command, capsys):
    with pytest.raises(SystemExit):
        main([command, "--help"])
    out = capsys.readouterr().out
    for option in LOADING_OPTIONS:
        assert option in out, option


@pytest.mark.parametrize("command", [["export", "s.db", "--hdf5", "o.h5"],
                                     ["replay", "s.db", "--out", "n.db"]])
def test_progress_options_alike(command, capsys):
    parser = build_parser()
    assert parser.parse_args(command).progress is None
    assert parser.parse_args([*command, "--progress"]).progress is True
    assert parser.parse_args([*command, "--no-progress"]).progress is False
    with pytest.raises(SystemExit) as exit_info:
        parser.parse_args([*command, "--progress", "--no-progress"])
    assert exit_info.value.code == 2
    assert "not allowed with argument" in capsys.readouterr().err


def test_watch_takes_capacitance_in_pf():
    args = build_parser().parse_args(
        ["watch", "--bench", "b.toml", "--hydrophone-capacitance", "100",
         "--cable-capacitance", "50", "--input-capacitance", "15", "--input-resistance", "1e6",
         "--preamp-gain", "20", "--temperature", "25"])
    o = overrides_from_args(args)
    assert o["loading.hydrophone_capacitance_f"] == pytest.approx(100e-12)
    assert o["loading.cable_capacitance_f"] == pytest.approx(50e-12)
    assert o["loading.input_capacitance_f"] == pytest.approx(15e-12)
    assert o["loading.input_resistance_ohm"] == 1e6
    assert o["loading.preamp_gain_db"] == 20
    assert o["water.temperature_c"] == 25


def test_watch_relaxes_the_calibration_checks():
    parser = build_parser()
    o = overrides_from_args(parser.parse_args(["watch", "--bench", "b.toml"]))
    assert not any(key.startswith("calibration.") for key in o)
    o = overrides_from_args(parser.parse_args(
        ["watch", "--bench", "b.toml", "--calibration-max-step", "30",
         "--no-calibration-phase-check"]))
    assert o["calibration.max_step_db"] == 30.0
    assert o["calibration.check_phase_steps"] is False


def test_missing_trace_file_is_one_line_exit_2(tmp_path, capsys):
    cal = tmp_path / "cal.csv"
    cal.write_text("frequency_hz,sensitivity_v_per_pa\n1e6,1e-7\n2e6,1e-7\n3e6,1e-7\n")
    code = main(["convert", str(tmp_path / "absent.csv"), "--calibration", str(cal)])
    err = capsys.readouterr().err
    assert code == 2
    assert err.count("\n") == 1 and "absent.csv" in err and "Traceback" not in err
