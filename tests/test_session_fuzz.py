"""Crafted session files: whatever a cell holds, the reader, `export` and `replay` end in a
typed error (or succeed), never in a traceback, and leave no partial output.

Each example starts from a valid small session (converted with the real Converter) and
overwrites one to three cells with values chosen by kind: text (some of it near-JSON),
integers (negative, huge), floats (infinite; NaN is stored as NULL), BLOBs, text that is
not UTF-8, NULL, JSON of the wrong shape, or flipped bits in the codes. Cells the file's
constraints refuse (NOT NULL, the integer primary keys) are left as they were, and an
example where every change was refused is not counted. A second test flips bits anywhere
in the file's bytes, as a disk would. Both are bounded (max_examples, derandomized) to
run in a few seconds.
"""

from __future__ import annotations

import json
import shutil
import sqlite3
import tempfile
from pathlib import Path

import h5py
import pytest
from hypothesis import HealthCheck, assume, event, given, settings
from hypothesis import strategies as st
from session_samples import write_converted_session

from tankside.monitor.cli import main
from tankside.monitor.errors import SessionFileError, SessionValueError
from tankside.monitor.record.store import SessionReader

N_TRACES = 4


@pytest.fixture(scope="module")
def base(tmp_path_factory) -> Path:
    path = tmp_path_factory.mktemp("fuzz") / "base.db"
    write_converted_session(path, N_TRACES, n=1024)
    return path


def _columns(path: Path) -> dict[str, list[str]]:
    conn = sqlite3.connect(path)
    try:
        tables = [r[0] for r in conn.execute(
            "SELECT name FROM sqlite_master WHERE type = 'table' AND name NOT LIKE 'sqlite_%'")]
        return {t: [r[1] for r in conn.execute(f"PRAGMA table_info({t})")] for t in tables}
    finally:
        conn.close()


_NEAR_JSON = st.sampled_from([
    "", "{", "{bad", "[1]", "[]", "{}", '"x"', "null", "1", "-1", "1e999", "NaN",
    "Infinity", '{"a": NaN}', "[" * 200 + "]" * 200, '{"method": "bogus"}',
    '{"to": "bogus"}', '{"to": 7}', '{"clipped": "x"}', '"\\ud800"', '{"\\u0000": 1}',
    '{"peak_rarefactional_pa": "x"}', '{"method": 1}', "\x00", "int16", "<i2", "O",
    "i2,i2", "<f8", "|V4", "S3", "U2", "(2,)i2", "<i16"])
_JSON_SHAPES = st.recursive(
    st.none() | st.booleans() | st.integers(-10**20, 10**20) | st.floats(allow_nan=False,
                                                                        allow_infinity=False)
    | st.text(max_size=8),
    lambda inner: st.lists(inner, max_size=3) | st.dictionaries(st.text(max_size=6), inner,
                                                                max_size=3),
    max_leaves=6).map(json.dumps)

VALUES = st.one_of(
    st.text(max_size=12),
    _NEAR_JSON,
    _JSON_SHAPES,
    st.integers(min_value=-2**63, max_value=2**63 - 1),
    st.sampled_from([-1, 0, 1, 2, 2**31, 2**62, -2**63]),
    st.floats(allow_nan=True, allow_infinity=True),
    st.sampled_from([float("inf"), -float("inf"), 5e-324, 1e308, -0.0]),
    st.binary(max_size=48),
    st.binary(min_size=1, max_size=8).map(lambda b: ("not-utf8", b"\xff" + b)),
    st.none(),
    st.integers(min_value=0, max_value=8 * 1024 * 2 - 1).map(lambda bit: ("flip", bit)),
)


def _corrupt(path: Path, table: str, column: str, row_index: int, value) -> bool:
    """Overwrite one cell; False when the file's constraints refuse the value."""
    conn = sqlite3.connect(path, isolation_level=None)
    try:
        rowids = [r[0] for r in conn.execute(f"SELECT rowid FROM {table} ORDER BY rowid")]
        if not rowids:
            return False
        rowid = rowids[row_index % len(rowids)]
        if isinstance(value, tuple) and value[0] == "flip":
            old = conn.execute(f"SELECT {column} FROM {table} WHERE rowid = ?",
                               (rowid,)).fetchone()[0]
            if not isinstance(old, bytes) or not old:
                return False
            bit = value[1] % (8 * len(old))
            data = bytearray(old)
            data[bit // 8] ^= 1 << (bit % 8)
            sql, params = f"UPDATE {table} SET {column} = ? WHERE rowid = ?", (bytes(data), rowid)
        elif isinstance(value, tuple):   # bytes stored as TEXT: text that is not UTF-8
            sql = f"UPDATE {table} SET {column} = CAST(? AS TEXT) WHERE rowid = ?"
            params = (value[1], rowid)
        else:
            sql, params = f"UPDATE {table} SET {column} = ? WHERE rowid = ?", (value, rowid)
        conn.execute(sql, params)
        return True
    except (sqlite3.IntegrityError, sqlite3.OperationalError, OverflowError):
        return False
    finally:
        conn.close()


def _read_everything(path: Path) -> list:
    with SessionReader(path) as reader:
        return [reader.metadata, reader.descriptors, reader.stop, reader.alerts(),
                reader.events(), reader.trace_layouts(), reader.total_samples(),
                list(reader.iter_traces()), list(reader.iter_results())]


def _outputs(folder: Path) -> set[str]:
    return {p.name for p in folder.iterdir()}


def _one_line_if_failed(code: int, err: str) -> None:
    # numpy may warn on stderr about the numbers of a damaged trace; the error is one line
    assert "Traceback" not in err, err
    if code != 0:
        assert [line for line in err.splitlines() if line.startswith("tankside:")], err


CELLS = st.tuples(st.integers(0, 10**6), st.integers(0, 10**6), st.integers(0, 10**6), VALUES)


@settings(max_examples=60, deadline=None, derandomize=True,
          suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow])
@given(cells=st.lists(CELLS, min_size=1, max_size=3))
def test_crafted_files_give_only_typed_errors(base, cells, capsys):
    columns = _columns(base)
    tables = sorted(columns)
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        path = folder / "s.db"
        shutil.copy(base, path)
        applied = []
        for t_index, c_index, row_index, value in cells:
            table = tables[t_index % len(tables)]
            column = columns[table][c_index % len(columns[table])]
            applied.append(_corrupt(path, table, column, row_index, value))
        assume(any(applied))
        before = _outputs(folder)

        try:
            _read_everything(path)
            event("reader: read")
        except SessionFileError as err:
            event(f"reader: {type(err).__name__}")
            text = str(err)
            assert text.startswith(f"{path}:"), text
            if isinstance(err, SessionValueError):
                assert f"table {err.table}, " in text and f"column {err.column}:" in text

        out = folder / "out"
        out.mkdir()
        capsys.readouterr()
        code = main(["export", str(path), "--results", str(out / "r.csv"), "--hdf5",
                     str(out / "s.h5"), "--trace", "1", "--out", str(out / "t.csv"),
                     "--calibration-out", str(out / "cal.csv"), "--no-progress"])
        _one_line_if_failed(code, capsys.readouterr().err)
        event(f"export exit {code}")
        code = main(["replay", str(path), "--out", str(out / "new.db"), "--no-progress"])
        _one_line_if_failed(code, capsys.readouterr().err)
        event(f"replay exit {code}")
        if code != 0:
            assert not (out / "new.db").exists()
        # whatever failed, nothing is left half-written
        assert _outputs(folder) == before | {"out"}
        assert not [p for p in out.iterdir() if p.name.startswith(".")]
        if (out / "s.h5").exists():
            with h5py.File(out / "s.h5", "r") as f:
                assert f["traces/codes"].attrs["units"] == "code"


@settings(max_examples=40, deadline=None, derandomize=True,
          suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow])
@given(flips=st.lists(st.tuples(st.floats(0, 1, exclude_max=True), st.integers(0, 7)),
                      min_size=1, max_size=4))
def test_bytes_flipped_anywhere_in_the_file_give_only_typed_errors(base, flips, capsys):
    """The file as a disk would damage it: bits flipped at any offset (pages, headers,
    codes), seen by SQLite, the cell checks or the trace checksums."""
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        path = folder / "s.db"
        data = bytearray(base.read_bytes())
        for where, bit in flips:
            data[int(where * len(data))] ^= 1 << bit
        path.write_bytes(bytes(data))
        try:
            _read_everything(path)
        except SessionFileError as err:
            assert str(err).startswith(f"{path}:"), err
        out = folder / "out"
        out.mkdir()
        code = main(["export", str(path), "--hdf5", str(out / "s.h5"), "--results",
                     str(out / "r.csv"), "--no-progress"])
        _one_line_if_failed(code, capsys.readouterr().err)
        code = main(["replay", str(path), "--out", str(out / "new.db"), "--no-progress"])
        _one_line_if_failed(code, capsys.readouterr().err)
        assert not [p for p in out.iterdir() if p.name.startswith(".")]
