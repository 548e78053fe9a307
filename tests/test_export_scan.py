"""Export of a scan (layout 4): the map CSV, the per-trace point columns, and the HDF5
``/scan`` group with its points, its gridded parameters (dimension scales in mm) and the
beam figures; sessions without a scan, and layout 3 files, export as before.

The scans below are invented: a raster over an invented beam (a Gaussian spot, values
chosen for the test, not a model of any transducer) and a line along z. The expected
combined values are computed here with numpy (``numpy.mean``, ``numpy.std`` with
``ddof=1``) from the trace values written, and the expected grids by reshaping them with
numpy, independently of the export's own gridding.
"""

from __future__ import annotations

import csv
import json
import math
import shutil
import sqlite3
import subprocess

import h5py
import numpy as np
import pytest
from session_samples import make_raw

from tankside.monitor.cli import main
from tankside.monitor.outcome import ExitCode
from tankside.monitor.record.benchstate import TraceBench
from tankside.monitor.record.export import (
    MAP_COUNT_COLUMNS,
    MAP_RESULT_COLUMNS,
    POINT_CSV_COLUMNS,
    RESULTS_CSV_COLUMNS,
)
from tankside.monitor.record.scanpoints import COMBINED_RESULTS, PointRecord, combine_results
from tankside.monitor.record.schema import (
    META_SCAN_PLAN,
    RESULT_UNITS,
    SCAN_DDL,
    EventKind,
    PointStatus,
)
from tankside.monitor.record.store import SessionStore, session_metadata

# -- an invented raster: x fast (5 lines, 1 mm apart), y slow (3 lines, 0.5 mm), z fixed
XS_MM = np.arange(-2.0, 2.5, 1.0)
YS_MM = np.arange(10.0, 11.25, 0.5)
Z_MM = 40.0
NOT_DONE = 7          # a point of the plan never completed (a hole in the grid)
FAILED = 11           # a point recorded as failed (every trace clipped)
RESUMED_FROM = 9      # points from here on were completed after a resume
TRACES_PER_POINT = 3
BEAM = {"max_position_mm": {"x": 0.0, "y": 10.5}, "width_6db_mm": {"x": 2.35, "y": 1.18},
        "definition": "interpolated between points (invented figures)", "peak_pa": 1.0e6,
        "derated_mi": None, "levels_db": [-3, -6, -12, -20]}


def _spot_pa(x_mm: float, y_mm: float) -> float:
    """The invented beam: p_r of a Gaussian spot centred at (0, 10.5) mm."""
    return 1.0e6 * math.exp(-(x_mm ** 2 + (y_mm - 10.5) ** 2) / 2.0)


def _flat(p_r: float, k: int) -> dict:
    """A trace's results (only some fields: the rest read back as NaN / none)."""
    return {"method": "deconvolve", "peak_rarefactional_pa": p_r * (1.0 + 0.01 * (k - 1)),
            "peak_compressional_pa": 1.3 * p_r + 100.0 * k, "mechanical_index": p_r / 2e6,
            "acoustic_working_frequency_hz": 2.0e6 + 10.0 * k}


def _meta(plan: dict) -> dict:
    meta = session_metadata(configuration={}, instruments={})
    meta[META_SCAN_PLAN] = plan
    return meta


def _write_scan(path, targets: list[dict], plan: dict, *, skip=(), failed=(),
                resumed_from=None, beam=None):
    """Write a scan over ``targets`` (plan order); returns {index: (counted flats, seqs,
    positions)} of the points completed as done."""
    store = SessionStore.create(path, _meta(plan))
    seq = 0
    done = {}
    store.add_event(1.8e9, EventKind.SCAN_START, {"points": len(targets),
                                                  "kind": plan.get("kind"), "first_point": 0})
    for index, target in enumerate(targets):
        if resumed_from is not None and index == resumed_from:
            store.add_event(1.8e9 + seq, EventKind.SCAN_RESUMED,
                            {"first_point": index, "completed": index, "previous_stop": None,
                             "first_seq": seq})
        p_r = _spot_pa(target.get("x", 0.0), target.get("y", 10.5))
        # a trace while moving to the point: no point
        store.add_trace(make_raw(seq, n=256), _flat(p_r, 0), {}, None,
                        TraceBench({k: v - 0.3 for k, v in target.items()}))
        seq += 1
        if index in skip:
            continue
        flats, seqs, readings = [], [], []
        for k in range(TRACES_PER_POINT):
            reading = {a: v + 0.001 * (k + 1) for a, v in target.items()}
            counted = index not in failed
            flat = _flat(p_r, k)
            store.add_trace(make_raw(seq, n=256), flat, {"clipped": not counted}, None,
                            TraceBench(reading),
                            point=(index, counted, "" if counted else "clipped"))
            if counted:
                flats.append(flat)
                seqs.append(seq)
                readings.append(reading)
            seq += 1
        if index in failed:
            record = PointRecord(index, PointStatus.FAILED, 1.8e9 + seq, dict(target),
                                 dict(target), 0, TRACES_PER_POINT, None, None,
                                 resumed=resumed_from is not None and index >= resumed_from,
                                 note="every trace clipped")
        else:
            position = {a: float(np.mean([r[a] for r in readings])) for a in target}
            record = PointRecord(index, PointStatus.DONE, 1.8e9 + seq, dict(target), position,
                                 len(flats), 0, seqs[0], seqs[-1],
                                 resumed=resumed_from is not None and index >= resumed_from,
                                 results=combine_results(flats))
            done[index] = (flats, seqs, position)
        store.add_scan_point(record)
    end = {"completed": len(targets) - len(skip), "points": len(targets), "why": "complete"}
    if beam is not None:
        end["beam"] = beam
    store.add_event(1.8e9 + seq, EventKind.SCAN_END, end)
    store.close("completed", "scan complete", {"traces": seq})
    return done


def _plan(kind: str, targets: list[dict]) -> dict:
    """The parts of a recorded plan (``ScanPlan.as_dict()``) the export reads: the axes
    of the points and a row of mm per point, in visiting order."""
    axes = sorted(targets[0])
    return {"kind": kind, "point_axes": axes, "points": [[t[a] for a in axes] for t in targets]}


def _raster_targets() -> list[dict]:
    grid_x, grid_y = np.meshgrid(XS_MM, YS_MM)      # shape (ny, nx); C order: x fast
    return [{"x": float(x), "y": float(y), "z": Z_MM}
            for x, y in zip(grid_x.ravel(), grid_y.ravel(), strict=True)]


@pytest.fixture
def raster(tmp_path):
    targets = _raster_targets()
    plan = _plan("raster", targets)
    path = tmp_path / "raster.db"
    done = _write_scan(path, targets, plan, skip={NOT_DONE}, failed={FAILED},
                       resumed_from=RESUMED_FROM, beam=BEAM)
    return path, targets, done


def _expected_stat(done, n_points: int, name: str, stat: str) -> np.ndarray:
    """Per plan point, numpy's mean or sample standard deviation of the counted traces'
    values (NaN for a point not done)."""
    out = np.full(n_points, np.nan)
    for index, (flats, _, _) in done.items():
        values = np.array([f[name] for f in flats])
        out[index] = np.mean(values) if stat == "mean" else (
            np.std(values, ddof=1) if values.size > 1 else 0.0)
    return out


def _export(path, *args) -> int:
    return main(["export", str(path), *map(str, args), "--no-progress"])


class TestMapCsv:
    def test_header_names_units_and_axes(self, raster, tmp_path):
        path, _, _ = raster
        out = tmp_path / "map.csv"
        assert _export(path, "--map", out) == ExitCode.OK
        with open(out, newline="") as fh:
            header = next(csv.reader(fh))
        assert tuple(header) == (
            "point_index", "status", "time_s", "target_x_mm", "target_y_mm", "target_z_mm",
            "position_x_mm", "position_y_mm", "position_z_mm", *MAP_COUNT_COLUMNS,
            *MAP_RESULT_COLUMNS, "note")
        assert MAP_COUNT_COLUMNS == ("counted", "rejected", "first_seq", "last_seq", "resumed")
        # each combined result keeps its unit suffix, as the results CSV names them
        assert "mean_peak_rarefactional_pa" in header and "spread_peak_rarefactional_pa" in header
        assert len(MAP_RESULT_COLUMNS) == 2 * len(COMBINED_RESULTS)

    def test_rows_equal_the_stored_points(self, raster, tmp_path):
        path, targets, done = raster
        out = tmp_path / "map.csv"
        assert _export(path, "--map", out) == ExitCode.OK
        with open(out, newline="") as fh:
            rows = list(csv.DictReader(fh))
        completed = [i for i in range(len(targets)) if i != NOT_DONE]
        assert [int(r["point_index"]) for r in rows] == completed
        for r in rows:
            index = int(r["point_index"])
            for axis in "xyz":
                assert float(r[f"target_{axis}_mm"]) == targets[index][axis]
            assert r["resumed"] == ("true" if index >= RESUMED_FROM else "false")
            if index == FAILED:
                assert r["status"] == "failed" and r["note"] == "every trace clipped"
                assert (r["counted"], r["rejected"]) == ("0", str(TRACES_PER_POINT))
                assert r["first_seq"] == r["last_seq"] == ""
                assert all(r[c] == "" for c in MAP_RESULT_COLUMNS)
                continue
            flats, seqs, position = done[index]
            assert r["status"] == "done" and r["note"] == ""
            assert (int(r["counted"]), int(r["rejected"])) == (TRACES_PER_POINT, 0)
            assert (int(r["first_seq"]), int(r["last_seq"])) == (seqs[0], seqs[-1])
            for axis in "xyz":
                assert float(r[f"position_{axis}_mm"]) == position[axis]
            values = np.array([f["peak_rarefactional_pa"] for f in flats])
            # float() reads repr() back exactly (Python language reference)
            assert float(r["mean_peak_rarefactional_pa"]) == np.mean(values)
            assert float(r["spread_peak_rarefactional_pa"]) == np.std(values, ddof=1)
            # a parameter no trace has a value for is left empty
            assert r["mean_pulse_duration_s"] == r["spread_pulse_duration_s"] == ""

    def test_read_back_with_genfromtxt(self, raster, tmp_path):
        path, targets, done = raster
        out = tmp_path / "map.csv"
        assert _export(path, "--map", out) == ExitCode.OK
        table = np.genfromtxt(out, delimiter=",", names=True, dtype=None, encoding="utf-8")
        completed = np.array([i for i in range(len(targets)) if i != NOT_DONE])
        np.testing.assert_array_equal(table["point_index"], completed)
        for name in ("peak_rarefactional_pa", "mechanical_index"):
            for stat in ("mean", "spread"):
                want = _expected_stat(done, len(targets), name, stat)[completed]
                # (the failed point: empty cells, read as NaN by genfromtxt)
                np.testing.assert_array_equal(table[f"{stat}_{name}"], want)
        np.testing.assert_array_equal(table["target_x_mm"],
                                      [targets[i]["x"] for i in completed])

    def test_a_session_without_a_scan_is_refused(self, tmp_path, capsys):
        path = tmp_path / "plain.db"
        store = SessionStore.create(path, session_metadata(configuration={}, instruments={}))
        store.add_trace(make_raw(0, n=256), _flat(1e5, 0))
        store.close("completed", "done", {"traces": 1})
        out, results = tmp_path / "map.csv", tmp_path / "r.csv"
        assert _export(path, "--results", results, "--map", out) == ExitCode.USAGE
        err = capsys.readouterr().err.strip()
        assert len(err.splitlines()) == 1 and str(path) in err and "no scan" in err
        assert "--map" in err
        assert not out.exists() and not results.exists()   # checked before any output
        assert list(tmp_path.iterdir()) == [path]            # no temporary file left

    def test_help_mentions_map(self, capsys):
        with pytest.raises(SystemExit) as info:
            main(["export", "--help"])
        assert info.value.code == 0
        text = " ".join(capsys.readouterr().out.split())   # (argparse wraps to the terminal)
        assert "--map OUT.csv" in text and "one row per completed point" in text


class TestPerTraceColumns:
    def test_results_csv_point_index_and_counted(self, raster, tmp_path):
        path, _, done = raster
        out = tmp_path / "r.csv"
        assert _export(path, "--results", out) == ExitCode.OK
        with open(out, newline="") as fh:
            header = next(csv.reader(fh))
            fh.seek(0)
            rows = list(csv.DictReader(fh))
        assert tuple(header) == (*RESULTS_CSV_COLUMNS, "position_x_mm", "position_y_mm",
                                 "position_z_mm", *POINT_CSV_COLUMNS)
        by_seq = {int(r["seq"]): r for r in rows}
        for index, (_, seqs, _) in done.items():
            for s in seqs:
                assert by_seq[s]["point_index"] == str(index)
                assert by_seq[s]["counted"] == "true" and by_seq[s]["why_not"] == ""
        failed = [r for r in rows if r["point_index"] == str(FAILED)]
        assert len(failed) == TRACES_PER_POINT
        assert all(r["counted"] == "false" and r["why_not"] == "clipped" for r in failed)
        # the trace while moving to each point: empty point columns
        between = [r for r in rows if r["point_index"] == ""]
        assert len(between) == len(_raster_targets())
        assert all(r["counted"] == r["why_not"] == "" for r in between)

    def test_hdf5_results_point_index_and_counted(self, raster, tmp_path):
        path, _, done = raster
        out = tmp_path / "s.h5"
        assert _export(path, "--hdf5", out) == ExitCode.OK
        with h5py.File(out, "r") as f:
            seq = f["results/seq"][:]
            index = f["results/point_index"][:]
            counted = f["results/counted"][:]
            assert index.dtype == np.int64 and counted.dtype == np.int8
            where = {int(s): (int(i), int(c)) for s, i, c in zip(seq, index, counted,
                                                                   strict=True)}
            for point, (_, seqs, _) in done.items():
                assert all(where[s] == (point, 1) for s in seqs)
            assert sum(1 for i, c in where.values() if (i, c) == (FAILED, 0)) \
                == TRACES_PER_POINT
            between = [v for v in where.values() if v[0] == -1]
            assert len(between) == len(_raster_targets()) and all(c == -1 for _, c in between)
            assert {w.decode() for w in f["results/why_not"][:]} == {"", "clipped"}


class TestHdf5Scan:
    def test_points_table(self, raster, tmp_path):
        path, targets, done = raster
        out = tmp_path / "s.h5"
        assert _export(path, "--hdf5", out) == ExitCode.OK
        completed = [i for i in range(len(targets)) if i != NOT_DONE]
        with h5py.File(out, "r") as f:
            g = f["scan"]
            assert g.attrs["kind"] == "raster" and g.attrs["grid_from"] == "plan"
            assert g.attrs["points_planned"] == len(targets)
            assert g.attrs["points_completed"] == len(completed)
            assert [a.decode() if isinstance(a, bytes) else a for a in g.attrs["axes"]] \
                == ["x", "y", "z"]
            p = g["points"]
            np.testing.assert_array_equal(p["point_index"][:], completed)
            for axis in "xyz":
                np.testing.assert_array_equal(p[f"target_{axis}_mm"][:],
                                              [targets[i][axis] for i in completed])
                assert p[f"target_{axis}_mm"].attrs["units"] == "mm"
                assert p[f"position_{axis}_mm"].attrs["units"] == "mm"
            status = [s.decode() for s in p["status"][:]]
            assert status == ["failed" if i == FAILED else "done" for i in completed]
            np.testing.assert_array_equal(
                p["counted"][:], [0 if i == FAILED else TRACES_PER_POINT for i in completed])
            want = _expected_stat(done, len(targets), "peak_rarefactional_pa", "mean")
            np.testing.assert_array_equal(p["mean_peak_rarefactional_pa"][:], want[completed])
            assert p["mean_peak_rarefactional_pa"].attrs["units"] == "Pa"
            assert p["mean_peak_rarefactional_pa"].dtype == np.float64
            assert list(p["n_peak_rarefactional_pa"][:]) == [
                0 if i == FAILED else TRACES_PER_POINT for i in completed]
            np.testing.assert_array_equal(p["resumed"][:],
                                          [int(i >= RESUMED_FROM) for i in completed])

    def test_gridded_equals_numpy_reshape(self, raster, tmp_path):
        path, targets, done = raster
        out = tmp_path / "s.h5"
        assert _export(path, "--hdf5", out) == ExitCode.OK
        nx, ny = XS_MM.size, YS_MM.size
        with h5py.File(out, "r") as f:
            grid = f["scan/grid"]
            assert [a.decode() if isinstance(a, bytes) else a for a in grid.attrs["axes"]] \
                == ["x", "y"]                       # x changes fastest: first dimension
            assert grid.attrs["fixed_z_mm"] == Z_MM
            for name in ("peak_rarefactional_pa", "peak_compressional_pa",
                         "mechanical_index"):
                for stat in ("mean", "spread"):
                    ds = grid[f"{stat}_{name}"]
                    assert ds.shape == (nx, ny) and ds.dtype == np.float64
                    assert ds.attrs["units"] == RESULT_UNITS[name]
                    values = _expected_stat(done, len(targets), name, stat)
                    # plan order is C order of the (ny, nx) meshgrid: numpy's reshape,
                    # transposed to the export's (fast axis first) dimensions
                    np.testing.assert_array_equal(ds[:], values.reshape(ny, nx).T)
            mean = grid["mean_peak_rarefactional_pa"][:]
            for index, t in enumerate(targets):
                ix, iy = index % nx, index // nx
                assert (XS_MM[ix], YS_MM[iy]) == (t["x"], t["y"])
                if index in (NOT_DONE, FAILED):
                    assert math.isnan(mean[ix, iy])           # a hole; a failed point
                else:
                    flats = done[index][0]
                    assert mean[ix, iy] == np.mean([fl["peak_rarefactional_pa"]
                                                    for fl in flats])
            assert int(np.isnan(mean).sum()) == 2
            np.testing.assert_array_equal(grid["point_index"][:],
                                          np.arange(nx * ny).reshape(ny, nx).T)
            done_grid = np.ones(nx * ny, dtype=np.int8)
            done_grid[NOT_DONE], done_grid[FAILED] = -1, 0
            np.testing.assert_array_equal(grid["done"][:], done_grid.reshape(ny, nx).T)
            # a parameter no trace has a value for: NaN everywhere, still on the grid
            assert np.isnan(grid["mean_pulse_duration_s"][:]).all()

    def test_dimension_scales_in_mm(self, raster, tmp_path):
        path, _, _ = raster
        out = tmp_path / "s.h5"
        assert _export(path, "--hdf5", out) == ExitCode.OK
        with h5py.File(out, "r") as f:
            grid = f["scan/grid"]
            for axis, want in (("x", np.arange(-2.0, 2.5, 1.0)),
                               ("y", np.arange(10.0, 11.25, 0.5))):
                coord = grid[f"{axis}_mm"]
                assert coord.is_scale and coord.dtype == np.float64
                assert coord.attrs["units"] == "mm"
                np.testing.assert_array_equal(coord[:], want)
            for key in ("mean_peak_rarefactional_pa", "spread_mechanical_index",
                        "point_index", "done"):
                ds = grid[key]
                for k, axis in enumerate(("x", "y")):
                    assert ds.dims[k].label == axis
                    assert len(ds.dims[k]) == 1
                    scale = ds.dims[k][0]
                    assert scale.name == f"/scan/grid/{axis}_mm"
                    assert ds.shape[k] == scale.shape[0]
            # HDF5 dimension scales: the scale records who refers to it (h5py's h5ds)
            assert h5py.h5ds.is_attached(grid["mean_peak_rarefactional_pa"].id,
                                         grid["x_mm"].id, 0)

    def test_beam_figures(self, raster, tmp_path):
        path, _, _ = raster
        out = tmp_path / "s.h5"
        assert _export(path, "--hdf5", out) == ExitCode.OK
        with h5py.File(out, "r") as f:
            beam = f["scan/beam"]
            assert json.loads(beam.attrs["beam_json"]) == BEAM
            assert beam["max_position_mm"].attrs["y"] == 10.5
            assert beam["width_6db_mm"].attrs["x"] == 2.35
            assert beam.attrs["definition"] == BEAM["definition"]
            assert beam.attrs["peak_pa"] == 1.0e6
            assert math.isnan(beam.attrs["derated_mi"])
            np.testing.assert_array_equal(beam.attrs["levels_db"], [-3.0, -6.0, -12.0, -20.0])

    @pytest.mark.skipif(shutil.which("h5dump") is None, reason="h5dump (hdf5-tools) absent")
    def test_read_by_the_hdf5_command_line_tools(self, raster, tmp_path):
        # The HDF Group's h5dump, built on a separate copy of the C library from h5py's:
        # the grid, its dimension list and the coordinates in mm as any tool sees them.
        path, targets, done = raster
        out = tmp_path / "s.h5"
        assert _export(path, "--hdf5", out) == ExitCode.OK

        def dump(*args: str) -> str:
            return subprocess.run(["h5dump", *args, str(out)], capture_output=True, text=True,
                                  check=True, timeout=60).stdout

        text = dump("-d", "/scan/grid/mean_peak_rarefactional_pa", "-y", "-w", "0",
                    "-m", "%.17g")
        data = text.split("   DATA {", 1)[1].split("}", 1)[0]
        values = np.array([float(v) for v in data.replace(",", " ").split()])
        nx, ny = XS_MM.size, YS_MM.size
        want = _expected_stat(done, len(targets), "peak_rarefactional_pa", "mean")
        # h5dump prints in C (row-major) order of the (nx, ny) dataset; %.17g round-trips
        np.testing.assert_array_equal(values, want.reshape(ny, nx).T.ravel())
        assert '(DATASET' in text and '"/scan/grid/x_mm"' in text and '"/scan/grid/y_mm"' in text
        coords = dump("-d", "/scan/grid/y_mm", "-y", "-w", "0", "-m", "%.17g")
        data = coords.split("   DATA {", 1)[1].split("}", 1)[0]
        np.testing.assert_array_equal([float(v) for v in data.replace(",", " ").split()],
                                      YS_MM)
        assert '"DIMENSION_SCALE"' in coords

    def test_line_without_plan_points_grids_the_completed_points(self, tmp_path):
        zs = np.linspace(20.0, 45.0, 6)
        targets = [{"x": 0.0, "y": 10.5, "z": float(z)} for z in zs]
        path = tmp_path / "line.db"
        done = _write_scan(path, targets, {"kind": "line"}, skip={2})
        out, map_csv = tmp_path / "line.h5", tmp_path / "line.csv"
        assert _export(path, "--hdf5", out, "--map", map_csv) == ExitCode.OK
        completed = [0, 1, 3, 4, 5]
        with h5py.File(out, "r") as f:
            g = f["scan"]
            assert g.attrs["grid_from"] == "completed points"
            assert g.attrs["points_planned"] == -1
            assert "beam" not in g                     # the scan-end event has none
            grid = g["grid"]
            np.testing.assert_array_equal(grid["z_mm"][:], zs[completed])
            ds = grid["mean_peak_rarefactional_pa"]
            assert ds.shape == (5,) and ds.dims[0][0].name == "/scan/grid/z_mm"
            want = _expected_stat(done, len(targets), "peak_rarefactional_pa", "mean")
            np.testing.assert_array_equal(ds[:], want[completed])
            assert grid.attrs["fixed_x_mm"] == 0.0 and grid.attrs["fixed_y_mm"] == 10.5
        with open(map_csv, newline="") as fh:
            assert [int(r["point_index"]) for r in csv.DictReader(fh)] == completed


def _layout3_from(path) -> None:
    """Turn a file this tankside wrote into one as the layout 3 store wrote it: the same
    tables without the layout-4 block (schema.SCAN_DDL), and layout_version 3."""
    with sqlite3.connect(path) as conn:
        for ddl in SCAN_DDL:
            table = ddl.split("CREATE TABLE ", 1)[1].split(" ", 1)[0]
            conn.execute(f"DROP TABLE {table}")
            conn.execute("DELETE FROM descriptors WHERE tbl = ?", (table,))
        conn.execute("UPDATE session_start SET layout_version = 3")


class TestOlderAndPlainSessions:
    @pytest.fixture
    def layout3(self, tmp_path):
        path = tmp_path / "s3.db"
        store = SessionStore.create(path, session_metadata(configuration={}, instruments={}))
        for seq in range(3):
            store.add_trace(make_raw(seq, n=256), _flat(1e5 * (seq + 1), 1), {}, None,
                            TraceBench({"x": float(seq), "z": 40.0}))
        store.close("completed", "done", {"traces": 3})
        _layout3_from(path)
        return path

    def test_layout3_exports_as_before(self, layout3, tmp_path, capsys):
        out_csv, out_h5 = tmp_path / "r.csv", tmp_path / "s.h5"
        assert _export(layout3, "--results", out_csv, "--hdf5", out_h5) == ExitCode.OK
        with open(out_csv, newline="") as fh:
            header = next(csv.reader(fh))
            fh.seek(0)
            rows = list(csv.DictReader(fh))
        assert tuple(header) == (*RESULTS_CSV_COLUMNS, "position_x_mm", "position_z_mm")
        assert [float(r["position_x_mm"]) for r in rows] == [0.0, 1.0, 2.0]
        assert [float(r["peak_rarefactional_pa"]) for r in rows] == [
            _flat(1e5 * (s + 1), 1)["peak_rarefactional_pa"] for s in range(3)]
        with h5py.File(out_h5, "r") as f:
            assert "scan" not in f
            assert "point_index" not in f["results"] and "why_not" not in f["results"]
            np.testing.assert_array_equal(f["bench/position_mm"][:],
                                          [[0.0, 40.0], [1.0, 40.0], [2.0, 40.0]])
        capsys.readouterr()
        assert _export(layout3, "--map", tmp_path / "m.csv") == ExitCode.USAGE
        assert "no scan" in capsys.readouterr().err
        assert not (tmp_path / "m.csv").exists()

    def test_layout4_without_a_scan_has_no_scan_columns(self, tmp_path):
        path = tmp_path / "s4.db"
        store = SessionStore.create(path, session_metadata(configuration={}, instruments={}))
        store.add_trace(make_raw(0, n=256), _flat(1e5, 1))
        store.close("completed", "done", {"traces": 1})
        out_csv, out_h5 = tmp_path / "r.csv", tmp_path / "s.h5"
        assert _export(path, "--results", out_csv, "--hdf5", out_h5) == ExitCode.OK
        with open(out_csv, newline="") as fh:
            assert tuple(next(csv.reader(fh))) == RESULTS_CSV_COLUMNS
        with h5py.File(out_h5, "r") as f:
            assert "scan" not in f and "point_index" not in f["results"]

    def test_a_plan_with_no_point_done_yet(self, tmp_path):
        targets = _raster_targets()[:4]
        plan = _plan("raster", targets)
        path = tmp_path / "started.db"
        store = SessionStore.create(path, _meta(plan))
        store.add_trace(make_raw(0, n=256), _flat(1e5, 1), point=(0, True, ""))
        store.commit()            # still being recorded: no point completed yet
        out_csv, out_h5 = tmp_path / "m.csv", tmp_path / "s.h5"
        try:
            assert _export(path, "--map", out_csv, "--hdf5", out_h5) == ExitCode.OK
        finally:
            store.close("completed", "done", {"traces": 1})
        with open(out_csv, newline="") as fh:
            assert len(list(csv.reader(fh))) == 1          # the header alone
        with h5py.File(out_h5, "r") as f:
            assert f["scan"].attrs["points_completed"] == 0
            assert f["scan/points/point_index"].shape == (0,)
            mean = f["scan/grid/mean_peak_rarefactional_pa"][:]
            assert mean.shape == (4,) and np.isnan(mean).all()
            np.testing.assert_array_equal(f["scan/grid/done"][:], [-1, -1, -1, -1])
            np.testing.assert_array_equal(f["scan/grid/x_mm"][:], XS_MM[:4])


class TestDamagedOrOddScans:
    def test_a_damaged_point_cell_is_named_and_nothing_written(self, raster, tmp_path, capsys):
        path, _, _ = raster
        with sqlite3.connect(path) as conn:
            conn.execute("UPDATE scan_points SET target_json = '{\"x\": \"far\"}' "
                         "WHERE point_index = 3")
        out, h5 = tmp_path / "map.csv", tmp_path / "s.h5"
        assert _export(path, "--map", out) == ExitCode.USAGE
        err = capsys.readouterr().err.strip()
        assert len(err.splitlines()) == 1
        assert "scan_points" in err and "point_index 3" in err and "target_json" in err
        assert _export(path, "--hdf5", h5) == ExitCode.USAGE
        assert "target_json" in capsys.readouterr().err
        assert not out.exists() and not h5.exists()
        assert sorted(p.name for p in tmp_path.iterdir()) == ["raster.db"]

    def test_a_plan_whose_points_cannot_be_read_grids_the_completed_points(self, tmp_path):
        targets = _raster_targets()[:5]
        plan = {"kind": "line", "point_axes": ["x"],
                "points": [["somewhere"] for _ in range(len(targets))]}
        path = tmp_path / "odd.db"
        done = _write_scan(path, targets, plan, skip={1})
        out = tmp_path / "odd.h5"
        assert _export(path, "--hdf5", out) == ExitCode.OK
        with h5py.File(out, "r") as f:
            assert f["scan"].attrs["grid_from"] == "completed points"
            assert f["scan"].attrs["points_planned"] == -1
            np.testing.assert_array_equal(f["scan/grid/x_mm"][:], XS_MM[[0, 2, 3, 4]])
            want = _expected_stat(done, len(targets), "peak_rarefactional_pa", "mean")
            np.testing.assert_array_equal(f["scan/grid/mean_peak_rarefactional_pa"][:],
                                          want[[0, 2, 3, 4]])
