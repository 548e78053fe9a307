"""Reading a session file back: :class:`SessionReader` (also importable from
:mod:`tankside.monitor.record.store`).

The file is opened read-only (``mode=ro``), so a session can be read while another
process is still writing it; traces are read lazily in small chunks.
"""

from __future__ import annotations

import json
import math
import os
import sqlite3
from collections.abc import Iterator
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from ...drivers.trace import RawTrace
from ..errors import SessionFileError, StoreError
from .schema import (
    BOOL_RESULTS,
    FORMAT_TAG,
    LAYOUT_VERSION,
    META_CALIBRATION_TEXT,
    REAL_RESULTS,
    RESULT_NAMES,
    TRACE_COLUMNS,
)

__all__ = ["SessionReader", "StoredTrace"]


@dataclass
class StoredTrace:
    """One trace read back: the raw trace as sent, its result (None if conversion
    failed), its flags and the conversion error text."""

    raw: RawTrace
    result: dict | None
    flags: dict = field(default_factory=dict)
    error: str | None = None


def session_size_bytes(path) -> int:
    """Bytes on disk of a session file and its WAL (0 for either that does not exist)."""
    total = 0
    for suffix in ("", "-wal"):
        try:
            total += os.path.getsize(f"{path}{suffix}")
        except FileNotFoundError:
            pass
    return total


def _nan_if_none(v):
    return math.nan if v is None else v


class SessionReader:
    """Reads a session file, read-only; safe while another process writes it.

    Parameters
    ----------
    path : str or Path
        A session file written by :class:`SessionStore`.

    Raises
    ------
    SessionFileError
        Missing file, not an SQLite file, or not a tankside session (and, from
        :meth:`trace`, an unknown seq). Other read failures are StoreError.
    """

    _CHUNK = 64

    def __init__(self, path):
        self.path = Path(path)
        if not self.path.is_file():
            raise SessionFileError(f"{self.path}: no such session file")
        uri = f"{self.path.resolve().as_uri()}?mode=ro"
        try:
            self._conn = sqlite3.connect(uri, uri=True, check_same_thread=False)
            row = self._conn.execute(
                "SELECT format, layout_version, session_uid, start_time_s, tool_version "
                "FROM session_start").fetchone()
        except sqlite3.Error as err:
            if hasattr(self, "_conn"):
                self._conn.close()
            raise SessionFileError(f"{self.path}: not a tankside session file ({err})") from err
        if row is None or row[0] != FORMAT_TAG:
            self._conn.close()
            raise SessionFileError(f"{self.path}: not a tankside session file")
        if row[1] > LAYOUT_VERSION:
            self._conn.close()
            raise SessionFileError(f"{self.path}: session layout {row[1]} is newer than this "
                             f"tankside reads ({LAYOUT_VERSION})")
        self.start = {"format": row[0], "layout_version": row[1], "session_uid": row[2],
                      "start_time_s": row[3], "tool_version": row[4]}
        self._result_cols = [r[1] for r in self._query("PRAGMA table_info(results)")]

    def _query(self, sql: str, params=()):
        try:
            return self._conn.execute(sql, params).fetchall()
        except sqlite3.Error as err:
            raise StoreError(f"{self.path}: reading the session failed ({err})") from err

    def close(self) -> None:
        self._conn.close()

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()

    # -- run record ---------------------------------------------------------------------
    @property
    def metadata(self) -> dict:
        """The metadata dict as recorded (``META_*`` keys)."""
        return {k: json.loads(v) for k, v in self._query("SELECT key, value_json FROM metadata")}

    @property
    def descriptors(self) -> dict:
        rows = self._query("SELECT name, tbl, units, dtype, shape_json, source FROM descriptors")
        return {r[0]: {"table": r[1], "units": r[2], "dtype": r[3],
                       "shape": json.loads(r[4]), "source": r[5]} for r in rows}

    @property
    def stop(self) -> dict | None:
        """The stop record, or None when the session was not stopped cleanly."""
        rows = self._query("SELECT stop_time_s, exit_status, reason, counts_json "
                           "FROM session_stop")
        if not rows:
            return None
        t, status, reason, counts = rows[0]
        return {"stop_time_s": t, "exit_status": status, "reason": reason,
                "counts": json.loads(counts)}

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

    def trace_layouts(self) -> set[tuple[str, int]]:
        """The distinct (numpy dtype string, sample count) of the stored traces."""
        return {(d, n) for d, n in self._query("SELECT DISTINCT dtype, n FROM traces")}

    def total_samples(self) -> int:
        return int(self._query("SELECT COALESCE(SUM(n), 0) FROM traces")[0][0])

    def seqs(self) -> list[int]:
        return [r[0] for r in self._query("SELECT seq FROM traces ORDER BY seq")]

    def _stored(self, trow, rrow) -> StoredTrace:
        t = dict(zip(TRACE_COLUMNS, trow, strict=True))
        codes = np.frombuffer(t["codes"], dtype=np.dtype(t["dtype"]), count=t["n"])
        raw = RawTrace(codes=codes, volts_per_code=t["volts_per_code"], offset_v=t["offset_v"],
                       dt_s=t["dt_s"], t0_s=t["t0_s"], seq=t["seq"], time_s=t["time_s"],
                       range_v=t["range_v"], code_min=t["code_min"], code_max=t["code_max"],
                       clipped_low=t["clipped_low"], clipped_high=t["clipped_high"],
                       data_format=t["data_format"], state=json.loads(t["state_json"]))
        if rrow is None:  # trace written without a results row (older layouts)
            return StoredTrace(raw, None, {}, None)
        result, flags, error = self._result_from_row(dict(zip(self._result_cols, rrow,
                                                              strict=True)))
        return StoredTrace(raw, result, flags, error)

    def _result_from_row(self, r: dict):
        flags = {"clipped": bool(r["clipped"]), "range_changed": bool(r["range_changed"])}
        flags.update(json.loads(r["flags_json"]))
        if not r["converted"]:
            return None, flags, r["error"]
        result = {}
        for name in RESULT_NAMES:
            v = r.get(name)
            if name in BOOL_RESULTS:
                v = None if v is None else bool(v)
            elif name in REAL_RESULTS:
                v = float(_nan_if_none(v))
            result[name] = v
        result.update(json.loads(r["extra_json"]))
        return result, flags, r["error"]

    def _trace_rows(self, where: str, params):
        cols = ", ".join(f"t.{c}" for c in TRACE_COLUMNS)
        rcols = ", ".join(f"r.{c}" for c in self._result_cols)
        return self._query(f"SELECT {cols}, {rcols} FROM traces t LEFT JOIN results r "
                           f"ON r.seq = t.seq {where}", params)

    def _split(self, row) -> StoredTrace:
        nt = len(TRACE_COLUMNS)
        rrow = row[nt:]
        return self._stored(row[:nt], None if rrow[0] is None else rrow)

    def trace(self, seq: int) -> StoredTrace:
        """The trace with sequence number ``seq``; StoreError if there is none."""
        rows = self._trace_rows("WHERE t.seq = ?", (int(seq),))
        if not rows:
            raise SessionFileError(f"{self.path}: no trace with seq {seq}")
        return self._split(rows[0])

    def iter_traces(self, start_seq: int | None = None,
                    stop_seq: int | None = None) -> Iterator[StoredTrace]:
        """Traces in seq order, read in small chunks (no long read transaction, so a
        live writer can checkpoint; traces committed meanwhile are included)."""
        last = -1 if start_seq is None else int(start_seq) - 1
        while True:
            rows = self._trace_rows("WHERE t.seq > ? ORDER BY t.seq LIMIT ?",
                                    (last, self._CHUNK))
            for row in rows:
                if stop_seq is not None and row[0] >= stop_seq:
                    return
                yield self._split(row)
            if len(rows) < self._CHUNK:
                return
            last = rows[-1][0]

    def __iter__(self):
        return self.iter_traces()

    # -- results, alerts, events --------------------------------------------------------
    def iter_results(self) -> Iterator[dict]:
        """One dict per trace: seq, time_s, converted, error, the RESULT_FIELDS (NaN /
        None when conversion failed) and the flags."""
        last = -1
        cols = ", ".join(f"r.{c}" for c in self._result_cols)
        while True:
            rows = self._query(f"SELECT t.seq, t.time_s, {cols} FROM traces t JOIN results r "
                               "ON r.seq = t.seq WHERE t.seq > ? ORDER BY t.seq LIMIT 1000",
                               (last,))
            for row in rows:
                r = dict(zip(self._result_cols, row[2:], strict=True))
                result, flags, error = self._result_from_row(r)
                out = {"seq": row[0], "time_s": row[1], "converted": result is not None,
                       "error": error}
                for name in RESULT_NAMES:
                    out[name] = (result or {}).get(
                        name, math.nan if name in REAL_RESULTS else None)
                out.update(flags)
                yield out
            if len(rows) < 1000:
                return
            last = rows[-1][0]

    def alerts(self) -> list[dict]:
        rows = self._query("SELECT alert_id, time_s, rule, severity, message, actions_json, "
                           "seq, acknowledged_time_s FROM alerts ORDER BY alert_id")
        return [{"alert_id": a, "time_s": t, "rule": rule, "severity": sev, "message": msg,
                 "actions": tuple(json.loads(act)), "seq": seq, "acknowledged_time_s": ack}
                for a, t, rule, sev, msg, act, seq, ack in rows]

    def events(self) -> list[dict]:
        rows = self._query("SELECT event_id, time_s, kind, seq, detail_json FROM events "
                           "ORDER BY event_id")
        return [{"event_id": e, "time_s": t, "kind": k, "seq": s, "detail": json.loads(d)}
                for e, t, k, s, d in rows]

    def size_bytes(self) -> int:
        """Bytes on disk: the database file and its WAL."""
        return session_size_bytes(self.path)

    def integrity_check(self) -> str:
        """SQLite's ``PRAGMA integrity_check`` verdict (``"ok"`` when sound)."""
        return "; ".join(r[0] for r in self._query("PRAGMA integrity_check"))
