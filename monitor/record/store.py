"""The session store: one SQLite file per session, written by one thread, read by anyone.

:class:`SessionStore` records a live session (or a replay) as it happens;
:class:`SessionReader` reads one back, also while another process is still writing
it. The file layout and the metadata keys are in :mod:`tankside.monitor.record.schema`.

Durability
----------
The file is in WAL mode with ``synchronous=FULL``: every commit fsyncs the WAL, so
a committed batch survives both a crash of the process and a loss of power. Commits
are batched (:meth:`SessionStore.maybe_commit`, every ``commit_interval_s``), so at
most about that much data is at risk. ``synchronous=NORMAL`` would be as safe against
a crash, but in WAL mode it fsyncs only at checkpoints, so a power loss could roll
back every batch since the last checkpoint (several seconds at 50 traces/s of 10,000
samples); one fsync per second is cheap, so FULL it is.

Checkpoints
-----------
Committed rows live in ``FILE.db-wal`` until a checkpoint copies them into ``FILE.db``.
SQLite's own checkpoint comes only every 1000 pages (about 200 traces of 10,000
samples), so a copy of ``FILE.db`` alone, taken after a crash, used to hold not even
the tables. The store checkpoints right after the start record, and then after a
commit once ``checkpoint_interval_s`` has passed (a passive checkpoint: it never waits
for a reader), so ``FILE.db`` alone is a readable session, at most that much older than
the session with its ``-wal``.
"""

from __future__ import annotations

import hashlib
import json
import math
import sqlite3
import time
import uuid
import zlib
from collections.abc import Callable
from pathlib import Path
from typing import NoReturn

import numpy as np

from ...drivers.trace import ChannelTrace, RawTrace
from .. import __version__
from ..errors import DiskFullError, SessionFileError, StoreError
from ..outcome import ExitStatus
from .benchstate import TraceBench
from .reader import SessionReader, StoredTrace, session_size_bytes
from .scanpoints import PointRecord
from .schema import (
    BOOL_RESULTS,
    CHANNEL_COLUMNS,
    DDL,
    FORMAT_TAG,
    LAYOUT_VERSION,
    META_CALIBRATION_SHA256,
    META_CALIBRATION_SOURCE,
    META_CALIBRATION_TEXT,
    META_CONFIGURATION,
    META_INSTRUMENTS,
    META_LOADING,
    META_SETTINGS,
    META_START_TIME_S,
    META_TEMPERATURE_C,
    META_TOOL_VERSION,
    REAL_RESULTS,
    RESULT_NAMES,
    RESULT_ROW_COLUMNS,
    SCAN_LAYOUT,
    STATIC_DESCRIPTORS,
    TRACE_COLUMNS,
    EventKind,
)

__all__ = [
    "SessionStore",
    "SessionReader",
    "StoredTrace",
    "session_metadata",
]

_DISK_CODES = {sqlite3.SQLITE_FULL, sqlite3.SQLITE_IOERR}


def strict_json(value) -> str:
    """Strict JSON text (RFC 8259) of a metadata value, flags, extras or event detail.

    NaN and the infinities, which strict JSON lacks (Python would write the tokens
    ``NaN`` and ``Infinity`` that other readers refuse), are recorded as null.
    """
    return json.dumps(_finite_json(value), sort_keys=True, allow_nan=False)


def _finite_json(value):
    # float first: numpy's float64 is a float subclass, and bool an int subclass
    if isinstance(value, float):
        return value if math.isfinite(value) else None
    if value is None or isinstance(value, str | int):
        return value
    if isinstance(value, dict):
        return {k: _finite_json(v) for k, v in value.items()}
    if isinstance(value, list):
        return [_finite_json(v) for v in value]
    return _finite_json(_json_default(value))


def _json_default(obj):
    if isinstance(obj, np.generic):
        return obj.item()
    if isinstance(obj, np.ndarray):
        return obj.tolist()
    if isinstance(obj, (tuple, set, frozenset)):
        return list(obj)
    if isinstance(obj, Path):
        return str(obj)
    if hasattr(obj, "as_dict"):
        return obj.as_dict()
    raise TypeError(f"cannot record a {type(obj).__name__} in session metadata")


def _as_dict(obj) -> dict | None:
    if obj is None or isinstance(obj, dict):
        return obj
    return obj.as_dict()


def session_metadata(*, configuration: dict, instruments: dict, calibration=None,
                     calibration_text: str | None = None, calibration_source: str = "",
                     loading=None, settings=None, temperature_c: float = 20.0,
                     start_time_s: float | None = None, extra: dict | None = None) -> dict:
    """The metadata dict of a session, under the ``META_*`` keys of the store.

    Parameters
    ----------
    configuration : dict
        The full bench configuration in force (after command-line overrides).
    instruments : dict
        Name (``"digitiser"``, ``"generator"``) -> dict with at least ``resource`` and
        ``identity`` (the ``*IDN?`` reply).
    calibration : Calibration, optional
        The loaded hydrophone calibration; its ``text``, ``sha256`` and ``source`` are
        recorded. Alternatively pass ``calibration_text`` (and ``calibration_source``).
    loading, settings : Loading / ConversionSettings or their ``as_dict()``, optional
    temperature_c : float
        Water temperature used for the conversion, degC.
    start_time_s : float, optional
        Seconds since the Unix epoch; the store's create time when omitted.
    extra : dict, optional
        Further keys (must not collide with the ``META_*`` keys).

    Returns
    -------
    dict
        JSON-able (``SessionStore.create`` raises StoreError on anything that is not).
    """
    if calibration is not None:
        calibration_text = calibration.text
        calibration_source = str(calibration.source)
        sha = calibration.sha256
    elif calibration_text is not None:
        sha = hashlib.sha256(calibration_text.encode("utf-8")).hexdigest()
    else:
        sha = None
    meta = {
        META_TOOL_VERSION: __version__,
        META_CONFIGURATION: configuration,
        META_INSTRUMENTS: instruments,
        META_CALIBRATION_TEXT: calibration_text,
        META_CALIBRATION_SHA256: sha,
        META_CALIBRATION_SOURCE: calibration_source,
        META_LOADING: _as_dict(loading),
        META_SETTINGS: _as_dict(settings),
        META_TEMPERATURE_C: float(temperature_c),
    }
    if start_time_s is not None:
        meta[META_START_TIME_S] = float(start_time_s)
    for key, value in (extra or {}).items():
        if key in meta:
            raise StoreError(f"extra metadata key {key!r} collides with a standard key")
        meta[key] = value
    return meta


def _digitiser_source(metadata: dict) -> str:
    dig = (metadata.get(META_INSTRUMENTS) or {}).get("digitiser") or {}
    ident = dig.get("identity") if isinstance(dig, dict) else None
    return f"digitiser {ident}" if ident else "digitiser"


def _map_error(err: sqlite3.Error, doing: str, path: Path) -> StoreError:
    code = getattr(err, "sqlite_errorcode", None)
    if code is not None and (code & 0xFF) in _DISK_CODES:
        return DiskFullError(f"{path}: disk full or write failed while {doing} ({err})")
    return StoreError(f"{path}: {doing} failed ({err})")


def _optional_float(value: float | None) -> float | None:
    return None if value is None else float(value)


def _bench_rows(seq: int, bench: TraceBench | None):
    """The ``trace_positions`` rows and the ``trace_water`` row (or None) of one trace."""
    if bench is None:
        return [], None
    positions = []
    for axis, value in bench.positions_mm.items():
        mm = float(value)
        if math.isfinite(mm):       # an axis whose position is not a number is unknown
            positions.append((seq, str(axis), mm))
    water = None
    if bench.water_source is not None:
        water = (seq, _optional_float(bench.water_reading_c),
                 _optional_float(bench.water_reading_age_s), str(bench.water_source))
    return positions, water


def _channel_row(seq: int, channel: ChannelTrace) -> tuple:
    """The ``trace_channels`` row of one trace's monitor channel (codes as sent)."""
    codes = np.ascontiguousarray(channel.codes)
    data = codes.tobytes()
    return (seq, int(channel.channel), codes.dtype.str, int(codes.shape[0]), data,
            zlib.crc32(data), float(channel.volts_per_code), float(channel.offset_v),
            float(channel.dt_s), float(channel.t0_s), _optional_float(channel.range_v),
            int(channel.clipped_low), int(channel.clipped_high))


class SessionStore:
    """Writes one session file. Single-thread use: one writer owns it.

    Create with :meth:`create`. Rows become durable at :meth:`commit`, which
    :meth:`maybe_commit` calls once ``commit_interval_s`` has passed since the last
    commit; the writer should call ``maybe_commit()`` after each row and about once a
    second when idle. After a disk or database error the store refuses further writes
    (:class:`StoreError`); everything committed before stays readable.
    """

    def __init__(self, conn: sqlite3.Connection, path: Path, commit_interval_s: float,
                 clock: Callable[[], float], wall_clock: Callable[[], float],
                 source: str = "digitiser", checkpoint_interval_s: float = 10.0,
                 label: Path | None = None):
        self._conn = conn
        self.path = path
        # the file named in messages (replay writes under a temporary name for it)
        self.label = path if label is None else label
        self.commit_interval_s = float(commit_interval_s)
        self.checkpoint_interval_s = float(checkpoint_interval_s)
        self._clock = clock
        self._wall_clock = wall_clock
        self._last_commit = clock()
        self._last_checkpoint = self._last_commit
        self._committed_since_checkpoint = False
        self.checkpoints = 0
        self._pending = 0
        self._failed: str | None = None
        self._closed = False
        self._codes_described = False
        self.traces_written = 0
        self._source = source

    # -- creation -----------------------------------------------------------------------
    @classmethod
    def create(cls, path, metadata: dict, *, commit_interval_s: float = 1.0,
               checkpoint_interval_s: float = 10.0,
               clock: Callable[[], float] = time.monotonic,
               wall_clock: Callable[[], float] = time.time,
               label=None) -> SessionStore:
        """Create a new session file and write its start record.

        Parameters
        ----------
        path : str or Path
            The new file; it must not exist.
        metadata : dict
            From :func:`session_metadata` (any JSON-able dict is accepted).
        commit_interval_s : float
            Longest time between commits in :meth:`maybe_commit`, s.
        checkpoint_interval_s : float
            Shortest time between two checkpoints after commits, s (see the module
            docstring); the first is right after the start record.
        clock : callable
            Monotonic seconds, for the commit interval (tests inject their own).
        wall_clock : callable
            Seconds since the Unix epoch, for the start and stop records.
        label : str or Path, optional
            The file to name in messages, when ``path`` is a temporary name for it.
        """
        path = Path(path)
        label = None if label is None else Path(label)
        if path.exists():
            raise SessionFileError(f"{label or path}: session file already exists")
        try:
            meta_rows = [(key, strict_json(value)) for key, value in metadata.items()]
        except (TypeError, ValueError) as err:
            raise StoreError(f"{label or path}: session metadata is not recordable: "
                             f"{err}") from err
        start_time_s = float(metadata.get(META_START_TIME_S, wall_clock()))
        tool_version = str(metadata.get(META_TOOL_VERSION, __version__))
        source = _digitiser_source(metadata)
        try:
            conn = sqlite3.connect(path, isolation_level=None, check_same_thread=False)
        except sqlite3.Error as err:
            raise _map_error(err, "creating the session file", label or path) from err
        try:
            conn.execute("PRAGMA journal_mode=WAL")
            conn.execute("PRAGMA synchronous=FULL")  # why: see the module docstring
            conn.execute("BEGIN")
            for ddl in DDL:
                conn.execute(ddl)
            conn.execute("INSERT INTO session_start VALUES (1, ?, ?, ?, ?, ?)",
                         (FORMAT_TAG, LAYOUT_VERSION, uuid.uuid4().hex, start_time_s,
                          tool_version))
            conn.executemany("INSERT INTO metadata VALUES (?, ?)", meta_rows)
            conn.executemany(
                "INSERT INTO descriptors VALUES (?, ?, ?, ?, '[]', ?)",
                [(name, tbl, units, dtype, source if tbl in ("traces", "trace_channels")
                  else "conversion") for name, tbl, units, dtype in STATIC_DESCRIPTORS])
            conn.execute("COMMIT")
            # FILE.db alone now holds the tables and the start record (the WAL is empty).
            conn.execute("PRAGMA wal_checkpoint(TRUNCATE)").fetchall()
        except sqlite3.Error as err:
            conn.close()
            raise _map_error(err, "writing the start record", label or path) from err
        store = cls(conn, path, commit_interval_s, clock, wall_clock, source,
                    checkpoint_interval_s, label)
        store.checkpoints = 1
        return store

    @classmethod
    def reopen(cls, path, *, commit_interval_s: float = 1.0,
               checkpoint_interval_s: float = 10.0,
               clock: Callable[[], float] = time.monotonic,
               wall_clock: Callable[[], float] = time.time) -> tuple[SessionStore, dict | None]:
        """Open an existing session file to go on writing it (a resumed scan).

        The file must be a session of this tankside's layout (:data:`SCAN_LAYOUT` and
        up: older files are never written into). Its stop record, if any, is removed
        (in the same transaction that opens it; the caller records it in the
        ``scan-resumed`` event) and returned; None when the file had none (killed,
        crashed, power lost). Rows go on from the traces already there.

        Raises
        ------
        SessionFileError
            Not a session file, or one of another layout.
        StoreError
            The file cannot be written.
        """
        path = Path(path)
        with SessionReader(path) as reader:
            layout = reader.start["layout_version"]
            if layout != LAYOUT_VERSION or layout < SCAN_LAYOUT:
                raise SessionFileError(f"{path}: a layout {layout} session; only files of "
                                       f"layout {LAYOUT_VERSION} (this tankside's) can be "
                                       "resumed")
            previous = reader.stop
            written = reader.trace_count()
            source = _digitiser_source(reader.metadata)
        try:
            conn = sqlite3.connect(path, isolation_level=None, check_same_thread=False)
            conn.execute("PRAGMA journal_mode=WAL")
            conn.execute("PRAGMA synchronous=FULL")
            conn.execute("BEGIN IMMEDIATE")
            conn.execute("DELETE FROM session_stop")
            conn.execute("COMMIT")
        except sqlite3.Error as err:
            raise _map_error(err, "reopening the session file", path) from err
        store = cls(conn, path, commit_interval_s, clock, wall_clock, source,
                    checkpoint_interval_s)
        store.traces_written = int(written)
        store._codes_described = written > 0
        return store, previous

    # -- writing ------------------------------------------------------------------------
    def _write(self, doing: str, fn):
        if self._closed:
            raise StoreError(f"{self.label}: session store is closed")
        if self._failed is not None:
            raise StoreError(f"{self.label}: session store no longer accepts data after an "
                             f"earlier error ({self._failed}); committed data is intact")
        try:
            if not self._conn.in_transaction:
                self._conn.execute("BEGIN")
            # A savepoint per row, so that a rejected row (say a repeated seq) is undone
            # alone and the rest of the uncommitted batch is kept.
            self._conn.execute("SAVEPOINT row")
            try:
                out = fn()
            except sqlite3.IntegrityError as err:
                self._conn.execute("ROLLBACK TO row")
                self._conn.execute("RELEASE row")
                raise StoreError(f"{self.label}: {doing} was refused ({err}); the session "
                                 "goes on without it") from err
            self._conn.execute("RELEASE row")
        except sqlite3.Error as err:
            self._fail(err, doing)
        self._pending += 1
        return out

    def _fail(self, err: sqlite3.Error, doing: str) -> NoReturn:
        mapped = _map_error(err, doing, self.label)
        self._failed = str(mapped)
        try:
            if self._conn.in_transaction:
                self._conn.execute("ROLLBACK")
        except sqlite3.Error as rollback_err:
            # The uncommitted batch is lost either way; report both.
            mapped = type(mapped)(f"{mapped}; rollback also failed ({rollback_err})")
        raise mapped from err

    def add_trace(self, raw: RawTrace, result: dict | None, flags: dict | None = None,
                  error: str | None = None, bench: TraceBench | None = None,
                  point: tuple[int, bool, str] | None = None,
                  channel: ChannelTrace | None = None) -> None:
        """Record one trace as sent, and its result (``TraceResult.flat()``) or error.

        ``flags`` may hold ``clipped`` (default: any sample at a rail),
        ``range_changed`` (default False) and any other JSON-able flags. ``bench``, the
        stage position and water reading at the trace, goes into ``trace_positions`` and
        ``trace_water`` (nothing when None or empty). ``point``, the scan point the trace
        was acquired at, whether it counts towards it and why not, goes into
        ``trace_points`` (nothing when None: no scan, or between points). ``channel``, a
        second digitiser channel of the same acquisition (the bench's monitor channel),
        goes into ``trace_channels`` as sent (nothing when None).
        """
        codes = np.ascontiguousarray(raw.codes)
        data = codes.tobytes()
        flags = dict(flags or {})
        clipped = bool(flags.pop("clipped", raw.clipped > 0))
        range_changed = bool(flags.pop("range_changed", False))
        try:
            trace_row = (int(raw.seq), float(raw.time_s), str(raw.data_format),
                         codes.dtype.str, int(codes.shape[0]), data, zlib.crc32(data),
                         float(raw.volts_per_code), float(raw.offset_v), float(raw.dt_s),
                         float(raw.t0_s), float(raw.range_v), float(raw.code_min),
                         float(raw.code_max), int(raw.clipped_low), int(raw.clipped_high),
                         strict_json(raw.state))
            values, extra = self._result_values(result)
            result_row = (int(raw.seq), result is not None, error, *values, clipped,
                          range_changed, strict_json(flags), strict_json(extra))
            position_rows, water_row = _bench_rows(int(raw.seq), bench)
            point_row = None if point is None else (int(raw.seq), int(point[0]),
                                                    bool(point[1]), str(point[2]))
            channel_row = None if channel is None else _channel_row(int(raw.seq), channel)
        except (TypeError, ValueError) as err:
            raise StoreError(f"{self.label}: trace {raw.seq} is not recordable: {err}") from err

        def insert():
            self._conn.execute(
                f"INSERT INTO traces ({', '.join(TRACE_COLUMNS)}) "
                f"VALUES ({','.join('?' * len(TRACE_COLUMNS))})", trace_row)
            self._conn.execute(
                f"INSERT INTO results VALUES ({','.join('?' * len(RESULT_ROW_COLUMNS))})",
                result_row)
            if position_rows:
                self._conn.executemany("INSERT INTO trace_positions VALUES (?, ?, ?)",
                                       position_rows)
            if water_row is not None:
                self._conn.execute("INSERT INTO trace_water VALUES (?, ?, ?, ?)", water_row)
            if point_row is not None:
                self._conn.execute("INSERT INTO trace_points VALUES (?, ?, ?, ?)", point_row)
            if channel_row is not None:
                self._conn.execute(
                    f"INSERT INTO trace_channels ({', '.join(CHANNEL_COLUMNS)}) "
                    f"VALUES ({','.join('?' * len(CHANNEL_COLUMNS))})", channel_row)
            if not self._codes_described:
                self._conn.execute(
                    "INSERT OR REPLACE INTO descriptors "
                    "VALUES ('codes', 'traces', 'code', ?, ?, ?)",
                    (codes.dtype.str, strict_json([int(codes.shape[0])]), self._source))
        self._write(f"recording trace {raw.seq}", insert)
        self._codes_described = True
        self.traces_written += 1

    @staticmethod
    def _result_values(result: dict | None):
        if result is None:
            return [None] * len(RESULT_NAMES), {}
        values = []
        for name in RESULT_NAMES:
            v = result.get(name)
            if name in BOOL_RESULTS:
                v = None if v is None else bool(v)
            elif name in REAL_RESULTS:
                v = None if v is None else float(v)
            else:
                v = None if v is None else str(v)
            values.append(v)
        extra = {k: v for k, v in result.items() if k not in RESULT_NAMES}
        return values, extra

    def add_alert(self, time_s: float, rule: str, severity: str, message: str,
                  actions, seq: int | None = None) -> int:
        """Record an alert; returns its id (for :meth:`acknowledge_alert`)."""
        row = (float(time_s), str(rule), str(severity), str(message), strict_json(list(actions)),
               None if seq is None else int(seq))
        cur = self._write(f"recording alert {rule!r}", lambda: self._conn.execute(
            "INSERT INTO alerts (time_s, rule, severity, message, actions_json, seq) "
            "VALUES (?, ?, ?, ?, ?, ?)", row))
        return int(cur.lastrowid)

    def acknowledge_alert(self, alert_id: int, time_s: float) -> None:
        """Record the time an operator acknowledged an alert (s since the epoch)."""
        cur = self._write(f"acknowledging alert {alert_id}", lambda: self._conn.execute(
            "UPDATE alerts SET acknowledged_time_s = ? WHERE alert_id = ?",
            (float(time_s), int(alert_id))))
        if cur.rowcount != 1:
            raise StoreError(f"{self.label}: no alert {alert_id} to acknowledge")

    def add_event(self, time_s: float, kind: EventKind | str, detail: dict,
                  seq: int | None = None) -> None:
        """Record an event (kinds: :class:`~tankside.monitor.record.schema.EventKind`; the
        file allows free text, and a replay copies the kinds it reads)."""
        try:
            detail_json = strict_json(detail)
        except (TypeError, ValueError) as err:
            raise StoreError(f"{self.label}: event {kind!r} is not recordable: {err}") from err
        self._write(f"recording event {kind!r}", lambda: self._conn.execute(
            "INSERT INTO events (time_s, kind, seq, detail_json) VALUES (?, ?, ?, ?)",
            (float(time_s), str(kind), None if seq is None else int(seq), detail_json)))

    def add_scan_point(self, point: PointRecord) -> None:
        """Record a completed scan point (``scan_points``).

        Raises
        ------
        StoreError
            The point is already recorded (a point is never recorded twice), or a value
            is not recordable.
        """
        try:
            row = (int(point.index), str(point.status), float(point.time_s),
                   strict_json({k: float(v) for k, v in point.target_mm.items()}),
                   strict_json({k: float(v) for k, v in point.position_mm.items()}),
                   int(point.counted), int(point.rejected),
                   None if point.first_seq is None else int(point.first_seq),
                   None if point.last_seq is None else int(point.last_seq),
                   bool(point.resumed),
                   strict_json({k: c.as_dict() for k, c in point.results.items()}),
                   str(point.note),
                   strict_json({k: float(v) for k, v in point.waveform.items()}))
        except (TypeError, ValueError) as err:
            raise StoreError(f"{self.label}: scan point {point.index} is not recordable: "
                             f"{err}") from err

        def insert():     # a repeated index is refused by the primary key (_write)
            self._conn.execute(
                "INSERT INTO scan_points VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)", row)
        self._write(f"recording scan point {point.index}", insert)

    # -- commits ------------------------------------------------------------------------
    def maybe_commit(self) -> bool:
        """Commit if ``commit_interval_s`` has passed since the last commit; True if it did."""
        if self._clock() - self._last_commit >= self.commit_interval_s:
            self.commit()
            return True
        return False

    def commit(self) -> None:
        """Make every row written so far durable."""
        if self._failed is not None or self._closed:
            self._write("committing", lambda: None)  # raises the refusal
        if self._conn.in_transaction:
            try:
                self._conn.execute("COMMIT")
            except sqlite3.Error as err:
                self._fail(err, "committing")
            self._committed_since_checkpoint = True
        self._pending = 0
        self._last_commit = self._clock()
        if (self._committed_since_checkpoint
                and self._last_commit - self._last_checkpoint >= self.checkpoint_interval_s):
            self.checkpoint()

    def checkpoint(self) -> None:
        """Copy what is committed into ``FILE.db`` (a passive checkpoint: pages a reader
        still needs stay in the WAL until the next one)."""
        if self._failed is not None or self._closed:
            self._write("checkpointing", lambda: None)  # raises the refusal
        try:
            self._conn.execute("PRAGMA wal_checkpoint(PASSIVE)").fetchall()
        except sqlite3.Error as err:
            self._fail(err, "checkpointing")
        self._committed_since_checkpoint = False
        self._last_checkpoint = self._clock()
        self.checkpoints += 1

    @property
    def pending(self) -> int:
        """Rows written since the last commit (at risk until it)."""
        return self._pending

    @property
    def failed(self) -> str | None:
        """The error that stopped the store, or None."""
        return self._failed

    def size_bytes(self) -> int:
        """Bytes on disk: the database file and its WAL."""
        return session_size_bytes(self.path)

    def close(self, exit_status: ExitStatus, reason: str, counts: dict) -> None:
        """Commit, write the stop record and close the file.

        After an earlier error the stop record is still attempted (a few hundred
        bytes may fit where a trace did not); if it cannot be written the file is
        closed anyway, stays readable and is marked as not stopped cleanly, and the
        error is raised.
        """
        if self._closed:
            return
        row = (float(self._wall_clock()), str(exit_status), str(reason), strict_json(counts))
        try:
            if self._conn.in_transaction and self._failed is None:
                self._conn.execute("COMMIT")
            self._conn.execute("INSERT INTO session_stop VALUES (1, ?, ?, ?, ?)", row)
        except sqlite3.Error as err:
            mapped = _map_error(err, "writing the stop record", self.label)
            self._closed = True
            self._conn.close()
            raise mapped from err
        try:
            # A finished session becomes one self-contained file, which read-only
            # readers can open even where no -shm file can be created (archives,
            # read-only shares). It needs no other connection open; when a reader is
            # still attached the file simply stays in WAL mode, equally complete.
            self._conn.execute("PRAGMA busy_timeout=0")  # never wait for a reader here
            self._conn.execute("PRAGMA journal_mode=DELETE")
        except sqlite3.OperationalError:
            pass
        self._closed = True
        self._conn.close()

    def __enter__(self):
        return self

    def __exit__(self, exc_type, exc, tb):
        if not self._closed:
            status = ExitStatus.OK if exc_type is None else ExitStatus.ERROR
            reason = "finished" if exc_type is None else f"{exc_type.__name__}: {exc}"
            self.close(status, reason, {"traces": self.traces_written})
