"""``tankside demo``: the simulated bench watched headless, through the real CLI entry."""

from __future__ import annotations

import pytest

from tankside.monitor.cli import main
from tankside.monitor.live.scan import TOLERANCE_MM
from tankside.monitor.outcome import ExitCode
from tankside.monitor.record.store import SessionReader
from tankside.simulators.hydrophone import DEMO_CALIBRATION_PATH


def test_headless_demo_records_a_session_with_the_demo_calibration(tmp_path, capsys):
    folder = tmp_path / "sessions"
    args = ["demo", "--sessions", str(folder), "--headless", "--duration", "1.5", "--seed", "2"]
    assert main(args) == 0
    out = capsys.readouterr()
    assert "CAUTION" in out.err and "invented" in out.err
    assert "session stopped: completed" in out.out
    sessions = sorted(folder.glob("*.db"))
    assert len(sessions) == 1 and (folder / "demo-bench.toml").is_file()
    with SessionReader(sessions[0]) as reader:
        assert reader.stop["exit_status"] == "completed"
        assert reader.stop["counts"]["stored"] >= 5
        assert reader.trace_count() == reader.stop["counts"]["stored"]
        # the invented demo hydrophone's calibration, recorded verbatim
        assert reader.calibration_text == DEMO_CALIBRATION_PATH.read_text(encoding="utf-8")


@pytest.mark.parametrize("duration", ["0", "-2"])
def test_demo_refuses_a_duration_that_is_not_positive(tmp_path, capsys, duration):
    with pytest.raises(SystemExit) as info:     # refused by the parser, before anything
        main(["demo", "--sessions", str(tmp_path), "--headless", "--duration", duration])
    assert info.value.code == ExitCode.USAGE
    assert "argument --duration" in capsys.readouterr().err
    assert not list(tmp_path.iterdir())


def test_demo_help_names_every_option(capsys):
    with pytest.raises(SystemExit):
        main(["demo", "--help"])
    text = capsys.readouterr().out
    for option in ("--sessions", "--headless", "--duration", "--seed", "--scan"):
        assert option in text


def test_the_scan_demo_maps_the_simulated_beam_from_its_centre_outward(tmp_path, capsys):
    folder = tmp_path / "sessions"
    args = ["demo", "--scan", "--sessions", str(folder), "--headless", "--duration", "4"]
    assert main(args) == 0
    out = capsys.readouterr().out
    assert "pt " in out                       # the status line gives the point
    (session,) = sorted(folder.glob("*.db"))
    plan_text = (folder / "demo-scan-plan.toml").read_text(encoding="utf-8")
    assert 'kind = "raster"' in plan_text and "invented" in plan_text
    with SessionReader(session) as reader:
        plan = reader.scan_plan
        points = reader.scan_points()
    assert plan is not None and plan["kind"] == "raster" and len(plan["points"]) == 17 * 17
    # four seconds: the first rows of the raster, in plan order, each point once
    assert len(points) >= 10
    assert [p.index for p in points] == list(range(len(points)))
    # at the target within the scan's tolerance (a reading a few counts short counts)
    assert all(p.position_mm["x"] == pytest.approx(p.target_mm["x"], abs=TOLERANCE_MM)
               for p in points)
