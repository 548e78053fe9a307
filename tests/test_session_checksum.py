"""Each trace's codes carry a CRC-32 in the session file, checked whenever the trace is read:
a bit flipped on the disk is reported by export and replay, naming the trace. Files of
layout 1 (no checksum) still open, export and replay."""

from __future__ import annotations

import csv
import math
import sqlite3
import zlib

import h5py
import numpy as np
import pytest
from layout1_session import write_layout1_session
from session_samples import calibration_text, make_raw, write_converted_session

from tankside.monitor.acoustics.calibration import parse_calibration
from tankside.monitor.acoustics.converter import Converter
from tankside.monitor.acoustics.loading import Loading
from tankside.monitor.acoustics.settings import ConversionSettings
from tankside.monitor.cli import main
from tankside.monitor.errors import TraceChecksumError
from tankside.monitor.outcome import ExitCode
from tankside.monitor.record.replay import replay_session, result_differences
from tankside.monitor.record.schema import LAYOUT_VERSION, RESULT_NAMES
from tankside.monitor.record.store import SessionReader, session_metadata


@pytest.fixture
def session(tmp_path):
    path = tmp_path / "s.db"
    raws = write_converted_session(path, 4, n=1024)
    return path, raws


def flip_a_bit_on_disk(path, raw, bit: int = 3) -> None:
    """Flip one bit of ``raw``'s codes where they lie in the file, as a disk would."""
    data = bytearray(path.read_bytes())
    needle = raw.codes.tobytes()[100:140]         # 40 bytes of this trace's codes
    at = data.find(needle)
    assert at > 0 and data.find(needle, at + 1) == -1
    data[at + 5] ^= 1 << bit
    path.write_bytes(bytes(data))


def test_the_stored_checksum_is_zlib_crc32_of_the_codes(session):
    path, raws = session
    with sqlite3.connect(path) as conn:
        rows = conn.execute("SELECT seq, codes, codes_crc32 FROM traces ORDER BY seq").fetchall()
        layout = conn.execute("SELECT layout_version FROM session_start").fetchone()[0]
    assert layout == LAYOUT_VERSION >= 2    # every layout from 2 on records the checksum
    for (_, codes, crc), raw in zip(rows, raws, strict=True):
        assert codes == raw.codes.tobytes()
        assert crc == zlib.crc32(raw.codes.tobytes())   # CRC-32 as zlib computes it
    with SessionReader(path) as reader:
        assert [s.codes_crc32 for s in reader.iter_traces()] == [r[2] for r in rows]


class TestFlippedBit:
    def test_sqlite_does_not_see_it_the_reader_does(self, session):
        path, raws = session
        flip_a_bit_on_disk(path, raws[2])
        with SessionReader(path) as reader:
            assert reader.integrity_check() == "ok"     # the pages are sound; the data not
            reader.trace(1)
            with pytest.raises(TraceChecksumError) as info:
                reader.trace(2)
        err = info.value
        assert (err.table, err.row, err.column) == ("traces", "seq 2", "codes")
        assert "do not match their checksum" in str(err) and str(path) in str(err)

    @pytest.mark.parametrize("args", [["--hdf5", "s.h5"], ["--trace", "2", "--out", "t.csv"]],
                             ids=["hdf5", "trace"])
    def test_export_reports_it(self, session, tmp_path, capsys, args):
        path, raws = session
        flip_a_bit_on_disk(path, raws[2])
        args = [str(tmp_path / a) if a.endswith((".h5", ".csv")) else a for a in args]
        assert main(["export", str(path), *args, "--no-progress"]) == ExitCode.USAGE
        err = capsys.readouterr().err
        assert err.count("\n") == 1
        assert "table traces, seq 2, column codes: the codes do not match their checksum" in err

    def test_replay_reports_it(self, session, tmp_path, capsys):
        path, raws = session
        flip_a_bit_on_disk(path, raws[3])
        code = main(["replay", str(path), "--out", str(tmp_path / "new.db"), "--no-progress"])
        assert code == ExitCode.USAGE
        assert "table traces, seq 3, column codes: the codes do not match" in \
            capsys.readouterr().err

    def test_a_changed_checksum_is_reported_too(self, session):
        path, _ = session
        with sqlite3.connect(path) as conn:
            conn.execute("UPDATE traces SET codes_crc32 = (codes_crc32 | 1) - (codes_crc32 & 1) "
                         "WHERE seq = 0")  # the lowest bit flipped
        with SessionReader(path) as reader, pytest.raises(TraceChecksumError, match="seq 0"):
            list(reader.iter_traces())


class TestLayout1:
    """A file written the old way: tables and rows made with sqlite3 directly, from the
    layout 1 DDL kept in tests/layout1_session.py."""

    @pytest.fixture
    def old(self, tmp_path):
        cal = parse_calibration(calibration_text(), source="cal.csv")
        settings = ConversionSettings(method="deconvolve")
        conv = Converter(cal, loading=Loading(), settings=settings, temperature_c=20.0)
        raws = [make_raw(seq, n=1024) for seq in range(3)]
        traces = [(raw, conv.process(raw.volts(), raw.dt_s).flat(), None) for raw in raws]
        meta = session_metadata(configuration={}, instruments={}, calibration=cal,
                                loading=Loading(), settings=settings, temperature_c=20.0)
        path = tmp_path / "old.db"
        write_layout1_session(path, meta, traces)
        return path, traces

    def test_opens_and_reads_back_exactly(self, old):
        path, traces = old
        with SessionReader(path) as reader:
            assert reader.start["layout_version"] == 1 and reader.stopped_cleanly
            stored = list(reader.iter_traces())
        assert [s.codes_crc32 for s in stored] == [None, None, None]
        for s, (raw, result, _) in zip(stored, traces, strict=True):
            assert s.raw.codes.tobytes() == raw.codes.tobytes()
            assert s.raw.codes.dtype == raw.codes.dtype and s.raw.dt_s == raw.dt_s
            for name in RESULT_NAMES:
                want, got = result[name], s.result[name]
                assert got == want or (math.isnan(got) and math.isnan(want)), name

    def test_exports(self, old, tmp_path):
        path, traces = old
        assert main(["export", str(path), "--results", str(tmp_path / "r.csv"), "--hdf5",
                     str(tmp_path / "s.h5"), "--trace", "1", "--out", str(tmp_path / "t.csv"),
                     "--no-progress"]) == ExitCode.OK
        with open(tmp_path / "r.csv", newline="") as fh:
            rows = list(csv.DictReader(fh))
        assert [float(r["peak_rarefactional_pa"]) for r in rows] == [
            t[1]["peak_rarefactional_pa"] for t in traces]
        with h5py.File(tmp_path / "s.h5", "r") as f:
            np.testing.assert_array_equal(f["traces/codes"][1], traces[1][0].codes)
            assert list(f["traces/codes_crc32"][:]) == [-1, -1, -1]

    def test_replays_exactly_into_the_current_layout(self, old, tmp_path):
        path, traces = old
        out = tmp_path / "new.db"
        summary = replay_session(path, out, check=True)
        assert (summary.traces, summary.converted, summary.differences) == (3, 3, 0)
        assert result_differences(path, out) == []
        with SessionReader(out) as reader:
            assert reader.start["layout_version"] == LAYOUT_VERSION
            assert [s.codes_crc32 for s in reader.iter_traces()] == [
                zlib.crc32(raw.codes.tobytes()) for raw, _, _ in traces]
