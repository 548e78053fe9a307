"""A malformed value in a session file is a typed error naming the file, table, row and
column, from the reader, `export` and `replay` alike; never a traceback."""

from __future__ import annotations

import shutil
import sqlite3
import subprocess
import sys
from pathlib import Path

import pytest
from session_samples import write_converted_session

from tankside.monitor.cli import main
from tankside.monitor.errors import SessionFileError, SessionValueError
from tankside.monitor.outcome import ExitCode
from tankside.monitor.record.replay import replay_session
from tankside.monitor.record.store import SessionReader


@pytest.fixture(scope="module")
def good(tmp_path_factory) -> Path:
    path = tmp_path_factory.mktemp("good") / "good.db"
    write_converted_session(path, 4, n=1024)
    return path


def crafted(good: Path, folder: Path, sql: str, params=()) -> Path:
    path = folder / "crafted.db"
    shutil.copy(good, path)
    conn = sqlite3.connect(path)
    conn.execute(sql, params)
    conn.commit()
    conn.close()
    return path


def read_all(path: Path) -> list:
    with SessionReader(path) as reader:
        return [reader.metadata, reader.stop, reader.alerts(), reader.events(),
                list(reader.iter_traces()), list(reader.iter_results())]


# (what, SQL, table, row, column, words in the problem)
CASES = [
    ("bad JSON in a trace's state", "UPDATE traces SET state_json = '{bad' WHERE seq = 1",
     "traces", "seq 1", "state_json", "not valid JSON"),
    ("a list where the flags object belongs",
     "UPDATE results SET flags_json = '[1]' WHERE seq = 2",
     "results", "seq 2", "flags_json", "expected a JSON object"),
    ("NaN in JSON", "UPDATE results SET extra_json = '{\"a\": NaN}' WHERE seq = 0",
     "results", "seq 0", "extra_json", "NaN is not strict JSON"),
    ("text in a result field's place in extra_json",
     "UPDATE results SET extra_json = '{\"peak_rarefactional_pa\": \"x\"}' WHERE seq = 0",
     "results", "seq 0", "extra_json", "peak_rarefactional_pa"),
    ("an object dtype", "UPDATE traces SET dtype = 'O' WHERE seq = 3",
     "traces", "seq 3", "dtype", "integer or float dtype"),
    ("a structured dtype", "UPDATE traces SET dtype = 'i2,i2' WHERE seq = 3",
     "traces", "seq 3", "dtype", "integer or float dtype"),
    ("a negative sample count", "UPDATE traces SET n = -1 WHERE seq = 1",
     "traces", "seq 1", "n", "expected an integer >= 0, found -1"),
    ("a huge sample count", "UPDATE traces SET n = 9000000000000 WHERE seq = 1",
     "traces", "seq 1", "n", "but the codes hold 2048"),
    ("codes that are text", "UPDATE traces SET codes = 'abc' WHERE seq = 2",
     "traces", "seq 2", "codes", "expected a BLOB, found text 'abc'"),
    ("text where the time step belongs", "UPDATE traces SET dt_s = 'abc' WHERE seq = 0",
     "traces", "seq 0", "dt_s", "expected a number, found text 'abc'"),
    ("a BLOB where a count belongs", "UPDATE traces SET clipped_low = x'00' WHERE seq = 0",
     "traces", "seq 0", "clipped_low", "expected an integer, found a BLOB of 1 bytes"),
    ("text that is not UTF-8", "UPDATE traces SET data_format = CAST(x'ff41' AS TEXT) "
     "WHERE seq = 1", "traces", "seq 1", "data_format", "not valid UTF-8"),
    ("a converted flag of 7", "UPDATE results SET converted = 7 WHERE seq = 1",
     "results", "seq 1", "converted", "expected 0 or 1"),
    ("bad JSON in the settings", "UPDATE metadata SET value_json = '{' WHERE key = 'settings'",
     "metadata", "key 'settings'", "value_json", "not valid JSON"),
    ("a number where the calibration text belongs",
     "UPDATE metadata SET value_json = '5' WHERE key = 'calibration_text'",
     "metadata", "key 'calibration_text'", "value_json", "expected text or null"),
    ("an event detail that is a list",
     "UPDATE events SET detail_json = '[]' WHERE kind = 'mark'",
     "events", "event_id 2", "detail_json", "expected a JSON object"),
    ("deeply nested JSON", "UPDATE alerts SET actions_json = ? WHERE alert_id = 1",
     "alerts", "alert_id 1", "actions_json", "nested deeper"),
    ("text in the stop time", "UPDATE session_stop SET stop_time_s = 'late'",
     "session_stop", "the row", "stop_time_s", "expected a number"),
]


def _params(sql: str):
    return ("[" * 300 + "]" * 300,) if "?" in sql else ()


@pytest.mark.parametrize("what, sql, table, row, column, problem", CASES,
                         ids=[c[0] for c in CASES])
class TestMalformedValues:
    def test_reader_names_the_cell(self, good, tmp_path, what, sql, table, row, column,
                                   problem):
        path = crafted(good, tmp_path, sql, _params(sql))
        with pytest.raises(SessionValueError) as info:
            read_all(path)
        err = info.value
        assert (err.path, err.table, err.row, err.column) == (str(path), table, row, column)
        assert str(err).startswith(f"{path}: table {table}, {row}, column {column}: ")
        assert problem in err.problem

    def test_export_is_one_line_exit_2(self, good, tmp_path, capsys, what,
                                                          sql, table, row, column, problem):
        path = crafted(good, tmp_path, sql, _params(sql))
        out = tmp_path / "out"
        out.mkdir()
        code = main(["export", str(path), "--results", str(out / "r.csv"), "--hdf5",
                     str(out / "s.h5"), "--no-progress"])
        err = capsys.readouterr().err
        assert code == ExitCode.USAGE
        assert err.count("\n") == 1 and f"table {table}, {row}, column {column}:" in err



# replay does not read the alerts: they were raised on the old results
REPLAY_CASES = [c for c in CASES if c[2] != "alerts"]


@pytest.mark.parametrize("what, sql, table, row, column, problem", REPLAY_CASES,
                         ids=[c[0] for c in REPLAY_CASES])
def test_replay_is_one_line_exit_2(good, tmp_path, capsys, what, sql, table, row, column,
                                   problem):
    path = crafted(good, tmp_path, sql, _params(sql))
    code = main(["replay", str(path), "--out", str(tmp_path / "new.db"), "--no-progress"])
    err = capsys.readouterr().err
    assert code == ExitCode.USAGE
    assert err.count("\n") == 1 and f"table {table}, {row}, column {column}:" in err


class TestUnknownMethod:
    def test_method_change_to_an_unknown_method_is_an_error(self, good, tmp_path):
        path = crafted(good, tmp_path, "UPDATE events SET detail_json = "
                       "'{\"from\": \"deconvolve\", \"to\": \"bogus\"}' "
                       "WHERE kind = 'method-change'")
        with pytest.raises(SessionValueError) as info:
            replay_session(path, tmp_path / "new.db")
        err = info.value
        assert (err.table, err.row, err.column) == ("events", "event_id 1", "detail_json")
        assert "'bogus': expected one of auto, deconvolve, narrowband" in err.problem

    def test_unknown_recorded_method_is_an_error_not_a_count(self, good, tmp_path, capsys):
        with sqlite3.connect(good) as conn:
            settings = conn.execute("SELECT value_json FROM metadata "
                                    "WHERE key = 'settings'").fetchone()[0]
        path = crafted(good, tmp_path, "UPDATE metadata SET value_json = ? WHERE key = "
                       "'settings'", (settings.replace('"deconvolve"', '"bogus"'),))
        code = main(["replay", str(path), "--out", str(tmp_path / "new.db"), "--no-progress"])
        captured = capsys.readouterr()
        assert code == ExitCode.USAGE and "converted" not in captured.out
        assert "table metadata, key 'settings', column value_json:" in captured.err
        assert "bogus" in captured.err

    def test_another_method_asked_for_replaces_the_recorded_ones(self, good, tmp_path):
        path = crafted(good, tmp_path, "UPDATE events SET detail_json = '{\"to\": \"bogus\"}' "
                       "WHERE kind = 'method-change'")
        summary = replay_session(path, tmp_path / "new.db", method="narrowband")
        assert summary.traces == 4 and summary.converted + summary.failed == 4


def test_seq_beyond_sqlite_integers_is_no_such_trace(good, capsys, tmp_path):
    # refused by the parser before the file is opened: no sequence number is that large
    with pytest.raises(SystemExit) as info:
        main(["export", str(good), "--trace", str(10**30), "--out", str(tmp_path / "t.csv")])
    assert info.value.code == ExitCode.USAGE
    assert "argument --trace" in capsys.readouterr().err
    code = main(["export", str(good), "--trace", str(2**62), "--out", str(tmp_path / "t.csv")])
    assert code == ExitCode.USAGE and "no trace with seq" in capsys.readouterr().err
    assert not (tmp_path / "t.csv").exists()


def test_a_damaged_database_is_a_session_file_error(good, tmp_path):
    path = tmp_path / "torn.db"
    data = good.read_bytes()
    path.write_bytes(data[:len(data) // 2])          # the second half of the pages lost
    with pytest.raises(SessionFileError) as info:
        read_all(path)
    assert str(info.value).startswith(f"{path}:")


def test_no_traceback_from_the_command(good, tmp_path):
    """The installed command in its own process: one line on stderr, exit 2."""
    path = crafted(good, tmp_path, "UPDATE traces SET n = -5 WHERE seq = 2")
    for args in (["export", str(path), "--hdf5", str(tmp_path / "s.h5")],
                 ["replay", str(path), "--out", str(tmp_path / "new.db")]):
        proc = subprocess.run([sys.executable, "-m", "tankside.monitor.cli", *args,
                               "--no-progress"], capture_output=True, text=True, timeout=60)
        assert proc.returncode == ExitCode.USAGE, proc.stderr
        assert proc.stderr.count("\n") == 1 and "Traceback" not in proc.stderr
        assert "table traces, seq 2, column n: expected an integer >= 0, found -5" in proc.stderr


def test_trace_file_of_an_infinite_time_step_is_refused(good, tmp_path, capsys):
    path = crafted(good, tmp_path, "UPDATE traces SET dt_s = 9e999 WHERE seq = 1")
    out = tmp_path / "t.csv"
    assert main(["export", str(path), "--trace", "1", "--out", str(out)]) == ExitCode.USAGE
    err = capsys.readouterr().err
    assert "table traces, seq 1, column dt_s: inf cannot be written as a trace file" in err
    assert not out.exists()
