"""Session store: exact round trips, batched commits, crash safety, live reading, full disk."""

from __future__ import annotations

import csv
import dataclasses
import hashlib
import json
import math
import os
import signal
import sqlite3
import struct
import subprocess
import sys
import textwrap
from pathlib import Path

import numpy as np
import pytest
from session_samples import CAL_TEXT, calibration_text, fake_result, make_raw, write_session

from tankside.monitor.acoustics.calibration import parse_calibration
from tankside.monitor.acoustics.converter import RESULT_FIELDS, Converter
from tankside.monitor.acoustics.loading import Loading
from tankside.monitor.errors import DiskFullError, SessionFileError, StoreError
from tankside.monitor.record.export import export_hdf5, export_results_csv
from tankside.monitor.record.schema import (
    META_CALIBRATION_SHA256,
    META_CALIBRATION_TEXT,
    RESULT_NAMES,
    units_of,
)
from tankside.monitor.record.store import SessionReader, SessionStore, session_metadata

TESTS = Path(__file__).parent


def _meta():
    return session_metadata(configuration={}, instruments={}, calibration_text=CAL_TEXT)


def _bits(x: float) -> bytes:
    return struct.pack("<d", x)


class TestRoundTrip:
    @pytest.mark.parametrize("dtype", ["|i1", "<i2", ">i2", "<f4", ">f4"])
    def test_codes_come_back_byte_for_byte(self, tmp_path, dtype):
        raw = make_raw(7, dtype=dtype, n=1001)
        with SessionStore.create(tmp_path / "s.db", _meta()) as store:
            store.add_trace(raw, None)
        with SessionReader(tmp_path / "s.db") as reader:
            back = reader.trace(7).raw
        assert back.codes.dtype == raw.codes.dtype
        assert back.codes.tobytes() == raw.codes.tobytes()
        assert back.data_format == raw.data_format
        np.testing.assert_array_equal(back.volts(), raw.volts())
        for name in ("volts_per_code", "offset_v", "dt_s", "t0_s", "time_s", "range_v"):
            assert _bits(getattr(back, name)) == _bits(getattr(raw, name)), name
        assert (back.clipped_low, back.clipped_high) == (raw.clipped_low, raw.clipped_high)
        assert back.state == raw.state

    def test_result_floats_round_trip_exactly(self, tmp_path):
        with SessionStore.create(tmp_path / "s.db", _meta()) as store:
            for seq in range(20):
                store.add_trace(make_raw(seq, n=64), fake_result(seq))
        with SessionReader(tmp_path / "s.db") as reader:
            stored = list(reader.iter_traces())
        assert [s.raw.seq for s in stored] == list(range(20))
        for s in stored:
            want = fake_result(s.raw.seq)
            assert list(s.result) == list(RESULT_NAMES)
            for name in RESULT_NAMES:
                a, b = want[name], s.result[name]
                if isinstance(a, float) and np.isnan(a):
                    assert np.isnan(b), name  # SQLite keeps NaN as NULL; read back as NaN
                elif isinstance(a, float):
                    assert _bits(a) == _bits(b), name
                else:
                    assert a == b and type(a) is type(b), name

    def test_run_record(self, tmp_path):
        write_session(tmp_path / "s.db")
        with SessionReader(tmp_path / "s.db") as reader:
            meta = reader.metadata
            assert meta[META_CALIBRATION_TEXT] == CAL_TEXT  # verbatim, CRLF kept
            assert meta[META_CALIBRATION_SHA256] == hashlib.sha256(CAL_TEXT.encode()).hexdigest()
            assert reader.stopped_cleanly
            assert reader.stop["exit_status"] == "ok"
            assert reader.stop["counts"] == {"traces": 5}
            failed = reader.trace(2)
            assert failed.result is None and failed.error == "trace is all zero"
            assert reader.trace(1).flags["range_changed"] is True
            assert reader.trace(0).flags == {"clipped": False, "range_changed": False}
            (alert,) = reader.alerts()
            assert alert["actions"] == ("record", "bell") and alert["seq"] == 1
            assert alert["acknowledged_time_s"] == 1.8e9 + 3.0
            (event,) = reader.events()
            assert event["kind"] == "range-change" and event["detail"]["to_v"] == 1.0
            desc = reader.descriptors
            assert desc["codes"] == {"table": "traces", "units": "code", "dtype": "<i2",
                                     "shape": [2000], "source": "digitiser INVENTED,DIG,0,1"}
            assert desc["peak_rarefactional_pa"]["units"] == "Pa"
            assert reader.integrity_check() == "ok"

    def test_closed_session_is_one_file(self, tmp_path):
        write_session(tmp_path / "s.db")
        assert sorted(p.name for p in tmp_path.iterdir()) == ["s.db"]
        with SessionReader(tmp_path / "s.db") as reader:
            assert reader.trace_count() == 5 and reader.stopped_cleanly

    def test_size_counts_the_file_and_its_wal(self, tmp_path):
        path = tmp_path / "s.db"
        store = SessionStore.create(path, _meta())
        store.add_trace(make_raw(0, n=4000), None)
        store.commit()
        reader = SessionReader(path)
        wal = Path(f"{path}-wal")
        assert wal.stat().st_size > 0  # committed but not yet checkpointed
        want = path.stat().st_size + wal.stat().st_size
        assert store.size_bytes() == want and reader.size_bytes() == want
        reader.close()
        store.close("ok", "test", {"traces": 1})
        assert not wal.exists()
        with SessionReader(path) as reader:
            assert reader.size_bytes() == path.stat().st_size

    def test_units_from_names(self):
        assert units_of("pulse_intensity_integral_j_per_m2") == "J/m^2"
        assert units_of("water_sound_speed_m_per_s") == "m/s"
        assert units_of("acoustic_working_frequency_hz") == "Hz"
        assert units_of("mechanical_index") == ""



class TestResultFields:
    """Every field declared in RESULT_FIELDS is stored, described and exported as declared."""

    @pytest.fixture
    def stored(self, tmp_path):
        raw = make_raw(0, amplitude=0.3)
        result = Converter(parse_calibration(calibration_text(), source="cal.csv"),
                           temperature_c=21.5).process(raw.volts(), raw.dt_s)
        path = tmp_path / "s.db"
        with SessionStore.create(path, _meta()) as store:
            store.add_trace(raw, result.flat())
        return path, result

    def test_a_converted_result_round_trips_every_field(self, stored):
        path, result = stored
        with SessionReader(path) as reader:
            back = reader.trace(0).result
            (row,) = list(reader.iter_results())
        assert list(back) == [f.name for f in RESULT_FIELDS]
        python_type = {"float64": float, "bool": bool, "str": str}
        for f in RESULT_FIELDS:
            want = f.value(result)
            for got in (back[f.name], row[f.name]):
                assert type(got) is python_type[f.dtype], f.name
                if f.dtype == "float64":
                    assert _bits(got) == _bits(float(want)), f.name
                else:
                    assert got == want, f.name

    def test_descriptors_give_each_field_its_unit_and_dtype(self, stored):
        path, _ = stored
        with SessionReader(path) as reader:
            desc = reader.descriptors
        for f in RESULT_FIELDS:
            assert desc[f.name] == {"table": "results", "units": f.unit, "dtype": f.dtype,
                                    "shape": [], "source": "conversion"}, f.name

    def test_exports_carry_every_field(self, stored, tmp_path):
        h5py = pytest.importorskip("h5py")
        path, result = stored
        with SessionReader(path) as reader:
            export_results_csv(reader, tmp_path / "r.csv")
            export_hdf5(reader, tmp_path / "r.h5")
        with open(tmp_path / "r.csv", newline="") as fh:
            (row,) = list(csv.DictReader(fh))
        with h5py.File(tmp_path / "r.h5", "r") as h5:
            for f in RESULT_FIELDS:
                want = f.value(result)
                ds = h5["results"][f.name]
                if f.dtype == "float64":
                    # NaN (e.g. not derated) is an empty cell and a NaN in HDF5
                    expect = pytest.approx(float(want), nan_ok=True)
                    assert float(row[f.name] or "nan") == expect, f.name
                    assert ds[0] == expect and ds.attrs["units"] == f.unit, f.name
                elif f.dtype == "bool":
                    assert row[f.name] == ("true" if want else "false"), f.name
                    assert ds[0] == int(want), f.name
                else:
                    assert row[f.name] == str(want), f.name
                    assert ds.asstr()[0] == str(want), f.name

    @pytest.mark.parametrize("field", RESULT_FIELDS, ids=lambda f: f.name)
    def test_a_field_is_named_for_its_unit(self, field):
        # house naming rule: the suffix says the unit
        assert units_of(field.name) == field.unit


_JSON_COLUMNS = (("metadata", "value_json"), ("descriptors", "shape_json"),
                 ("traces", "state_json"), ("results", "flags_json"), ("results", "extra_json"),
                 ("alerts", "actions_json"), ("events", "detail_json"),
                 ("session_stop", "counts_json"))


def _strict_loads(text: str):
    def refuse(token):
        raise ValueError(f"{token} is not JSON (RFC 8259, section 6)")
    return json.loads(text, parse_constant=refuse)


class TestStrictJson:
    def test_non_finite_numbers_are_recorded_as_null(self, tmp_path):
        path = tmp_path / "s.db"
        meta = session_metadata(
            configuration={"digitiser": {"range_v": math.inf}}, instruments={},
            calibration_text=CAL_TEXT, loading=Loading(),
            extra={"drift_pa": np.float64("nan"), "limits_v": (np.float32("-inf"), 1.5)})
        raw = dataclasses.replace(make_raw(0, n=64),
                                  state={"trigger_level_v": math.nan, "points": 64})
        with SessionStore.create(path, meta) as store:
            store.add_trace(raw, {**fake_result(0), "noise_v": math.nan}, {"ratio": -math.inf})
            store.add_event(1.8e9, "range-change", {"from_v": 0.5, "to_v": np.inf}, seq=0)
            store.add_alert(1.8e9, "drift", "warning", "p_r drifted", ["record"], seq=0)
        conn = sqlite3.connect(path)
        try:
            for table, column in _JSON_COLUMNS:
                texts = [r[0] for r in conn.execute(f"SELECT {column} FROM {table}")]
                assert texts, (table, column)
                for text in texts:
                    _strict_loads(text)  # raises on NaN / Infinity
        finally:
            conn.close()
        with SessionReader(path) as reader:
            m = reader.metadata
            assert m["configuration"] == {"digitiser": {"range_v": None}}
            assert m["drift_pa"] is None and m["limits_v"] == [None, 1.5]
            assert m["loading"]["input_resistance_ohm"] is None
            back = reader.trace(0)
            assert back.raw.state == {"trigger_level_v": None, "points": 64}
            assert back.result["noise_v"] is None and back.flags["ratio"] is None
            assert reader.events()[0]["detail"] == {"from_v": 0.5, "to_v": None}

    def test_finite_values_are_unchanged(self, tmp_path):
        value = {"x": 5e-324, "y": -0.0, "z": [1, True, None, "NaN", 1.7976931348623157e308]}
        meta = session_metadata(configuration=value, instruments={}, calibration_text=CAL_TEXT)
        with SessionStore.create(tmp_path / "s.db", meta):
            pass
        with SessionReader(tmp_path / "s.db") as reader:
            back = reader.metadata["configuration"]
        assert back == value and _bits(back["x"]) == _bits(5e-324)
        assert back["z"][1] is True and math.copysign(1.0, back["y"]) == -1.0


class TestBatchedCommits:
    def test_commit_waits_for_the_interval(self, tmp_path):
        now = [100.0]
        store = SessionStore.create(tmp_path / "s.db", _meta(), commit_interval_s=1.0,
                                    clock=lambda: now[0])
        reader = SessionReader(tmp_path / "s.db")
        store.add_trace(make_raw(0, n=16), None)
        now[0] = 100.6
        assert store.maybe_commit() is False
        assert reader.trace_count() == 0 and store.pending == 1
        store.add_trace(make_raw(1, n=16), None)
        now[0] = 101.0
        assert store.maybe_commit() is True
        assert reader.trace_count() == 2 and store.pending == 0
        now[0] = 101.5
        store.add_trace(make_raw(2, n=16), None)
        assert store.maybe_commit() is False
        assert reader.trace_count() == 2
        store.commit()  # forced
        assert reader.trace_count() == 3
        assert not reader.stopped_cleanly
        store.close("ok", "test", {"traces": 3})
        assert reader.stopped_cleanly
        reader.close()


class TestErrors:
    def test_missing_file(self, tmp_path):
        with pytest.raises(SessionFileError, match="no such session file"):
            SessionReader(tmp_path / "nope.db")

    def test_not_a_database(self, tmp_path):
        (tmp_path / "x.db").write_text("time_s,voltage_v\n0,1\n")
        with pytest.raises(SessionFileError, match="not a tankside session"):
            SessionReader(tmp_path / "x.db")

    def test_other_sqlite_file(self, tmp_path):
        sqlite3.connect(tmp_path / "o.db").execute("CREATE TABLE t(x)").connection.close()
        with pytest.raises(SessionFileError, match="not a tankside session"):
            SessionReader(tmp_path / "o.db")

    def test_unknown_seq(self, tmp_path):
        write_session(tmp_path / "s.db")
        with (SessionReader(tmp_path / "s.db") as reader,
              pytest.raises(SessionFileError, match="seq 99")):
            reader.trace(99)

    def test_repeated_seq_is_refused_alone(self, tmp_path):
        store = SessionStore.create(tmp_path / "s.db", _meta())
        store.add_trace(make_raw(0, n=16), None)
        with pytest.raises(StoreError, match="refused"):
            store.add_trace(make_raw(0, n=16), fake_result(0))
        store.add_trace(make_raw(1, n=16), None)  # the store goes on
        store.close("ok", "test", {"traces": 2})
        with SessionReader(tmp_path / "s.db") as reader:
            assert reader.seqs() == [0, 1]
            assert reader.trace(0).result is None  # the first row of seq 0 is kept

    def test_create_refuses_existing_file(self, tmp_path):
        write_session(tmp_path / "s.db")
        with pytest.raises(SessionFileError, match="already exists"):
            SessionStore.create(tmp_path / "s.db", _meta())

    def test_full_database_keeps_committed_data_and_refuses_more(self, tmp_path):
        store = SessionStore.create(tmp_path / "s.db", _meta())
        for seq in range(3):
            store.add_trace(make_raw(seq), None)
        store.commit()
        pages = store._conn.execute("PRAGMA page_count").fetchone()[0]
        store._conn.execute(f"PRAGMA max_page_count={pages + 5}")  # simulated full disk
        with pytest.raises(DiskFullError) as info:
            for seq in range(3, 50):
                store.add_trace(make_raw(seq), None)
                store.commit()
        assert isinstance(info.value.__cause__, sqlite3.Error)
        assert store.failed
        with pytest.raises(StoreError, match="no longer accepts data"):
            store.add_event(0.0, "mark", {"note": "after"})
        # the failed batch was rolled back, so the small stop record still fits
        store.close("store-error", "disk full", {"traces": 3})
        with SessionReader(tmp_path / "s.db") as reader:
            assert reader.integrity_check() == "ok"
            assert reader.trace_count() >= 3
            assert reader.trace(2).raw.codes.tobytes() == make_raw(2).codes.tobytes()
            assert reader.stop["exit_status"] == "store-error"


_WRITER = textwrap.dedent("""
    import json, resource, signal, sys
    sys.path.insert(0, {tests!r})
    from session_samples import make_raw, fake_result
    from tankside.monitor.errors import DiskFullError, SessionFileError, StoreError
    from tankside.monitor.record.store import SessionStore, session_metadata
    mode, path = sys.argv[1], sys.argv[2]
    store = SessionStore.create(path, session_metadata(configuration={{}}, instruments={{}}))
    if mode == "fsize":
        signal.signal(signal.SIGXFSZ, signal.SIG_IGN)
        limit = 600_000
        resource.setrlimit(resource.RLIMIT_FSIZE, (limit, limit))
    committed = 0
    try:
        for seq in range(100000):
            store.add_trace(make_raw(seq), fake_result(seq))
            if seq % 5 == 4:
                store.commit()
                committed = seq + 1
                print(committed, flush=True)
    except DiskFullError as err:
        print(json.dumps({{"committed": committed, "error": str(err)}}), flush=True)
        try:
            store.add_trace(make_raw(seq + 1), None)
        except StoreError as again:
            print(json.dumps({{"refusal": str(again)}}), flush=True)
""")


def _start_writer(mode: str, path: Path) -> subprocess.Popen:
    return subprocess.Popen([sys.executable, "-c", _WRITER.format(tests=str(TESTS)), mode,
                             str(path)], stdout=subprocess.PIPE, text=True)


class TestCrashAndLiveReading:
    def test_sigkill_mid_session_leaves_committed_traces_readable(self, tmp_path):
        path = tmp_path / "live.db"
        proc = _start_writer("run", path)
        try:
            seen = []
            committed = 0
            while committed < 60:
                committed = int(proc.stdout.readline())
                if committed % 20 == 0:
                    # another process reads the session while it is being written
                    with SessionReader(path) as reader:
                        n = reader.trace_count()
                        assert n >= committed
                        last = reader.trace(committed - 1)
                        assert last.raw.codes.tobytes() == make_raw(committed - 1).codes.tobytes()
                        assert last.result["peak_compressional_pa"] == fake_result(
                            committed - 1)["peak_compressional_pa"]
                        assert not reader.stopped_cleanly
                        seen.append(n)
            os.kill(proc.pid, signal.SIGKILL)
            proc.wait(timeout=10)
        finally:
            if proc.poll() is None:
                proc.kill()
            proc.stdout.close()
        assert proc.returncode == -signal.SIGKILL
        assert seen == sorted(seen) and len(seen) == 3
        with SessionReader(path) as reader:
            assert reader.integrity_check() == "ok"
            assert not reader.stopped_cleanly and reader.stop is None
            stored = list(reader.iter_traces())
        assert len(stored) >= committed
        assert [s.raw.seq for s in stored] == list(range(len(stored)))
        for s in stored:
            assert s.raw.codes.tobytes() == make_raw(s.raw.seq).codes.tobytes()
            assert s.result["peak_rarefactional_pa"] == fake_result(s.raw.seq)[
                "peak_rarefactional_pa"]
        conn = sqlite3.connect(path)  # a normal read-write open also finds it sound
        assert conn.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
        conn.close()

    def test_file_size_limit_gives_disk_full_and_keeps_committed_data(self, tmp_path):
        path = tmp_path / "full.db"
        proc = _start_writer("fsize", path)
        out, _ = proc.communicate(timeout=60)
        lines = [json.loads(line) for line in out.splitlines() if line.startswith("{")]
        assert proc.returncode == 0, out
        report, refusal = lines
        assert "disk full or write failed" in report["error"]
        assert "no longer accepts data" in refusal["refusal"]
        assert report["committed"] >= 5
        with SessionReader(path) as reader:
            assert reader.integrity_check() == "ok"
            assert reader.trace_count() >= report["committed"]
            for seq in range(report["committed"]):
                assert reader.trace(seq).raw.codes.tobytes() == make_raw(seq).codes.tobytes()
            assert not reader.stopped_cleanly


def test_reader_iterates_in_chunks_and_sees_later_commits(tmp_path):
    """iter_traces reads in chunks, so traces committed while it runs are included."""
    path = tmp_path / "s.db"
    store = SessionStore.create(path, _meta())
    for seq in range(100):
        store.add_trace(make_raw(seq, n=32), None)
    store.commit()
    with SessionReader(path) as reader:
        it = reader.iter_traces()
        assert next(it).raw.seq == 0
        for seq in range(100, 200):
            store.add_trace(make_raw(seq, n=32), None)
        store.commit()
        assert [s.raw.seq for s in it] == list(range(1, 200))
        assert [s.raw.seq for s in reader.iter_traces(50, 53)] == [50, 51, 52]
    store.close("ok", "test", {"traces": 200})
