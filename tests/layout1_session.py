"""Session files of layout 1, the layout before trace checksums, written with sqlite3
directly as tankside 0.1.0 wrote them (its DDL copied here and frozen), so that tests
show such files still open, export and replay whatever the current store writes."""

from __future__ import annotations

import sqlite3
import uuid

import numpy as np

from tankside.drivers.trace import RawTrace
from tankside.monitor.record.store import strict_json

# The tables of layout 1, verbatim (monitor/record/schema.py DDL at layout_version 1).
LAYOUT_1_DDL = [
    """CREATE TABLE session_start (
        id INTEGER PRIMARY KEY CHECK (id = 1),
        format TEXT NOT NULL,
        layout_version INTEGER NOT NULL,
        session_uid TEXT NOT NULL,
        start_time_s REAL NOT NULL,
        tool_version TEXT NOT NULL)""",
    """CREATE TABLE metadata (
        key TEXT PRIMARY KEY,
        value_json TEXT NOT NULL)""",
    """CREATE TABLE descriptors (
        name TEXT PRIMARY KEY,
        tbl TEXT NOT NULL,
        units TEXT NOT NULL,
        dtype TEXT NOT NULL,
        shape_json TEXT NOT NULL,
        source TEXT NOT NULL)""",
    """CREATE TABLE traces (
        seq INTEGER PRIMARY KEY,
        time_s REAL NOT NULL,
        data_format TEXT NOT NULL,
        dtype TEXT NOT NULL,
        n INTEGER NOT NULL,
        codes BLOB NOT NULL,
        volts_per_code REAL NOT NULL,
        offset_v REAL NOT NULL,
        dt_s REAL NOT NULL,
        t0_s REAL NOT NULL,
        range_v REAL NOT NULL,
        code_min REAL NOT NULL,
        code_max REAL NOT NULL,
        clipped_low INTEGER NOT NULL,
        clipped_high INTEGER NOT NULL,
        state_json TEXT NOT NULL)""",
    """CREATE TABLE results (
        seq INTEGER PRIMARY KEY REFERENCES traces(seq),
        converted INTEGER NOT NULL,
        error TEXT,
        method TEXT,
        peak_compressional_pa REAL,
        peak_rarefactional_pa REAL,
        acoustic_working_frequency_hz REAL,
        pulse_intensity_integral_j_per_m2 REAL,
        pulse_duration_s REAL,
        pulse_average_intensity_w_per_m2 REAL,
        mechanical_index REAL,
        water_temperature_c REAL,
        water_density_kg_per_m3 REAL,
        water_sound_speed_m_per_s REAL,
        narrowband_ok INTEGER,
        narrowband_band_low_hz REAL,
        narrowband_band_high_hz REAL,
        narrowband_max_deviation_db REAL,
        phase_source TEXT,
        clipped INTEGER NOT NULL,
        range_changed INTEGER NOT NULL,
        flags_json TEXT NOT NULL,
        extra_json TEXT NOT NULL)""",
    """CREATE TABLE alerts (
        alert_id INTEGER PRIMARY KEY AUTOINCREMENT,
        time_s REAL NOT NULL,
        rule TEXT NOT NULL,
        severity TEXT NOT NULL,
        message TEXT NOT NULL,
        actions_json TEXT NOT NULL,
        seq INTEGER,
        acknowledged_time_s REAL)""",
    """CREATE TABLE events (
        event_id INTEGER PRIMARY KEY AUTOINCREMENT,
        time_s REAL NOT NULL,
        kind TEXT NOT NULL,
        seq INTEGER,
        detail_json TEXT NOT NULL)""",
    """CREATE TABLE session_stop (
        id INTEGER PRIMARY KEY CHECK (id = 1),
        stop_time_s REAL NOT NULL,
        exit_status TEXT NOT NULL,
        reason TEXT NOT NULL,
        counts_json TEXT NOT NULL)""",
]

# The result columns of layout 1, in order; any other key of a result went to extra_json.
LAYOUT_1_RESULTS = (
    ("method", "TEXT"), ("peak_compressional_pa", "REAL"), ("peak_rarefactional_pa", "REAL"),
    ("acoustic_working_frequency_hz", "REAL"), ("pulse_intensity_integral_j_per_m2", "REAL"),
    ("pulse_duration_s", "REAL"), ("pulse_average_intensity_w_per_m2", "REAL"),
    ("mechanical_index", "REAL"), ("water_temperature_c", "REAL"),
    ("water_density_kg_per_m3", "REAL"), ("water_sound_speed_m_per_s", "REAL"),
    ("narrowband_ok", "BOOL"), ("narrowband_band_low_hz", "REAL"),
    ("narrowband_band_high_hz", "REAL"), ("narrowband_max_deviation_db", "REAL"),
    ("phase_source", "TEXT"))


def _json(value) -> str:
    return strict_json(value)      # strict JSON, NaN as null: as layout 1 wrote it


def _cell(kind: str, value):
    if value is None:
        return None
    if kind == "BOOL":
        return int(bool(value))
    if kind == "REAL":
        value = float(value)
        return None if value != value else value     # NaN is stored as NULL
    return str(value)


def write_layout1_session(path, metadata: dict, traces: list[tuple[RawTrace, dict | None,
                                                                   str | None]]) -> None:
    """A cleanly stopped layout 1 session: ``traces`` holds (raw, result flat() or None,
    error) per trace; ``metadata`` is strict-JSON-able (``session_metadata``'s dict)."""
    conn = sqlite3.connect(path)
    for ddl in LAYOUT_1_DDL:
        conn.execute(ddl)
    conn.execute("INSERT INTO session_start VALUES (1, 'tankside-session', 1, ?, ?, '0.1.0')",
                 (uuid.uuid4().hex, 1.8e9))
    conn.executemany("INSERT INTO metadata VALUES (?, ?)",
                     [(k, _json(v)) for k, v in metadata.items()])
    first = traces[0][0].codes
    conn.execute("INSERT INTO descriptors VALUES ('codes', 'traces', 'code', ?, ?, 'digitiser')",
                 (first.dtype.str, _json([int(first.shape[0])])))
    names = {name for name, _ in LAYOUT_1_RESULTS}
    for raw, result, error in traces:
        codes = np.ascontiguousarray(raw.codes)
        conn.execute("INSERT INTO traces VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)",
                     (raw.seq, raw.time_s, raw.data_format, codes.dtype.str, codes.shape[0],
                      codes.tobytes(), raw.volts_per_code, raw.offset_v, raw.dt_s, raw.t0_s,
                      raw.range_v, raw.code_min, raw.code_max, raw.clipped_low,
                      raw.clipped_high, _json(raw.state)))
        values = [_cell(kind, (result or {}).get(name)) for name, kind in LAYOUT_1_RESULTS]
        extra = {k: v for k, v in (result or {}).items() if k not in names}
        conn.execute(f"INSERT INTO results VALUES ({','.join('?' * (len(values) + 7))})",
                     (raw.seq, result is not None, error, *values, raw.clipped > 0, False,
                      "{}", _json(extra)))
    conn.execute("INSERT INTO events (time_s, kind, seq, detail_json) VALUES (?, 'mark', NULL, ?)",
                 (1.8e9 + 1, _json({"note": "layout 1"})))
    conn.execute("INSERT INTO session_stop VALUES (1, ?, 'completed', 'trace count reached', ?)",
                 (1.8e9 + 2, _json({"traces": len(traces)})))
    conn.commit()
    conn.close()
