"""Layout of a tankside session file (SQLite), and the names the pipeline writes into it.

A session file is a run record in five parts:

``session_start`` (one row)
    format tag, layout version, a random session id, start time and tool version.
``metadata`` (key -> JSON value)
    everything needed to reproduce the run: the full configuration, instrument
    identities, the calibration file verbatim with its sha256, the electrical loading,
    the conversion settings and the water temperature. Keys are the ``META_*`` names
    below; :func:`tankside.monitor.record.store.session_metadata` builds the dict.
    This and every other ``*_json`` column is strict JSON: a NaN or infinity in a
    recorded value is written as null.
``descriptors`` (one row per recorded quantity)
    units, dtype, shape and source of each column of ``traces`` and ``results``.
``traces``, ``results``, ``alerts``, ``events``
    one row per trace as sent (codes as a BLOB with their numpy dtype string, so the
    bytes and their byte order come back exactly), one row of parameters per trace,
    alerts with their acknowledge time, and events (range changes, reconnects,
    operator marks, method changes, faults).
``session_stop`` (one row, written last)
    stop time, exit status, reason and counts. A file without it was not stopped
    cleanly (killed, crashed, power lost, or still being written).

Float columns are SQLite REAL (IEEE 754 binary64), so every finite float64 and the
infinities round-trip bit for bit. SQLite stores NaN as NULL; a NULL in a result
column of a converted trace therefore reads back as NaN. SQLite also folds -0.0 to
0.0, which compares equal.
"""

from __future__ import annotations

FORMAT_TAG = "tankside-session"
LAYOUT_VERSION = 1

# -- metadata keys (values are JSON) ----------------------------------------------------
META_TOOL_VERSION = "tool_version"            # str, tankside version that wrote the file
META_CONFIGURATION = "configuration"          # dict, the full bench configuration in force
META_INSTRUMENTS = "instruments"              # dict name -> {resource, identity, profile, ...}
META_CALIBRATION_TEXT = "calibration_text"    # str, the calibration file verbatim
META_CALIBRATION_SHA256 = "calibration_sha256"  # str, hex sha256 of that file
META_CALIBRATION_SOURCE = "calibration_source"  # str, its file name when loaded
META_LOADING = "loading"                      # dict, Loading.as_dict()
META_SETTINGS = "settings"                    # dict, ConversionSettings.as_dict()
META_TEMPERATURE_C = "temperature_c"          # float, water temperature used, degC
META_START_TIME_S = "start_time_s"            # float, s since the Unix epoch
META_REPLAY_OF = "replay_of"                  # dict, set by replay: source file, id, overrides
META_PROTECTION_WARNINGS = "protection_warnings"  # list of str, the protection the alert
                                                  # settings switch off (empty: none)

REQUIRED_FOR_REPLAY = (META_CALIBRATION_TEXT, META_LOADING, META_SETTINGS, META_TEMPERATURE_C)

# -- event kinds (free text is allowed; these are the ones tankside writes) -------------
# ``seq`` of an event is the trace it concerns, or None. For ``method-change`` it is the
# first trace converted with the new method, and ``detail`` is {"from": old, "to": new}
# (replay follows these; a method-change without seq applies from its time_s on).
# ``range-change`` detail: {"from_v", "to_v", ...}; ``mark``: {"note"}.
EVENT_RANGE_CHANGE = "range-change"
EVENT_RECONNECT = "reconnect"
EVENT_CONNECTION_LOST = "connection-lost"
EVENT_MARK = "mark"
EVENT_METHOD_CHANGE = "method-change"
EVENT_FAULT = "fault"
EVENT_SAFE_OFF = "safe-off"
# ``drive-on`` / ``drive-off``: the generator output changed; detail {"output_on", "cause"}
EVENT_DRIVE_ON = "drive-on"
EVENT_DRIVE_OFF = "drive-off"

# -- result columns, in the order of tankside.monitor.acoustics.converter.RESULT_FIELDS ---------------
RESULT_COLUMNS: tuple[tuple[str, str], ...] = (
    ("method", "TEXT"),
    ("peak_compressional_pa", "REAL"),
    ("peak_rarefactional_pa", "REAL"),
    ("acoustic_working_frequency_hz", "REAL"),
    ("pulse_intensity_integral_j_per_m2", "REAL"),
    ("pulse_duration_s", "REAL"),
    ("pulse_average_intensity_w_per_m2", "REAL"),
    ("mechanical_index", "REAL"),
    ("water_temperature_c", "REAL"),
    ("water_density_kg_per_m3", "REAL"),
    ("water_sound_speed_m_per_s", "REAL"),
    ("narrowband_ok", "BOOL"),
    ("narrowband_band_low_hz", "REAL"),
    ("narrowband_band_high_hz", "REAL"),
    ("narrowband_max_deviation_db", "REAL"),
    ("phase_source", "TEXT"),
)
RESULT_NAMES = tuple(name for name, _ in RESULT_COLUMNS)

# Flags with their own column; any other flag goes to flags_json.
FLAG_COLUMNS = ("clipped", "range_changed")

# Column order of the traces and results tables.
TRACE_COLUMNS = ("seq", "time_s", "data_format", "dtype", "n", "codes", "volts_per_code",
                 "offset_v", "dt_s", "t0_s", "range_v", "code_min", "code_max",
                 "clipped_low", "clipped_high", "state_json")
RESULT_ROW_COLUMNS = ("seq", "converted", "error", *RESULT_NAMES, *FLAG_COLUMNS,
                      "flags_json", "extra_json")
BOOL_RESULTS = frozenset(name for name, kind in RESULT_COLUMNS if kind == "BOOL")
REAL_RESULTS = frozenset(name for name, kind in RESULT_COLUMNS if kind == "REAL")

# Unit suffixes of the house naming rule, longest first.
_SUFFIX_UNITS = (
    ("_j_per_m2", "J/m^2"),
    ("_w_per_m2", "W/m^2"),
    ("_kg_per_m3", "kg/m^3"),
    ("_m_per_s", "m/s"),
    ("_v_per_pa", "V/Pa"),
    ("_per_code", "V/code"),
    ("_ohm", "ohm"),
    ("_db", "dB"),
    ("_hz", "Hz"),
    ("_pa", "Pa"),
    ("_s", "s"),
    ("_v", "V"),
    ("_c", "degC"),
    ("_f", "F"),
)


def units_of(name: str) -> str:
    """Units of a quantity from its name's suffix (``"peak_rarefactional_pa"`` -> ``"Pa"``).

    Returns ``""`` for dimensionless or non-numeric quantities (mechanical index, flags).
    """
    if name == "volts_per_code":
        return "V/code"
    if name in ("code_min", "code_max", "codes"):
        return "code"
    for suffix, units in _SUFFIX_UNITS:
        if name.endswith(suffix):
            return units
    return ""


def _sql_type(kind: str) -> str:
    return "INTEGER" if kind == "BOOL" else kind


DDL = [
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
    "CREATE TABLE results (\n        seq INTEGER PRIMARY KEY REFERENCES traces(seq),\n"
    "        converted INTEGER NOT NULL,\n        error TEXT,\n"
    + "".join(f"        {name} {_sql_type(kind)},\n" for name, kind in RESULT_COLUMNS)
    + "        clipped INTEGER NOT NULL,\n        range_changed INTEGER NOT NULL,\n"
    "        flags_json TEXT NOT NULL,\n        extra_json TEXT NOT NULL)",
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

# Static descriptors: (name, table, dtype). Units come from units_of(); the codes
# descriptor (dtype and shape of the first trace) is written with the first trace.
STATIC_DESCRIPTORS = (
    [("time_s", "traces", "float64"), ("volts_per_code", "traces", "float64"),
     ("offset_v", "traces", "float64"), ("dt_s", "traces", "float64"),
     ("t0_s", "traces", "float64"), ("range_v", "traces", "float64"),
     ("code_min", "traces", "float64"), ("code_max", "traces", "float64"),
     ("clipped_low", "traces", "int64"), ("clipped_high", "traces", "int64")]
    + [(name, "results", {"TEXT": "str", "BOOL": "bool", "REAL": "float64"}[kind])
       for name, kind in RESULT_COLUMNS]
    + [("clipped", "results", "bool"), ("range_changed", "results", "bool")]
)
