"""A scan of the simulated bench recovers the simulated beam's invented truth.

The scene's beam (simulators/focused_field.py, invented) has its own truth, computed by
the simulator from its beam function alone (``beam_truth``: the axial maximum and the
-6 dB widths, found with scipy's root finders). A raster across the beam at the focus and
a line along the axis, run as ``tankside scan`` runs them (real drivers, the stage on its
pty, the digitiser over TCP), must give the focus position and the -6 dB widths within
one scan step or 2 %, whichever is larger. The beam figures are the ones the scan
records in its ``scan-end`` event and exports, so the export is checked on the way.
"""

from __future__ import annotations

import csv
from pathlib import Path

import h5py
import numpy as np
import pytest

from tankside.monitor.cli import main
from tankside.monitor.live.benchfile import load_bench
from tankside.monitor.live.build import scan_parts
from tankside.monitor.live.scanplan import plan_from_table
from tankside.monitor.live.session import LiveSession
from tankside.monitor.outcome import ExitCode
from tankside.monitor.record.reader import SessionReader
from tankside.monitor.record.schema import EventKind
from tankside.simulators.bench import SimulatedBench
from tankside.simulators.scene import beam_truth

# a low drive keeps the invented scene's nonlinear steepening (Fubini) small, so p_r
# follows the linear beam factor whose truth the simulator computes
OVERRIDES = {"digitiser.record_length": 2000, "digitiser.trigger_timeout_s": 0.5,
             "digitiser.timeout_s": 1.0, "generator.amplitude_vpp": 1.0}


@pytest.fixture(scope="module")
def sim():
    with SimulatedBench(seed=41, trigger_period_s=0.004, stage=True) as bench:
        yield bench


@pytest.fixture(scope="module")
def truth(sim):
    return beam_truth(sim.scene.drive.frequency_hz, sim.scene.params)


def _scan(sim, tmp_path: Path, table: dict, name: str, record_length: int = 2000,
          delay_s: float | None = None) -> tuple[Path, dict]:
    overrides = {**OVERRIDES, "digitiser.record_length": record_length}
    if delay_s is not None:
        overrides["digitiser.trigger_delay_s"] = delay_s
    bench = load_bench(sim.write_bench_file(tmp_path / f"{name}.toml",
                                            session_folder=str(tmp_path)), overrides)
    plan = plan_from_table(table, source=name, base_dir=tmp_path,
                           limits=dict(bench.stage.limits))
    path = tmp_path / f"{name}.db"
    parts = scan_parts(bench, session_path=path, scan_plan=plan)
    session = LiveSession(**parts, drive_on_at_start="test operator", duration_s=240,
                          serial_poll_s={"stage": 0.05})
    session.start()
    assert session.wait(260)
    assert session.exit_status == "completed", session.stop_reason
    with SessionReader(path) as reader:
        assert len(reader.scan_points()) == len(plan.points)
        end = [e for e in reader.events() if e["kind"] == EventKind.SCAN_END]
    assert len(end) == 1
    return path, end[0]["detail"]["beam"]


def _width(beam: dict, axis: str, level_db: float) -> float:
    (w,) = [w for w in beam["widths"] if w["axis"] == axis and w["level_db"] == level_db]
    assert w["width_mm"] is not None, w["reason"]
    return w["width_mm"]


def _close(measured: float, true: float, step: float) -> bool:
    # the tolerance: one scan step or 2 %, whichever is larger
    return abs(measured - true) <= max(step, 0.02 * abs(true))


def test_a_raster_at_the_focus_gives_the_beam_maximum_and_its_widths(sim, truth, tmp_path):
    step = 0.375
    z_focus_mm = round(1e3 * truth.focus_z_m, 3)
    table = {"kind": "raster", "settle_s": 0.0, "traces": 2, "speed_mm_s": 20.0,
             "serpentine": True, "fixed": {"z": z_focus_mm},
             "axes": [{"name": "x", "start_mm": -1.5, "stop_mm": 1.5, "step_mm": step},
                      {"name": "y", "start_mm": -1.5, "stop_mm": 1.5, "step_mm": step}]}
    path, beam = _scan(sim, tmp_path, table, "raster")
    where = beam["maximum"]["position_mm"]
    assert _close(where["x"], 0.0, step) and _close(where["y"], 0.0, step), where
    for axis, true_m in (("x", truth.width_x_6db_m), ("y", truth.width_y_6db_m)):
        measured = _width(beam, axis, -6.0)
        assert _close(measured, 1e3 * true_m, step), (axis, measured, 1e3 * true_m)
        # tighter than the issue asks: interpolation between 0.375 mm points
        assert measured == pytest.approx(1e3 * true_m, rel=0.05), (axis, measured)
    # the export holds the same map: one row per point, and the grid with its axes in mm
    out_csv, out_h5 = tmp_path / "map.csv", tmp_path / "scan.h5"
    assert main(["export", str(path), "--map", str(out_csv), "--hdf5", str(out_h5)]) \
        == ExitCode.OK
    with open(out_csv, newline="") as fh:
        rows = list(csv.DictReader(fh))
    assert len(rows) == 9 * 9
    with h5py.File(out_h5, "r") as f:
        grid = f["scan/grid/mean_peak_rarefactional_pa"][:]
        np.testing.assert_allclose(f["scan/grid/x_mm"][:], np.linspace(-1.5, 1.5, 9))
        assert grid.shape == (9, 9)
        np.testing.assert_array_equal(f["scan/grid/done"][:], np.ones((9, 9)))
        # a cell without p_r is a point whose pulse was lost in the noise (the corners,
        # near the beam's first null), never one not measured
        assert np.isfinite(grid).sum() >= 9 * 9 - 8
        i, j = np.unravel_index(np.nanargmax(grid), grid.shape)
        assert (i, j) == (4, 4)         # the largest cell is the centre (x = y = 0)


def test_a_line_along_the_axis_gives_the_focus_depth_and_the_mi_there(sim, truth, tmp_path):
    step = 1.0
    table = {"kind": "line", "settle_s": 0.0, "traces": 2, "speed_mm_s": 20.0,
             "beam_axis": "z", "source_distance_mm": 50.0, "fixed": {"x": 0.0, "y": 0.0},
             "axes": [{"name": "z", "start_mm": -12.0, "stop_mm": 12.0, "step_mm": step}]}
    # the pulse arrives up to 8 us earlier or later along the line: a longer record that
    # starts earlier (the bench's trigger_delay_s); 8000 samples at 4 ns span -12 to
    # +20 us about the arrival from the focus
    delay = round(sim.scene.arrival_time_s() - 12e-6, 7)
    _, beam = _scan(sim, tmp_path, table, "axial", record_length=8000, delay_s=delay)
    assert sim.digitiser.state.trigger_delay_s == pytest.approx(delay)   # as the instrument has it
    z_max = beam["maximum"]["position_mm"]["z"]
    assert _close(z_max, 1e3 * truth.focus_z_m, step), (z_max, truth.focus_z_m)
    # the -6 dB focal zone along the axis (the simulator's truth: its two -6 dB points)
    zone = _width(beam, "z", -6.0)
    true_zone = 1e3 * truth.focal_zone_6db_m
    assert _close(zone, true_zone, step), (zone, true_zone)
    # derating (IEC 62359, 0.3 dB/cm/MHz) moves the depth of the largest PII towards the
    # source, and the MI is reported there
    axial = beam["axial"]
    assert axial is not None and axial["mechanical_index"] is not None, axial
    assert 50.0 - 12.0 <= axial["depth_of_max_mm"] <= 50.0 + z_max + 1e-9
    p_r = axial["p_r_derated_pa_at_max"]
    f = axial["f_awf_hz_at_max"]
    # MI = p_r,alpha [MPa] / sqrt(f_awf [MHz]) (IEC 62359, C_MI = 1 MPa MHz^-1/2)
    assert axial["mechanical_index"] == pytest.approx(p_r / 1e6 / np.sqrt(f / 1e6), rel=1e-6)
