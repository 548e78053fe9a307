"""The bench file's [stage], [stage.limits] and [thermometer] sections."""

from __future__ import annotations

import pickle
from pathlib import Path

import pytest

from tankside.monitor.errors import ConfigError
from tankside.monitor.live.benchfile import DEFAULT_MAX_AGE_S, load_bench

CAL_TEXT = Path(__file__).resolve().parents[1] / "simulators" / "data" / "demo-hydrophone.csv"

BASE = """
[digitiser]
resource = "TCPIP0::127.0.0.1::5025::SOCKET"
profile = "dig.toml"

[calibration]
file = "cal.csv"
"""

STAGE = """
[stage]
profile = "stage.toml"
port = "/dev/pts/5"
baud_rate = 115200
timeout_s = 1.0
[stage.limits]
x = [-20.0, 20.0]
y = [-20, 20]
z = [0.0, 80.0]
"""

THERMOMETER = """
[thermometer]
profile = "thermometer.toml"
address = "127.0.0.1:5030"
max_age_s = 12.5
"""


def bench(tmp_path, text):
    for name in ("dig.toml", "stage.toml", "thermometer.toml"):
        (tmp_path / name).write_text("# placeholder\n")
    (tmp_path / "cal.csv").write_text(CAL_TEXT.read_text())
    path = tmp_path / "bench.toml"
    path.write_text(BASE + text)
    return path


def test_without_the_sections_nothing_changes(tmp_path):
    config = load_bench(bench(tmp_path, ""))
    assert config.stage is None and config.thermometer is None
    assert "stage" not in config.tables and "thermometer" not in config.tables


def test_stage_and_thermometer_parse(tmp_path):
    config = load_bench(bench(tmp_path, STAGE + THERMOMETER))
    stage = config.stage
    assert stage is not None
    assert stage.profile == str(tmp_path / "stage.toml")     # resolved beside the bench
    assert stage.port == "/dev/pts/5" and stage.address is None
    assert stage.baud_rate == 115200 and stage.timeout_s == 1.0
    assert stage.limits == {"x": (-20.0, 20.0), "y": (-20.0, 20.0), "z": (0.0, 80.0)}
    assert all(isinstance(v, float) for pair in stage.limits.values() for v in pair)
    thermo = config.thermometer
    assert thermo is not None
    assert thermo.address == "127.0.0.1:5030" and thermo.port is None
    assert thermo.resource == "127.0.0.1:5030"
    assert thermo.max_age_s == 12.5 and thermo.baud_rate is None
    assert config.tables["stage"]["profile"] == stage.profile
    # the configuration crosses to the session's child process
    assert pickle.loads(pickle.dumps(config)) == config


def test_max_age_defaults_to_30_s(tmp_path):
    config = load_bench(bench(tmp_path, '[thermometer]\nprofile = "thermometer.toml"\n'
                                        'port = "/dev/pts/7"\n'))
    assert config.thermometer is not None
    assert config.thermometer.max_age_s == DEFAULT_MAX_AGE_S == 30.0


@pytest.mark.parametrize("text, names", [
    # limits are required with a stage
    ('[stage]\nprofile = "stage.toml"\nport = "/dev/pts/5"\n', "[stage.limits]"),
    ('[stage]\nprofile = "stage.toml"\nport = "/dev/pts/5"\n[stage.limits]\n', "[stage.limits]"),
    (STAGE.replace("x = [-20.0, 20.0]", "x = [20.0, -20.0]"), "[stage.limits] x"),
    (STAGE.replace("x = [-20.0, 20.0]", "x = [5.0, 5.0]"), "[stage.limits] x"),
    (STAGE.replace("x = [-20.0, 20.0]", "x = [-20.0]"), "[stage.limits] x"),
    (STAGE.replace("x = [-20.0, 20.0]", 'x = ["a", 1.0]'), "[stage.limits] x"),
    (STAGE.replace("x = [-20.0, 20.0]", "x = [-inf, 1.0]"), "[stage.limits] x"),
    (STAGE.replace("x = [-20.0, 20.0]", "x = 20.0"), "[stage.limits] x"),
    (STAGE.replace('port = "/dev/pts/5"', ""), "[stage] port"),
    (STAGE.replace('port = "/dev/pts/5"', 'port = "/dev/pts/5"\naddress = "h:1"'), "[stage] port"),
    (STAGE.replace('profile = "stage.toml"', ""), "[stage] profile"),
    (STAGE.replace("baud_rate = 115200", "baud_rate = 0"), "[stage] baud_rate"),
    (STAGE.replace("baud_rate = 115200", "baud_rate = 9600.5"), "[stage] baud_rate"),
    (STAGE.replace("timeout_s = 1.0", "timeout_s = -1.0"), "[stage] timeout_s"),
    (STAGE.replace("timeout_s = 1.0", "speed = 3"), "[stage] speed"),
    (STAGE.replace("timeout_s = 1.0", "max_age_s = 3"), "[stage] max_age_s"),
    ("[stage]\nprofile = 3\n", "[stage] profile"),
    (THERMOMETER.replace("max_age_s = 12.5", "max_age_s = 0"), "[thermometer] max_age_s"),
    (THERMOMETER.replace("max_age_s = 12.5", "max_age_s = true"), "[thermometer] max_age_s"),
    (THERMOMETER.replace('address = "127.0.0.1:5030"', 'address = "localhost"'),
     "[thermometer] address"),
    (THERMOMETER.replace('address = "127.0.0.1:5030"', 'address = "h:70000"'),
     "[thermometer] address"),
    (THERMOMETER + "[thermometer.limits]\nx = [0.0, 1.0]\n", "[thermometer] limits"),
])
def test_bad_sections_name_file_and_key(tmp_path, text, names):
    path = bench(tmp_path, text)
    with pytest.raises(ConfigError) as info:
        load_bench(path)
    message = str(info.value)
    assert message.startswith(f"{path}: "), message
    assert names in message, message


def test_the_readme_example_parses(tmp_path):
    readme = (Path(__file__).resolve().parents[1] / "README.md").read_text(encoding="utf-8")
    block = readme.split("```toml\n[stage]", 1)[1].split("```", 1)[0]
    config = load_bench(bench(tmp_path, "[stage]" + block))
    assert config.stage is not None and config.stage.port == "/dev/ttyUSB0"
    assert config.stage.limits["z"] == (0.0, 80.0)
    assert config.thermometer is not None and config.thermometer.max_age_s == 30.0
