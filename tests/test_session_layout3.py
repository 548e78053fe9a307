"""Layout 3: the stage position and the water reading are recorded with each trace, read
back, exported (CSV columns, HDF5 datasets) and copied by replay; files of layouts 1 and
2, which have neither, still open, replay and export (the migration test)."""

from __future__ import annotations

import csv
import math
import sqlite3

import h5py
import numpy as np
import pytest
from layout1_session import write_layout1_session
from session_samples import calibration_text, make_raw, write_converted_session

from tankside.monitor.acoustics.calibration import parse_calibration
from tankside.monitor.acoustics.converter import Converter
from tankside.monitor.acoustics.loading import Loading
from tankside.monitor.acoustics.settings import ConversionSettings
from tankside.monitor.acoustics.water import Water
from tankside.monitor.cli import main
from tankside.monitor.errors import SessionFileError, SessionValueError
from tankside.monitor.outcome import ExitCode
from tankside.monitor.record.benchstate import TraceBench
from tankside.monitor.record.export import RESULTS_CSV_COLUMNS
from tankside.monitor.record.replay import replay_session, result_differences
from tankside.monitor.record.schema import (
    BENCH_STATE_DDL,
    BENCH_STATE_LAYOUT,
    LAYOUT_VERSION,
    RESULT_NAMES,
    WaterSource,
)
from tankside.monitor.record.store import SessionReader, SessionStore, session_metadata

# Invented bench states for three traces: the stage at three points, a thermometer whose
# reading is fresh twice and then too old (the conversion fell back to the bench's 20 C).
BENCHES = [
    TraceBench({"x": -1.5, "y": 0.0, "z": 40.0}, 21.25, 0.4, WaterSource.THERMOMETER),
    TraceBench({"x": 0.0, "y": 0.0, "z": 40.0}, 21.5, 1.2, WaterSource.THERMOMETER),
    TraceBench({"x": 1.5, "y": 0.25, "z": 40.0}, 21.5, 42.0, WaterSource.BENCH),
]
TEMPERATURES_C = [21.25, 21.5, 20.0]      # what each trace's conversion used


def _converter():
    cal = parse_calibration(calibration_text(), source="cal.csv")
    settings = ConversionSettings(method="deconvolve")
    return cal, settings, Converter(cal, loading=Loading(), settings=settings,
                                    temperature_c=20.0)


@pytest.fixture
def layout3(tmp_path):
    cal, settings, conv = _converter()
    meta = session_metadata(configuration={}, instruments={}, calibration=cal,
                            loading=Loading(), settings=settings, temperature_c=20.0)
    path = tmp_path / "s3.db"
    store = SessionStore.create(path, meta)
    raws = [make_raw(seq, n=1024) for seq in range(3)]
    flats = []
    for raw, bench, temp in zip(raws, BENCHES, TEMPERATURES_C, strict=True):
        flat = conv.process(raw.volts(), raw.dt_s, water=Water.at(temp)).flat()
        flats.append(flat)
        store.add_trace(raw, flat, {}, None, bench)
    store.close("completed", "done", {"traces": 3})
    return path, raws, flats


def test_the_per_trace_water_is_the_one_used(layout3):
    # Water properties from the published fits (Marczak 1997, Tanaka et al. 2001), as
    # monitor/acoustics/water.py computes them; p_r does not depend on the water, the
    # pulse-intensity integral scales as 1/(rho c) (IEC 62127-1, PII = integral p^2/(rho c)).
    _, _, flats = layout3
    for flat, temp in zip(flats, TEMPERATURES_C, strict=True):
        water = Water.at(temp)
        assert flat["water_temperature_c"] == temp
        assert flat["water_density_kg_per_m3"] == water.density_kg_per_m3
        assert flat["water_sound_speed_m_per_s"] == water.sound_speed_m_per_s
    _, _, conv = _converter()
    raw = make_raw(0, n=1024)
    at_20 = conv.process(raw.volts(), raw.dt_s).flat()
    ratio = at_20["pulse_intensity_integral_j_per_m2"] / flats[0][
        "pulse_intensity_integral_j_per_m2"]
    z_20, z_used = Water.at(20.0).impedance_rayl, Water.at(21.25).impedance_rayl
    assert ratio == pytest.approx(z_used / z_20, rel=1e-12)
    assert at_20["peak_rarefactional_pa"] == flats[0]["peak_rarefactional_pa"]


def test_layout3_reads_back_every_axis_and_the_reading(layout3):
    path, raws, _ = layout3
    with SessionReader(path) as reader:
        assert reader.start["layout_version"] == LAYOUT_VERSION == 4
        assert BENCH_STATE_LAYOUT == 3
        assert reader.stage_axes() == ("x", "y", "z")
        assert reader.has_water_readings()
        assert [s.bench for s in reader.iter_traces()] == BENCHES
        assert reader.trace(2).bench == BENCHES[2]
        assert [r["bench"] for r in reader.iter_results()] == BENCHES
        units = {name: d["units"] for name, d in reader.descriptors.items()}
    assert units["position_mm"] == "mm" and units["water_reading_c"] == "degC"
    assert units["water_reading_age_s"] == "s"


def test_layout3_exports_csv_columns_and_hdf5_datasets(layout3, tmp_path):
    path, raws, flats = layout3
    assert main(["export", str(path), "--results", str(tmp_path / "r.csv"), "--hdf5",
                 str(tmp_path / "s.h5"), "--no-progress"]) == ExitCode.OK
    with open(tmp_path / "r.csv", newline="") as fh:
        header = next(csv.reader(fh))
        fh.seek(0)
        rows = list(csv.DictReader(fh))
    assert tuple(header) == (*RESULTS_CSV_COLUMNS, "position_x_mm", "position_y_mm",
                             "position_z_mm", "water_reading_c", "water_reading_age_s",
                             "water_source")
    for row, bench, flat in zip(rows, BENCHES, flats, strict=True):
        assert {a: float(row[f"position_{a}_mm"]) for a in "xyz"} == bench.positions_mm
        assert float(row["water_reading_c"]) == bench.water_reading_c
        assert float(row["water_reading_age_s"]) == bench.water_reading_age_s
        assert row["water_source"] == bench.water_source
        assert float(row["water_temperature_c"]) == flat["water_temperature_c"]
    with h5py.File(tmp_path / "s.h5", "r") as f:
        assert [a.decode() for a in f["bench/axes"][:]] == ["x", "y", "z"]
        np.testing.assert_array_equal(
            f["bench/position_mm"][:], [[b.positions_mm[a] for a in "xyz"] for b in BENCHES])
        assert f["bench/position_mm"].attrs["units"] == "mm"
        assert list(f["bench/water_reading_c"][:]) == [b.water_reading_c for b in BENCHES]
        assert f["bench/water_reading_age_s"].attrs["units"] == "s"
        assert [s.decode() for s in f["bench/water_source"][:]] == [
            "thermometer", "thermometer", "bench"]


def test_layout3_replay_copies_the_bench_and_follows_the_water(layout3, tmp_path):
    path, _, _ = layout3
    out = tmp_path / "again.db"
    summary = replay_session(path, out, check=True)
    assert (summary.traces, summary.converted, summary.differences) == (3, 3, 0)
    with SessionReader(out) as reader:
        assert [s.bench for s in reader.iter_traces()] == BENCHES
        assert [s.result["water_temperature_c"] for s in reader.iter_traces()] == TEMPERATURES_C


def test_a_session_without_stage_or_thermometer_exports_as_before(tmp_path):
    path = tmp_path / "plain.db"
    write_converted_session(path, 3, n=1024)
    assert main(["export", str(path), "--results", str(tmp_path / "r.csv"), "--hdf5",
                 str(tmp_path / "s.h5"), "--no-progress"]) == ExitCode.OK
    with open(tmp_path / "r.csv", newline="") as fh:
        assert tuple(next(csv.reader(fh))) == RESULTS_CSV_COLUMNS
    with h5py.File(tmp_path / "s.h5", "r") as f:
        assert f["bench/position_mm"].shape == (3, 0)
        assert np.isnan(f["bench/water_reading_c"][:]).all()


def test_a_damaged_bench_cell_is_named(layout3):
    path, _, _ = layout3
    with sqlite3.connect(path) as conn:
        conn.execute("UPDATE trace_water SET water_source = 'guess' WHERE seq = 1")
        conn.execute("UPDATE trace_positions SET position_mm = 'far' WHERE seq = 2 "
                     "AND axis = 'y'")
    with SessionReader(path) as reader:
        with pytest.raises(SessionValueError) as info:
            reader.trace(1)
        assert "trace_water" in str(info.value) and "water_source" in str(info.value)
        with pytest.raises(SessionValueError) as info:
            reader.trace(2)
        assert "trace_positions" in str(info.value) and "position_mm" in str(info.value)


# -- migration: files of layouts 1 and 2 -----------------------------------------------

def _layout2_from(path) -> None:
    """Turn a file this tankside wrote into one as the layout 2 store wrote it: the same
    tables without the layout-3 block (schema.BENCH_STATE_DDL), and layout_version 2."""
    with sqlite3.connect(path) as conn:
        for ddl in BENCH_STATE_DDL:
            table = ddl.split("CREATE TABLE ", 1)[1].split(" ", 1)[0]
            conn.execute(f"DROP TABLE {table}")
            conn.execute("DELETE FROM descriptors WHERE tbl = ?", (table,))
        conn.execute("UPDATE session_start SET layout_version = 2")


@pytest.fixture(params=[1, 2])
def old(request, tmp_path):
    cal, settings, conv = _converter()
    raws = [make_raw(seq, n=1024) for seq in range(3)]
    traces = [(raw, conv.process(raw.volts(), raw.dt_s).flat(), None) for raw in raws]
    meta = session_metadata(configuration={}, instruments={}, calibration=cal,
                            loading=Loading(), settings=settings, temperature_c=20.0)
    path = tmp_path / f"layout{request.param}.db"
    if request.param == 1:
        write_layout1_session(path, meta, traces)
    else:
        store = SessionStore.create(path, meta)
        for raw, flat, error in traces:
            store.add_trace(raw, flat, {}, error)
        store.close("completed", "done", {"traces": 3})
        _layout2_from(path)
    return request.param, path, traces


def test_old_layouts_open_without_bench_state(old):
    layout, path, traces = old
    with SessionReader(path) as reader:
        assert reader.start["layout_version"] == layout
        assert reader.stage_axes() == () and not reader.has_water_readings()
        stored = list(reader.iter_traces())
        assert [r["bench"] for r in reader.iter_results()] == [None] * 3
    assert [s.bench for s in stored] == [None] * 3
    for s, (raw, result, _) in zip(stored, traces, strict=True):
        assert s.raw.codes.tobytes() == raw.codes.tobytes()
        for name in RESULT_NAMES:
            want, got = result[name], s.result[name]
            assert got == want or (math.isnan(got) and math.isnan(want)), name


def test_old_layouts_export(old, tmp_path):
    _, path, traces = old
    assert main(["export", str(path), "--results", str(tmp_path / "r.csv"), "--hdf5",
                 str(tmp_path / "s.h5"), "--no-progress"]) == ExitCode.OK
    with open(tmp_path / "r.csv", newline="") as fh:
        rows = list(csv.DictReader(fh))
    assert tuple(rows[0]) == RESULTS_CSV_COLUMNS
    assert [float(r["peak_rarefactional_pa"]) for r in rows] == [
        t[1]["peak_rarefactional_pa"] for t in traces]
    with h5py.File(tmp_path / "s.h5", "r") as f:
        assert f["bench/position_mm"].shape == (3, 0)
        assert [s.decode() for s in f["bench/water_source"][:]] == ["", "", ""]


def test_old_layouts_replay_into_layout_3(old, tmp_path):
    _, path, _ = old
    out = tmp_path / "new.db"
    summary = replay_session(path, out, check=True)
    assert (summary.traces, summary.converted, summary.differences) == (3, 3, 0)
    assert result_differences(path, out) == []
    with SessionReader(out) as reader:
        assert reader.start["layout_version"] == LAYOUT_VERSION
        assert [s.bench for s in reader.iter_traces()] == [None] * 3


def test_a_layout3_file_without_its_tables_is_refused(layout3):
    path, _, _ = layout3
    with sqlite3.connect(path) as conn:
        conn.execute("DROP TABLE trace_water")
    with pytest.raises(SessionFileError) as info:
        SessionReader(path)
    assert "trace_water" in str(info.value)
