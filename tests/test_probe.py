"""``tankside probe`` against the simulated instruments: reports, restores, exit codes."""

import copy
import re

import pytest

from tankside.monitor.cli import main
from tankside.simulators.bench import SimulatedBench


@pytest.fixture
def bench():
    with SimulatedBench(seed=2, trigger_period_s=0.005) as b:
        yield b


def _rows(out: str) -> dict[str, str]:
    rows = {}
    for line in out.splitlines():
        parts = re.split(r"\s{2,}", line.strip())
        if len(parts) >= 3 and parts[2] in ("ok", "failed", "not tried"):
            rows[parts[0]] = parts[2]
    return rows


def test_digitiser_every_operation_ok_and_settings_kept(bench, capsys):
    before = copy.deepcopy(bench.digitiser.state)
    code = main(["probe", bench.digitiser_resource, "--profile",
                 str(bench.digitiser_profile_path), "--acquire", "--timeout", "1"])
    rows = _rows(capsys.readouterr().out)
    assert code == 0
    assert rows["set_range"] == rows["fetch_waveform"] == rows["identify"] == "ok"
    assert rows["reset"] == "not tried"
    after = bench.digitiser.state
    assert (after.points, after.channels[1].range_v, after.trigger_source, after.averages) == (
        before.points, before.channels[1].range_v, before.trigger_source, before.averages)


def test_generator_output_state_kept(bench, capsys):
    bench.scene.set_drive(output_on=False)
    code = main(["probe", bench.generator_resource, "--profile",
                      str(bench.generator_profile_path), "--timeout", "1"])
    rows = _rows(capsys.readouterr().out)
    assert code == 0 and rows["set_output"] == "ok" and rows["set_amplitude"] == "ok"
    assert not bench.scene.drive.output_on  # written back as it was: off


def test_setting_without_read_back_is_not_touched(bench, tmp_path, capsys):
    text = bench.digitiser_profile_path.read_text()
    lines = [ln for ln in text.splitlines() if not ln.startswith("query_range")]
    path = tmp_path / "no-readback.toml"
    path.write_text("\n".join(lines) + "\n")
    bench.digitiser.state.channels[1].range_v = 0.2
    code = main(["probe", bench.digitiser_resource, "--profile", str(path), "--timeout", "1"])
    out = capsys.readouterr().out
    assert code == 0
    assert _rows(out)["set_range"] == "not tried" and "no query_range" in out
    assert _rows(out)["arm_single"] == "not tried"  # no --acquire
    assert bench.digitiser.state.channels[1].range_v == 0.2


def test_failing_operation_exit_3(bench, tmp_path, capsys):
    text = bench.digitiser_profile_path.read_text().replace(
        'get_offset = "WAV:YOFF?"', 'get_offset = "WAV:NOSUCH?"')
    path = tmp_path / "bad.toml"
    path.write_text(text)
    code = main(["probe", bench.digitiser_resource, "--profile", str(path), "--timeout", "0.5"])
    out = capsys.readouterr().out
    rows = _rows(out)
    assert code == 3 and rows["get_offset"] == "failed"
    assert "queued -113" in out  # the instrument's error charged to the failed query
    assert rows["set_record_length"] == "ok"  # the session resynchronised after the failure


def test_unreachable_exit_2(capsys):
    with SimulatedBench() as b:
        resource = b.digitiser_resource
    assert main(["probe", resource, "--timeout", "0.5"]) == 2
    assert "instrument error" in capsys.readouterr().err


def test_setup_lines_sent_and_checked(bench, tmp_path, capsys):
    # The simulated digitiser powers on sending int16 LSB first; the setup line asks
    # for MSB first and the profile says so, so an acquisition decodes only if it was sent.
    text = bench.digitiser_profile_path.read_text().replace(
        "[commands]\n", '[commands]\nsetup = ["WAV:BORD MSBF"]\n', 1).replace(
        'byte_order = "little"', 'byte_order = "big"')
    path = tmp_path / "setup.toml"
    path.write_text(text)
    code = main(["probe", bench.digitiser_resource, "--profile", str(path), "--timeout", "1"])
    out = capsys.readouterr().out
    assert code == 0 and _rows(out)["setup line 1"] == "ok"
    assert bench.digitiser.state.byte_order == "big"
    bad = path.read_text().replace('"WAV:BORD MSBF"', '"WAV:NOSUCH 1"')
    path.write_text(bad)
    code = main(["probe", bench.digitiser_resource, "--profile", str(path), "--timeout", "1"])
    out = capsys.readouterr().out
    assert code == 3 and _rows(out)["setup line 1"] == "failed" and "-113" in out


def test_fixed_rate_reported(bench, tmp_path, capsys):
    text = "\n".join(ln for ln in bench.digitiser_profile_path.read_text().splitlines()
                     if not ln.startswith(("set_sample_rate", "query_sample_rate")))
    path = tmp_path / "fixed.toml"
    path.write_text(text + "\n")
    bench.digitiser.state.divider = 5        # the model's 1 GS/s clock / 5
    code = main(["probe", bench.digitiser_resource, "--profile", str(path), "--timeout", "1"])
    out = capsys.readouterr().out
    assert code == 0 and _rows(out)["sample rate"] == "ok"
    assert "fixed by the instrument: 2e+08 Hz (time step 5e-09 s)" in out
    assert "set_sample_rate" not in _rows(out)
