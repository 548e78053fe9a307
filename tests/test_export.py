"""Export of a stored session: results CSV, trace CSV, calibration verbatim, HDF5."""

from __future__ import annotations

import csv
import hashlib
import json
import math

import h5py
import numpy as np
import pytest
from session_samples import CAL_TEXT, fake_result, make_raw, write_session

from tankside.monitor.cli import main
from tankside.monitor.outcome import ExitCode
from tankside.monitor.record.export import RESULTS_CSV_COLUMNS
from tankside.monitor.record.schema import RESULT_NAMES
from tankside.monitor.record.store import SessionReader, SessionStore, session_metadata
from tankside.monitor.record.tracefile import read_trace


@pytest.fixture
def session(tmp_path):
    path = tmp_path / "s.db"
    raws = write_session(path, n_traces=5)
    return path, raws


def _float(text: str) -> float:
    return float(text)  # float() reads repr() back exactly (Python language reference)


class TestResultsCsv:
    def test_rows_read_back(self, session, tmp_path):
        path, raws = session
        out = tmp_path / "r.csv"
        assert main(["export", str(path), "--results", str(out), "--no-progress"]) == ExitCode.OK
        with open(out, newline="") as fh:
            rows = list(csv.DictReader(fh))
        assert tuple(rows[0]) == RESULTS_CSV_COLUMNS
        assert [int(r["seq"]) for r in rows] == [0, 1, 2, 3, 4]
        for r in rows:
            seq = int(r["seq"])
            assert _float(r["time_s"]) == raws[seq].time_s
            if seq == 2:
                assert r["converted"] == "false" and r["error"] == "trace is all zero"
                assert all(r[name] == "" for name in RESULT_NAMES)
                continue
            want = fake_result(seq)
            for name in RESULT_NAMES:
                if isinstance(want[name], bool):
                    assert r[name] == ("true" if want[name] else "false")
                elif isinstance(want[name], float):
                    got = _float(r[name])
                    assert got == want[name] or (math.isnan(got) and math.isnan(want[name]))
                else:
                    assert r[name] == want[name]
            assert r["range_changed"] == ("true" if seq == 1 else "false")


class TestTraceCsv:
    def test_volts_read_back(self, session, tmp_path):
        path, raws = session
        out = tmp_path / "t.csv"
        assert main(["export", str(path), "--trace", "3", "--out", str(out)]) == ExitCode.OK
        lines = [ln for ln in out.read_text().splitlines() if not ln.startswith("#")]
        assert lines[0] == "time_s,voltage_v"
        data = np.array([[float(x) for x in ln.split(",")] for ln in lines[1:]])
        # printed to 12 and 9 significant digits, far finer than one ADC step
        np.testing.assert_allclose(data[:, 0], raws[3].times(), rtol=1e-11, atol=0)
        np.testing.assert_allclose(data[:, 1], raws[3].volts(), rtol=1e-8, atol=0)
        volts, dt_s, t0_s = read_trace(out)  # what `convert` reads
        assert volts.shape == (2000,)
        assert dt_s == pytest.approx(raws[3].dt_s, rel=1e-9)
        assert t0_s == pytest.approx(raws[3].t0_s, rel=1e-11)

    def test_unknown_seq_is_one_line_error(self, session, tmp_path, capsys):
        path, _ = session
        assert main(["export", str(path), "--trace", "42", "--out", str(tmp_path / "x.csv")]) \
            == ExitCode.USAGE
        err = capsys.readouterr().err.strip()
        assert "no trace with seq 42" in err and len(err.splitlines()) == 1
        assert not (tmp_path / "x.csv").exists()

    def test_trace_needs_out(self, session, capsys):
        path, _ = session
        assert main(["export", str(path), "--trace", "1"]) == ExitCode.USAGE
        assert "go together" in capsys.readouterr().err


class TestErrors:
    def test_missing_file(self, tmp_path, capsys):
        assert main(["export", str(tmp_path / "nope.db"), "--results", "x.csv"]) != ExitCode.OK
        err = capsys.readouterr().err.strip()
        assert err.startswith("tankside:") and "no such session file" in err
        assert len(err.splitlines()) == 1

    def test_not_a_session(self, tmp_path, capsys):
        bogus = tmp_path / "b.db"
        bogus.write_bytes(b"\x00" * 4096)
        assert main(["export", str(bogus), "--results", str(tmp_path / "x.csv")]) != ExitCode.OK
        assert "not a tankside session" in capsys.readouterr().err


class TestCalibration:
    def test_verbatim_with_sha(self, session, tmp_path):
        path, _ = session
        out = tmp_path / "cal.csv"
        assert main(["export", str(path), "--calibration-out", str(out)]) == ExitCode.OK
        assert out.read_bytes() == CAL_TEXT.encode()
        assert hashlib.sha256(out.read_bytes()).hexdigest() == SessionReader(path).metadata[
            "calibration_sha256"]

    def test_byte_order_mark_restored(self, tmp_path):
        original = b"\xef\xbb\xbf" + CAL_TEXT.encode()
        meta = session_metadata(configuration={}, instruments={}, calibration_text=CAL_TEXT)
        meta["calibration_sha256"] = hashlib.sha256(original).hexdigest()
        with SessionStore.create(tmp_path / "s.db", meta):
            pass
        out = tmp_path / "cal.csv"
        assert main(["export", str(tmp_path / "s.db"), "--calibration-out", str(out)]) == 0
        assert out.read_bytes() == original


class TestHdf5:
    def test_contents_and_units(self, session, tmp_path):
        path, raws = session
        out = tmp_path / "s.h5"
        assert main(["export", str(path), "--hdf5", str(out)]) == ExitCode.OK
        with h5py.File(out, "r") as f:
            assert f.attrs["format"] == "tankside-session-export"
            assert bool(f.attrs["stopped_cleanly"])
            codes = f["traces/codes"]
            assert codes.shape == (5, 2000) and codes.dtype == np.dtype("<i2")
            assert codes.attrs["units"] == "code"
            for i, raw in enumerate(raws):
                np.testing.assert_array_equal(codes[i], raw.codes)
            np.testing.assert_array_equal(f["traces/volts_per_code"][:],
                                          [r.volts_per_code for r in raws])
            assert f["traces/dt_s"].attrs["units"] == "s"
            assert f["traces/range_v"].attrs["units"] == "V"
            assert f["traces/volts_per_code"].attrs["units"] == "V/code"
            res = f["results"]
            assert res["peak_rarefactional_pa"].attrs["units"] == "Pa"
            assert res["acoustic_working_frequency_hz"].attrs["units"] == "Hz"
            assert res["pulse_intensity_integral_j_per_m2"].attrs["units"] == "J/m^2"
            assert res["mechanical_index"].attrs["units"] == ""
            assert res["peak_rarefactional_pa"][0] == fake_result(0)["peak_rarefactional_pa"]
            assert math.isnan(res["peak_rarefactional_pa"][2])
            assert list(res["narrowband_ok"][:]) == [0, 1, -1, 1, 0]
            assert res["error"][2].decode() == "trace is all zero"
            assert list(res["range_changed"][:]) == [False, True, False, False, False]
            assert res["method"][0].decode() == "deconvolve"
            assert f["alerts/rule"][0].decode() == "clipping"
            assert json.loads(f["alerts/actions_json"][0]) == ["record", "bell"]
            assert f["alerts/acknowledged_time_s"][0] == 1.8e9 + 3.0
            assert f["events/kind"][0].decode() == "range-change"
            assert f["events/seq"][0] == 1
            assert f["metadata/calibration_text"][()].decode() == CAL_TEXT
            assert json.loads(f["metadata"].attrs["temperature_c"]) == 21.5
            assert f["stop"].attrs["exit_status"] == "ok"

    def test_mixed_layouts_end_to_end(self, tmp_path):
        path = tmp_path / "m.db"
        raws = [make_raw(0, n=100, dtype="|i1"), make_raw(1, n=150, dtype=">i2")]
        store = SessionStore.create(path, session_metadata(configuration={}, instruments={}))
        for raw in raws:
            store.add_trace(raw, None, error="not converted")
        store.commit()  # not closed: the export reads a session still open for writing
        out = tmp_path / "m.h5"
        assert main(["export", str(path), "--hdf5", str(out)]) == ExitCode.OK
        with h5py.File(out, "r") as f:
            assert "stop" not in f and not bool(f.attrs["stopped_cleanly"])
            start, count = f["traces/code_start"][:], f["traces/code_count"][:]
            assert list(count) == [100, 150]
            for raw, s, c in zip(raws, start, count, strict=True):
                np.testing.assert_array_equal(f["traces/codes"][s:s + c], raw.codes)
            assert [d.decode() for d in f["traces/dtype"][:]] == ["|i1", ">i2"]
        store.close("ok", "test", {})


class TestProgress:
    def test_drawn_when_forced_and_erased(self):
        import io

        from tankside.monitor.progress import Progress

        now = [0.0]
        stream = io.StringIO()
        with Progress(4, "replay", stream=stream, enabled=True, clock=lambda: now[0]) as bar:
            for _ in range(4):
                now[0] += 1.0
                bar.update()
            assert bar.line() == "replay [" + "#" * 30 + "] 4/4 4 s"
        text = stream.getvalue()
        assert "\rreplay [" + "#" * 15 + "." * 15 + "] 2/4 2 s" in text
        assert text.endswith("\r")  # erased at the end

    def test_silent_off_a_terminal(self):
        import io

        from tankside.monitor.progress import Progress

        stream = io.StringIO()  # not a TTY
        with Progress(3, "export", stream=stream) as bar:
            bar.update(3)
        assert stream.getvalue() == ""
