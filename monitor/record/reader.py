"""Reading a session file back: :class:`SessionReader` (also importable from
:mod:`tankside.monitor.record.store`).

The file is opened read-only (``mode=ro``), so a session can be read while another
process is still writing it; traces are read lazily in small chunks. Every cell is
checked as it is read (:mod:`tankside.monitor.record.cells`): a malformed value is a
:class:`~tankside.monitor.errors.SessionValueError` naming the file, table, row and
column, and any other failure to read is a :class:`~tankside.monitor.errors.SessionFileError`.
"""

from __future__ import annotations

import math
import os
import sqlite3
import zlib
from collections.abc import Iterator
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from ...drivers.trace import ChannelTrace, RawTrace
from ..errors import SessionFileError, TraceChecksumError
from .benchstate import TraceBench
from .cells import Row, codes_dtype, kind_of
from .opening import OpenedSession, open_read_only, wal_mode
from .scanpoints import Combined, PointRecord
from .schema import (
    BENCH_STATE_LAYOUT,
    BOOL_RESULTS,
    CHANNEL_COLUMNS,
    CHANNEL_LAYOUT,
    CHECKSUM_LAYOUT,
    FORMAT_TAG,
    LAYOUT_VERSION,
    META_CALIBRATION_TEXT,
    META_SCAN_PLAN,
    METADATA_KINDS,
    REAL_RESULTS,
    RESULT_COLUMNS,
    RESULT_NAMES,
    SCAN_LAYOUT,
    TRACE_COLUMNS,
    PointStatus,
    WaterSource,
)

# (derived from the result columns as schema.py derives BOOL_RESULTS and REAL_RESULTS)
_TEXT_RESULTS = frozenset(name for name, kind in RESULT_COLUMNS if kind == "TEXT")
_SQLITE_INT_MIN, _SQLITE_INT_MAX = -(2 ** 63), 2 ** 63 - 1

__all__ = ["SessionReader", "StoredTrace"]


@dataclass
class StoredTrace:
    """One trace read back: the raw trace as sent, its result (None if conversion
    failed), its flags, the conversion error text, and the CRC-32 of its codes as
    recorded and checked (None in a layout 1 file, which has none), and the bench state
    at the trace (stage position, water reading; None when the file records none)."""

    raw: RawTrace
    result: dict | None
    flags: dict = field(default_factory=dict)
    error: str | None = None
    codes_crc32: int | None = None
    bench: TraceBench | None = None


def session_size_bytes(path) -> int:
    """Bytes on disk of a session file and its WAL (0 for either that does not exist)."""
    total = 0
    for suffix in ("", "-wal"):
        try:
            total += os.path.getsize(f"{path}{suffix}")
        except FileNotFoundError:
            pass
    return total


def _meta_row(key: str) -> str:
    return f"key {key!r}"


class SessionReader:
    """Reads a session file, read-only; safe while another process writes it.

    Parameters
    ----------
    path : str or Path
        A session file written by :class:`SessionStore`.

    Raises
    ------
    SessionFileError
        Missing file, not an SQLite file, not a tankside session, a layout newer than
        this tankside, or a failure to read; from :meth:`trace`, an unknown seq.
    SessionValueError
        (a SessionFileError) A cell that is not what its column holds, named by table,
        row and column; raised where the cell is read.
    """

    _CHUNK = 64

    def __init__(self, path):
        self.path = Path(path)
        self._conn: sqlite3.Connection | None = None
        self._opened: OpenedSession | None = None
        if not self.path.is_file():
            raise SessionFileError(f"{self.path}: no such session file")
        self._opened = open_read_only(self.path)
        self._conn = self._opened.conn
        try:
            rows = self._conn.execute(
                "SELECT format, layout_version, session_uid, start_time_s, tool_version "
                "FROM session_start").fetchall()
        except (sqlite3.Error, UnicodeError) as err:
            message = self._why_not_a_session(err)
            self.close()
            raise SessionFileError(message) from err
        if len(rows) != 1 or rows[0][0] != FORMAT_TAG:
            self.close()
            raise SessionFileError(f"{self.path}: not a tankside session file")
        try:
            row = Row(str(self.path), "session_start", "the row", dict(zip(
                ("format", "layout_version", "session_uid", "start_time_s", "tool_version"),
                rows[0], strict=True)))
            layout = row.integer("layout_version", minimum=1)
            self.layout = layout
            if layout > LAYOUT_VERSION:
                raise SessionFileError(f"{self.path}: session layout {layout} is newer than "
                                       f"this tankside reads ({LAYOUT_VERSION})")
            self.start = {"format": FORMAT_TAG, "layout_version": layout,
                          "session_uid": row.text("session_uid"),
                          "start_time_s": row.real("start_time_s"),
                          "tool_version": row.text("tool_version")}
            self._result_cols = self._columns("results")
            # Layout 1 files have no checksum; they are read as they are.
            self._checksums = layout >= CHECKSUM_LAYOUT
            self._trace_cols = tuple(c for c in TRACE_COLUMNS
                                     if self._checksums or c != "codes_crc32")
            present = set(self._columns("traces"))
            missing = [c for c in self._trace_cols if c not in present]
            if missing:
                raise SessionFileError(f"{self.path}: table traces of a layout {layout} "
                                       f"session lacks the column(s) {', '.join(missing)}")
            # Layouts 1 and 2 record no bench state; their traces read back without one.
            self._bench_state = layout >= BENCH_STATE_LAYOUT
            if self._bench_state:
                tables = {r[0] for r in self._query(
                    "SELECT name FROM sqlite_master WHERE type = 'table'")}
                lacking = [t for t in ("trace_positions", "trace_water") if t not in tables]
                if lacking:
                    raise SessionFileError(f"{self.path}: a layout {layout} session lacks "
                                           f"the table(s) {', '.join(lacking)}")
            # A layout 4 file written before the monitor channel has no trace_channels.
            self._monitor_channels = (layout >= CHANNEL_LAYOUT
                                      and self._has_table("trace_channels"))
        except SessionFileError:
            self.close()
            raise

    def _why_not_a_session(self, err: Exception) -> str:
        try:
            tables = self._query("SELECT COUNT(*) FROM sqlite_master")[0][0]
        except SessionFileError:
            tables = None
        wal = Path(f"{self.path}-wal")
        # (opening a WAL-mode file creates an empty -wal beside it where it can)
        if tables == 0 and wal_mode(self.path) and (not wal.exists() or
                                                    wal.stat().st_size == 0):
            return (f"{self.path}: holds no tables yet; a session's first data are in "
                    f"{wal.name} until its first checkpoint, and no {wal.name} is beside it "
                    "(copy the two files together)")
        return f"{self.path}: not a tankside session file ({err})"

    def _columns(self, table: str) -> list[str]:
        """The column names of ``table``, which the reader puts into its queries."""
        names = [r[1] for r in self._query(f"PRAGMA table_info({table})")]
        for name in names:
            if not (isinstance(name, str) and name.isidentifier() and name.isascii()):
                raise SessionFileError(f"{self.path}: table {table} has a column named "
                                       f"{name!r}, which no session file has (damaged)")
        return names

    @property
    def note(self) -> str | None:
        """A line for the user when the file is not read in place (a working copy of a
        session on a read-only medium), else None."""
        return None if self._opened is None else self._opened.note

    def _query(self, sql: str, params=()) -> list[tuple[Any, ...]]:
        if self._conn is None:
            raise SessionFileError(f"{self.path}: the session reader is closed")
        try:
            return self._conn.execute(sql, params).fetchall()
        except (sqlite3.Error, UnicodeError) as err:
            # (a damaged page can hold text that is not UTF-8 where SQLite keeps names)
            raise SessionFileError(f"{self.path}: reading the session failed ({err})") from err

    def _row(self, table: str, row: str, columns, values) -> Row:
        return Row(str(self.path), table, row, dict(zip(columns, values, strict=True)))

    def close(self) -> None:
        if self._opened is not None:
            self._opened.close()
            self._opened = None
        self._conn = None

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()

    # -- run record ---------------------------------------------------------------------
    @property
    def metadata(self) -> dict:
        """The metadata dict as recorded (``META_*`` keys); the values of the standard
        keys are checked to be of their kind (:data:`~.schema.METADATA_KINDS`)."""
        out = {}
        for key, value_json in self._query("SELECT key, value_json FROM metadata"):
            key_row = self._row("metadata", "a row", ("key",), (key,))
            key = key_row.text("key")
            if not key:
                key_row.fail("key", "an empty key")
            row = self._row("metadata", _meta_row(key), ("value_json",), (value_json,))
            value = row.json("value_json")
            kinds = METADATA_KINDS.get(key)
            if kinds is not None and value is not None and not (
                    isinstance(value, kinds) and not isinstance(value, bool)):
                names = " or ".join(_KIND_NAMES[k] for k in kinds)
                row.fail("value_json", f"expected {names} or null, found "
                                       f"{type(value).__name__}")
            out[key] = value
        return out

    @property
    def descriptors(self) -> dict:
        cols = ("name", "tbl", "units", "dtype", "shape_json", "source")
        out = {}
        for values in self._query(f"SELECT {', '.join(cols)} FROM descriptors"):
            r = self._row("descriptors", f"name {values[0]!r}", cols, values)
            out[r.text("name")] = {"table": r.text("tbl"), "units": r.text("units"),
                                   "dtype": r.text("dtype"),
                                   "shape": r.json("shape_json", list),
                                   "source": r.text("source")}
        return out

    @property
    def stop(self) -> dict | None:
        """The stop record, or None when the session was not stopped cleanly."""
        cols = ("stop_time_s", "exit_status", "reason", "counts_json")
        rows = self._query(f"SELECT {', '.join(cols)} FROM session_stop")
        if not rows:
            return None
        r = self._row("session_stop", "the row", cols, rows[0])
        return {"stop_time_s": r.real("stop_time_s"), "exit_status": r.text("exit_status"),
                "reason": r.text("reason"), "counts": r.json("counts_json", dict)}

    @property
    def stopped_cleanly(self) -> bool:
        return self.stop is not None

    @property
    def calibration_text(self) -> str:
        text = self.metadata.get(META_CALIBRATION_TEXT)
        if text is None:
            raise SessionFileError(f"{self.path}: the session holds no calibration file")
        return text

    # -- traces -------------------------------------------------------------------------
    def trace_count(self) -> int:
        return int(self._query("SELECT COUNT(*) FROM traces")[0][0])

    def __len__(self) -> int:
        return self.trace_count()

    def last_seq(self) -> int | None:
        """The highest seq stored so far, or None when there is no trace."""
        value = self._query("SELECT MAX(seq) FROM traces")[0][0]
        return None if value is None else int(value)

    def trace_layouts(self, stop_seq: int | None = None) -> set[tuple[str, int]]:
        """The distinct (numpy dtype string, sample count) of the stored traces (those
        before ``stop_seq`` when given); each is checked as :meth:`trace` checks it."""
        return {(dtype, n) for _, dtype, n in self._layouts(stop_seq)}

    def total_samples(self, stop_seq: int | None = None) -> int:
        """Samples in all stored traces (those before ``stop_seq`` when given)."""
        return sum(n for _, _, n in self._layouts(stop_seq))

    def _layouts(self, stop_seq: int | None) -> Iterator[tuple[int, str, int]]:
        """(seq, dtype string, n) of each trace, checked against its codes' length
        (which SQLite knows without reading the codes)."""
        where, params = ("", ()) if stop_seq is None else ("WHERE seq < ?", (int(stop_seq),))
        cols = ("seq", "dtype", "n", "codes")
        for seq, dtype, n, size in self._query(
                "SELECT seq, dtype, n, CASE WHEN typeof(codes) = 'blob' THEN length(codes) "
                f"ELSE codes END FROM traces {where} ORDER BY seq", params):
            r = self._row("traces", f"seq {seq}", cols, (seq, dtype, n, size))
            dt, n = self._layout(r, size)
            yield seq, dt.str, n

    def _layout(self, r: Row, size: Any) -> tuple[np.dtype, int]:
        dt = self._codes_dtype(r)
        n = r.integer("n", minimum=0)
        if not isinstance(size, int):
            r.fail("codes", f"expected a BLOB, found {kind_of(size)}")
        if n * dt.itemsize != size:
            r.fail("n", f"{n} samples of {dt.str} are {n * dt.itemsize} bytes, but the codes "
                        f"hold {size}")
        return dt, n

    def seqs(self, stop_seq: int | None = None) -> list[int]:
        """The stored seqs in order (those before ``stop_seq`` when given)."""
        where, params = ("", ()) if stop_seq is None else ("WHERE seq < ?", (int(stop_seq),))
        return [r[0] for r in self._query(f"SELECT seq FROM traces {where} ORDER BY seq",
                                          params)]

    @staticmethod
    def _codes_dtype(r: Row) -> np.dtype:
        dt = codes_dtype(r.text("dtype"))
        if dt is None:
            r.fail("dtype", f"expected a numpy integer or float dtype such as '<i2', found "
                            f"{r.values['dtype']!r}")
        return dt

    def stage_axes(self) -> tuple[str, ...]:
        """The stage axes any trace records a position of, sorted (``()`` without)."""
        if not self._bench_state:
            return ()
        axes = []
        for (axis,) in self._query("SELECT DISTINCT axis FROM trace_positions ORDER BY axis"):
            r = self._row("trace_positions", f"axis {axis!r}", ("axis",), (axis,))
            text = r.text("axis")
            if not text:
                r.fail("axis", "an empty axis name")
            axes.append(text)
        return tuple(axes)

    def has_water_readings(self) -> bool:
        """Whether any trace records a thermometer's reading (``trace_water`` rows)."""
        return self._bench_state and bool(self._query("SELECT 1 FROM trace_water LIMIT 1"))

    def bench_states(self, first_seq: int, last_seq: int) -> dict[int, TraceBench]:
        """The bench state of each trace with ``first_seq <= seq <= last_seq`` that has one
        (none in a file of layout 1 or 2); every cell checked."""
        if not self._bench_state:
            return {}
        positions: dict[int, dict[str, float]] = {}
        cols: tuple[str, ...] = ("seq", "axis", "position_mm")
        for values in self._query(f"SELECT {', '.join(cols)} FROM trace_positions "
                                  "WHERE seq BETWEEN ? AND ? ORDER BY seq, axis",
                                  (int(first_seq), int(last_seq))):
            r = self._row("trace_positions", f"seq {values[0]} axis {values[1]!r}", cols,
                          values)
            seq = r.integer("seq")
            axis = r.text("axis")
            if not axis:
                r.fail("axis", "an empty axis name")
            mm = r.real("position_mm")
            if not math.isfinite(mm):
                r.fail("position_mm", f"expected a finite position in mm, found {mm!r}")
            positions.setdefault(seq, {})[axis] = mm
        water: dict[int, tuple[float | None, float | None, WaterSource]] = {}
        cols = ("seq", "water_reading_c", "water_reading_age_s", "water_source")
        for values in self._query(f"SELECT {', '.join(cols)} FROM trace_water "
                                  "WHERE seq BETWEEN ? AND ?", (int(first_seq), int(last_seq))):
            r = self._row("trace_water", f"seq {values[0]}", cols, values)
            source_text = r.text("water_source")
            if source_text not in list(WaterSource):
                r.fail("water_source", f"expected one of {', '.join(WaterSource)}, found "
                                       f"{source_text!r}")
            water[r.integer("seq")] = (r.optional_real("water_reading_c"),
                                       r.optional_real("water_reading_age_s"),
                                       WaterSource(source_text))
        out = {}
        for seq in positions.keys() | water.keys():
            reading, age, source = water[seq] if seq in water else (None, None, None)
            out[seq] = TraceBench(positions_mm=positions.get(seq, {}), water_reading_c=reading,
                                  water_reading_age_s=age, water_source=source)
        return out

    def has_monitor_channel(self) -> bool:
        """Whether any trace records a monitor channel (``trace_channels`` rows)."""
        return self._monitor_channels and bool(
            self._query("SELECT 1 FROM trace_channels LIMIT 1"))

    def monitor_channels(self, first_seq: int, last_seq: int) -> dict[int, ChannelTrace]:
        """The monitor channel of each trace with ``first_seq <= seq <= last_seq`` that has
        one (none in a file without ``trace_channels``); every cell checked, and the
        codes against their CRC-32 (:class:`TraceChecksumError`)."""
        if not self._monitor_channels:
            return {}
        out = {}
        for values in self._query(f"SELECT {', '.join(CHANNEL_COLUMNS)} FROM trace_channels "
                                  "WHERE seq BETWEEN ? AND ? ORDER BY seq, channel",
                                  (int(first_seq), int(last_seq))):
            r = self._row("trace_channels", f"seq {values[0]} channel {values[1]!r}",
                          CHANNEL_COLUMNS, values)
            data = r.blob("codes")
            dt, n = self._layout(r, len(data))
            self._check_crc(data, r.integer("codes_crc32", minimum=0), "trace_channels",
                            f"seq {values[0]}")
            scaling = {name: r.real(name) for name in ("volts_per_code", "offset_v", "dt_s",
                                                        "t0_s")}
            for name, value in scaling.items():
                if not math.isfinite(value):
                    r.fail(name, f"expected a finite number, found {value!r}")
            if not scaling["dt_s"] > 0:
                r.fail("dt_s", f"expected a time step above 0 s, found {scaling['dt_s']!r}")
            range_v = r.optional_real("range_v")
            if range_v is not None and not (math.isfinite(range_v) and range_v > 0):
                r.fail("range_v", f"expected a span above 0 V or null, found {range_v!r}")
            seq = r.integer("seq")
            if seq in out:          # one monitor channel per trace is all tankside writes
                r.fail("channel", f"a second channel for trace {seq}")
            out[seq] = ChannelTrace(
                channel=r.integer("channel", minimum=1),
                codes=np.frombuffer(data, dtype=dt, count=n), range_v=range_v,
                clipped_low=r.integer("clipped_low", minimum=0),
                clipped_high=r.integer("clipped_high", minimum=0), **scaling)
        return out

    def _check_crc(self, data: bytes, recorded: int, table: str, row: str) -> None:
        """Raise :class:`TraceChecksumError` when ``data`` is not what its CRC-32 says."""
        computed = zlib.crc32(data)
        if computed != recorded:
            raise TraceChecksumError(
                str(self.path), table, row, "codes",
                f"the codes do not match their checksum (CRC-32 recorded {recorded:#010x}, "
                f"computed {computed:#010x}): the file was damaged after it was written")

    def _stored(self, trow, rrow, bench: TraceBench | None = None,
                monitor: ChannelTrace | None = None) -> StoredTrace:
        t = self._row("traces", f"seq {trow[0]}", self._trace_cols, trow)
        data = t.blob("codes")
        dt, n = self._layout(t, len(data))
        recorded = None
        if self._checksums:
            recorded = t.integer("codes_crc32", minimum=0)
            self._check_crc(data, recorded, "traces", f"seq {trow[0]}")
        codes = np.frombuffer(data, dtype=dt, count=n)
        raw = RawTrace(codes=codes, volts_per_code=t.real("volts_per_code"),
                       offset_v=t.real("offset_v"), dt_s=t.real("dt_s"), t0_s=t.real("t0_s"),
                       seq=t.integer("seq"), time_s=t.real("time_s"),
                       range_v=t.real("range_v"), code_min=t.real("code_min"),
                       code_max=t.real("code_max"),
                       clipped_low=t.integer("clipped_low", minimum=0),
                       clipped_high=t.integer("clipped_high", minimum=0),
                       data_format=t.text("data_format"), state=t.json("state_json", dict),
                       monitor=monitor)
        if rrow is None:  # trace written without a results row (older layouts)
            return StoredTrace(raw, None, {}, None, recorded, bench)
        result, flags, error = self._result_from_row(
            self._row("results", f"seq {trow[0]}", self._result_cols, rrow))
        return StoredTrace(raw, result, flags, error, recorded, bench)

    def _result_from_row(self, r: Row):
        flags: dict[str, Any] = {"clipped": r.flag("clipped"),
                                 "range_changed": r.flag("range_changed")}
        flags.update(r.json("flags_json", dict))
        error = r.optional_text("error")
        if not r.flag("converted"):
            return None, flags, error
        result: dict[str, Any] = {}
        for name in RESULT_NAMES:
            if name not in r.values:      # a field this file's layout does not have
                result[name] = math.nan if name in REAL_RESULTS else None
            elif name in BOOL_RESULTS:
                result[name] = r.optional_flag(name)
            elif name in REAL_RESULTS:
                result[name] = r.real_or_nan(name)
            elif name in _TEXT_RESULTS:
                result[name] = r.optional_text(name)
            else:                         # a kind of column this reader has no check for
                result[name] = r.values[name]
        for key, value in r.json("extra_json", dict).items():
            if key in RESULT_NAMES and not _fits(key, value):
                r.fail("extra_json", f"{key!r} is {value!r}, not a value of that result field")
            if key in REAL_RESULTS:
                value = math.nan if value is None else float(value)
            result[key] = value
        return result, flags, error

    def _trace_rows(self, where: str, params):
        cols = ", ".join(f"t.{c}" for c in self._trace_cols)
        rcols = ", ".join(f"r.{c}" for c in self._result_cols)
        return self._query(f"SELECT {cols}, {rcols}, r.seq IS NULL FROM traces t "
                           f"LEFT JOIN results r ON r.seq = t.seq {where}", params)

    def _split(self, row, benches: dict[int, TraceBench],
               monitors: dict[int, ChannelTrace]) -> StoredTrace:
        nt = len(self._trace_cols)
        return self._stored(row[:nt], None if row[-1] else row[nt:-1], benches.get(row[0]),
                            monitors.get(row[0]))

    def _monitors_of(self, rows) -> dict[int, ChannelTrace]:
        seqs = [row[0] for row in rows if isinstance(row[0], int)]
        return self.monitor_channels(min(seqs), max(seqs)) if seqs else {}

    def _benches_of(self, rows) -> dict[int, TraceBench]:
        seqs = [row[0] for row in rows if isinstance(row[0], int)]
        return self.bench_states(min(seqs), max(seqs)) if seqs else {}

    def trace(self, seq: int) -> StoredTrace:
        """The trace with sequence number ``seq``; SessionFileError if there is none."""
        if not _SQLITE_INT_MIN <= seq <= _SQLITE_INT_MAX:
            raise SessionFileError(f"{self.path}: no trace with seq {seq}")
        rows = self._trace_rows("WHERE t.seq = ?", (int(seq),))
        if not rows:
            raise SessionFileError(f"{self.path}: no trace with seq {seq}")
        return self._split(rows[0], self._benches_of(rows), self._monitors_of(rows))

    def iter_traces(self, start_seq: int | None = None,
                    stop_seq: int | None = None) -> Iterator[StoredTrace]:
        """Traces in seq order, read in small chunks (no long read transaction, so a
        live writer can checkpoint; traces committed meanwhile are included)."""
        last = -1 if start_seq is None else int(start_seq) - 1
        while True:
            rows = self._trace_rows("WHERE t.seq > ? ORDER BY t.seq LIMIT ?",
                                    (last, self._CHUNK))
            benches = self._benches_of(rows)
            monitors = self._monitors_of(rows)
            for row in rows:
                if stop_seq is not None and row[0] >= stop_seq:
                    return
                yield self._split(row, benches, monitors)
            if len(rows) < self._CHUNK:
                return
            last = rows[-1][0]

    def __iter__(self):
        return self.iter_traces()

    # -- results, alerts, events --------------------------------------------------------
    def iter_results(self, stop_seq: int | None = None) -> Iterator[dict]:
        """One dict per trace (those before ``stop_seq`` when given): seq, time_s,
        converted, error, the RESULT_FIELDS (NaN / None when conversion failed) and the
        flags; and ``bench``, the trace's :class:`TraceBench` or None."""
        last = -1
        cols = ", ".join(f"r.{c}" for c in self._result_cols)
        while True:
            rows = self._query(f"SELECT t.seq, t.time_s, {cols} FROM traces t JOIN results r "
                               "ON r.seq = t.seq WHERE t.seq > ? ORDER BY t.seq LIMIT 1000",
                               (last,))
            benches = self._benches_of(rows)
            for row in rows:
                if stop_seq is not None and row[0] >= stop_seq:
                    return
                time_s = self._row("traces", f"seq {row[0]}", ("time_s",), row[1:2]).real(
                    "time_s")
                result, flags, error = self._result_from_row(
                    self._row("results", f"seq {row[0]}", self._result_cols, row[2:]))
                out = {"seq": row[0], "time_s": time_s, "converted": result is not None,
                       "error": error}
                for name in RESULT_NAMES:
                    out[name] = (result or {}).get(
                        name, math.nan if name in REAL_RESULTS else None)
                out.update(flags)
                out["bench"] = benches.get(row[0])
                yield out
            if len(rows) < 1000:
                return
            last = rows[-1][0]

    def alerts(self) -> list[dict]:
        cols = ("alert_id", "time_s", "rule", "severity", "message", "actions_json", "seq",
                "acknowledged_time_s")
        out = []
        for values in self._query(f"SELECT {', '.join(cols)} FROM alerts ORDER BY alert_id"):
            r = self._row("alerts", f"alert_id {values[0]}", cols, values)
            out.append({"alert_id": r.integer("alert_id"), "time_s": r.real("time_s"),
                        "rule": r.text("rule"), "severity": r.text("severity"),
                        "message": r.text("message"),
                        "actions": tuple(r.json("actions_json", list)),
                        "seq": r.optional_integer("seq"),
                        "acknowledged_time_s": r.optional_real("acknowledged_time_s")})
        return out

    def events(self) -> list[dict]:
        cols = ("event_id", "time_s", "kind", "seq", "detail_json")
        out = []
        for values in self._query(f"SELECT {', '.join(cols)} FROM events ORDER BY event_id"):
            r = self._row("events", f"event_id {values[0]}", cols, values)
            out.append({"event_id": r.integer("event_id"), "time_s": r.real("time_s"),
                        "kind": r.text("kind"), "seq": r.optional_integer("seq"),
                        "detail": r.json("detail_json", dict)})
        return out

    # -- scans (layout 4) ------------------------------------------------------------
    def _has_table(self, name: str) -> bool:
        return bool(self._query("SELECT 1 FROM sqlite_master WHERE type = 'table' "
                                "AND name = ?", (name,)))

    @property
    def scan_plan(self) -> dict | None:
        """The scan plan recorded in the metadata (``ScanPlan.as_dict()``), or None when
        the session ran no scan."""
        plan = self.metadata.get(META_SCAN_PLAN)
        return plan if isinstance(plan, dict) else None

    def scan_points(self) -> list[PointRecord]:
        """The completed scan points, by index (none before layout 4); every cell checked."""
        if self.layout < SCAN_LAYOUT or not self._has_table("scan_points"):
            return []
        cols = ("point_index", "status", "time_s", "target_json", "position_json", "counted",
                "rejected", "first_seq", "last_seq", "resumed", "results_json", "note",
                "waveform_json")
        out = []
        for values in self._query(f"SELECT {', '.join(cols)} FROM scan_points "
                                  "ORDER BY point_index"):
            r = self._row("scan_points", f"point_index {values[0]}", cols, values)
            status = r.text("status")
            if status not in list(PointStatus):
                r.fail("status", f"expected one of {', '.join(PointStatus)}, found {status!r}")
            results = {}
            for name, c in r.json("results_json", dict).items():
                if not (isinstance(c, dict) and set(c) == {"mean", "spread", "n"}):
                    r.fail("results_json", f"{name}: expected mean, spread and n")
                mean, spread = (float("nan") if c[k] is None else c[k]
                                for k in ("mean", "spread"))
                if not all(isinstance(v, int | float) and not isinstance(v, bool)
                           for v in (mean, spread, c["n"])):
                    r.fail("results_json", f"{name}: expected numbers")
                results[str(name)] = Combined(float(mean), float(spread), int(c["n"]))
            out.append(PointRecord(
                index=r.integer("point_index", minimum=0), status=PointStatus(status),
                time_s=r.real("time_s"), target_mm=_mm_of(r, "target_json"),
                position_mm=_mm_of(r, "position_json"),
                counted=r.integer("counted", minimum=0), rejected=r.integer("rejected",
                                                                            minimum=0),
                first_seq=r.optional_integer("first_seq"),
                last_seq=r.optional_integer("last_seq"),
                resumed=bool(r.integer("resumed")), results=results, note=r.text("note"),
                waveform=_numbers_of(r, "waveform_json")))
        return out

    def trace_points(self) -> dict[int, tuple[int, bool, str]]:
        """seq -> (point index, counted, why not) for every trace acquired at a scan point."""
        if self.layout < SCAN_LAYOUT or not self._has_table("trace_points"):
            return {}
        cols = ("seq", "point_index", "counted", "why_not")
        out = {}
        for values in self._query(f"SELECT {', '.join(cols)} FROM trace_points ORDER BY seq"):
            r = self._row("trace_points", f"seq {values[0]}", cols, values)
            out[r.integer("seq")] = (r.integer("point_index", minimum=0),
                                     bool(r.integer("counted")), r.text("why_not"))
        return out

    def size_bytes(self) -> int:
        """Bytes on disk: the database file and its WAL."""
        return session_size_bytes(self.path)

    def integrity_check(self) -> str:
        """SQLite's ``PRAGMA integrity_check`` verdict (``"ok"`` when sound)."""
        return "; ".join(r[0] for r in self._query("PRAGMA integrity_check"))


_KIND_NAMES = {str: "text", dict: "a JSON object", list: "a JSON list", int: "a number",
               float: "a number", bool: "true or false"}


def _fits(name: str, value: Any) -> bool:
    """Whether ``value`` (from extra_json) can stand for the result field ``name``."""
    if value is None:
        return True
    if name in BOOL_RESULTS:
        return isinstance(value, bool)
    if name in REAL_RESULTS:
        return isinstance(value, int | float) and not isinstance(value, bool)
    if name in _TEXT_RESULTS:
        return isinstance(value, str)
    return True


def _mm_of(r: Row, column: str) -> dict[str, float]:
    """An axis -> mm object of a ``scan_points`` cell, each a finite number."""
    out = {}
    for axis, mm in r.json(column, dict).items():
        if isinstance(mm, bool) or not isinstance(mm, int | float) or not math.isfinite(mm):
            r.fail(column, f"axis {axis!r}: expected a finite position in mm, found {mm!r}")
        out[str(axis)] = float(mm)
    return out


def _numbers_of(r: Row, column: str) -> dict[str, float]:
    """A name -> number object of a ``scan_points`` cell (null reads as NaN)."""
    out = {}
    for name, v in r.json(column, dict).items():
        if v is None:
            v = float("nan")
        if isinstance(v, bool) or not isinstance(v, int | float):
            r.fail(column, f"{name}: expected a number, found {v!r}")
        out[str(name)] = float(v)
    return out
