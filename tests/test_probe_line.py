"""``tankside probe --stage`` and ``--thermometer`` on the simulated serial instruments
(real ptys, opened by pyserial through the command)."""

from __future__ import annotations

import pytest

from tankside.monitor.cli import main
from tankside.monitor.outcome import ExitCode
from tankside.simulators.bench import PROFILE_DIR as SIM_PROFILES
from tankside.simulators.stage import SimulatedStage
from tankside.simulators.thermometer import SimulatedThermometer

STAGE = str(SIM_PROFILES / "sim-stage.toml")
THERMOMETER = str(SIM_PROFILES / "sim-thermometer.toml")


@pytest.fixture
def stage():
    with SimulatedStage() as device:
        yield device


def test_stage_probe_without_move_never_moves(stage, capsys):
    assert main(["probe", "--stage", STAGE, "--port", stage.device_path]) == ExitCode.OK
    out = capsys.readouterr().out
    assert "SIMSTAGE-3" in out and "x 0.0000 mm, y 0.0000 mm, z 0.0000 mm" in out
    assert "moves only with --move" in out
    assert not any(" GO " in line for line in stage.received)
    assert stage.received[-1] == "HALT"            # told to stop all the same


def test_stage_probe_move_goes_and_comes_back(stage, capsys):
    assert main(["probe", "--stage", STAGE, "--port", stage.device_path,
                 "--move", "0.5"]) == ExitCode.OK
    out = capsys.readouterr().out
    assert "x 0.5000 mm" in out and "move back" in out
    assert "X GO 500" in stage.received and "X GO 0" in stage.received
    assert stage.position_mm()["x"] == pytest.approx(0.0, abs=1e-3)
    assert stage.received[-1] == "HALT"


def test_a_move_beyond_a_millimetre_is_refused_by_the_parser(stage, capsys):
    with pytest.raises(SystemExit) as caught:
        main(["probe", "--stage", STAGE, "--port", stage.device_path, "--move", "5"])
    assert caught.value.code == 2
    assert "--move" in capsys.readouterr().err
    assert stage.received == []


def test_a_silent_stage_is_reported_failed(stage, capsys):
    stage.go_silent()
    assert main(["probe", "--stage", STAGE, "--port", stage.device_path,
                 "--timeout", "0.1"]) == ExitCode.INSTRUMENT
    out = capsys.readouterr().out
    assert "failed" in out and "no reply" in out and "Traceback" not in out


def test_thermometer_probe(capsys):
    with SimulatedThermometer(start_c=19.0, drift_c_per_min=0.0, noise_c=0.001) as device:
        assert main(["probe", "--thermometer", THERMOMETER,
                     "--port", device.device_path]) == ExitCode.OK
    out = capsys.readouterr().out
    assert "SIMTHERM-1" in out and out.count("19.0") >= 3


@pytest.mark.parametrize("argv, message", [
    (["TCPIP0::127.0.0.1::1::SOCKET", "--stage", STAGE, "--port", "/dev/null"], "not both"),
    (["--stage", STAGE], "need --port"),
    ([], "give a RESOURCE"),
    (["--thermometer", THERMOMETER, "--port", "/dev/null", "--move", "0.1"], "for --stage"),
    (["--stage", STAGE, "--address", "nohost"], "host:port"),
])
def test_usage_errors_are_one_line(argv, message, capsys):
    assert main(["probe", *argv]) == ExitCode.USAGE
    err = capsys.readouterr().err
    assert message in err and err.count("\n") == 1


def test_a_missing_port_is_an_instrument_error(tmp_path, capsys):
    assert main(["probe", "--stage", STAGE, "--port", str(tmp_path / "ttyNONE")]) == \
        ExitCode.USAGE
    assert "cannot open serial port" in capsys.readouterr().err
