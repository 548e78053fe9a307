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
    bytes and their byte order come back exactly, and their CRC-32), one row of
    parameters per trace, alerts with their acknowledge time, and events
    (:class:`EventKind`: range changes, reconnects, operator marks, method changes,
    faults, ...).
``session_stop`` (one row, written last)
    stop time, exit status (:class:`tankside.monitor.outcome.ExitStatus`), reason and
    counts. A file without it was not stopped cleanly (killed, crashed, power lost, or
    still being written).

SQLite keeps any value in any column, so the reader checks each cell it reads
(:mod:`tankside.monitor.record.cells`): numbers where numbers belong, codes as a BLOB
whose length is ``n`` samples of their dtype, text as UTF-8 without NUL, and every
``*_json`` column strict JSON of its kind (an object, or a list for ``actions_json`` and
``shape_json``).

Float columns are SQLite REAL (IEEE 754 binary64), so every finite float64 and the
infinities round-trip bit for bit. SQLite stores NaN as NULL; a NULL in a result
column of a converted trace therefore reads back as NaN. SQLite also folds -0.0 to
0.0, which compares equal.
"""

from __future__ import annotations

import enum

from ..acoustics.converter import RESULT_FIELDS

FORMAT_TAG = "tankside-session"
LAYOUT_VERSION = 4
"""Layout of the files this tankside writes (``session_start.layout_version``); the
reader reads every layout up to it:

1. The first layout.
2. ``traces.codes_crc32``: the CRC-32 (:func:`zlib.crc32`, as an unsigned 32-bit
   integer) of the codes' bytes, checked whenever a trace is read, so that a bit flipped
   on a disk or in a copy is reported instead of exported or replayed.
3. The bench state with each trace: tables ``trace_positions`` (every stage axis, mm)
   and ``trace_water`` (the thermometer reading, its age and which temperature the
   conversion used); see the block "layout 3: bench state" at the end of this module.
4. Scans: tables ``trace_points`` (the scan point a trace was acquired at, and whether
   it counts towards that point) and ``scan_points`` (one row per completed point: its
   target, measured position and combined results), and the plan in the metadata
   (``scan_plan``); see the block "layout 4: scans" at the end of this module.
   A second digitiser channel with each trace, raw: table ``trace_channels``; see the
   block "layout 4: monitor channel" at the end of this module.
"""

#: The first layout whose traces carry ``codes_crc32``.
CHECKSUM_LAYOUT = 2

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
META_SCAN_PLAN = "scan_plan"                  # dict, the scan plan (ScanPlan.as_dict())

REQUIRED_FOR_REPLAY = (META_CALIBRATION_TEXT, META_LOADING, META_SETTINGS, META_TEMPERATURE_C)

#: The JSON kinds (Python types) the value of each standard key must be when it is not
#: null; the reader refuses any other (other keys may hold any JSON).
METADATA_KINDS: dict[str, tuple[type, ...]] = {
    META_TOOL_VERSION: (str,),
    META_CONFIGURATION: (dict,),
    META_INSTRUMENTS: (dict,),
    META_CALIBRATION_TEXT: (str,),
    META_CALIBRATION_SHA256: (str,),
    META_CALIBRATION_SOURCE: (str,),
    META_LOADING: (dict,),
    META_SETTINGS: (dict,),
    META_TEMPERATURE_C: (int, float),
    META_START_TIME_S: (int, float),
    META_REPLAY_OF: (dict,),
    META_PROTECTION_WARNINGS: (list,),
    META_SCAN_PLAN: (dict,),
}

# -- event kinds ---------------------------------------------------------------------


class EventKind(enum.StrEnum):
    """Kinds of the rows of ``events`` that tankside writes (the file allows free text).

    An event's ``seq`` is the trace it concerns, or None; its ``detail`` is a JSON object
    whose keys are listed for each kind. Actions asked for by an alert rule add the
    rule's ``rule`` and ``seq`` to the detail.
    """

    RANGE_CHANGE = "range-change"
    """The digitiser range was stepped: ``done``, ``from_v``, ``to_v``, then ``before_seq``
    (the first trace at the new range) or ``error``."""
    RECONNECT = "reconnect"
    """The digitiser is back after a lost connection: ``attempts``, ``after_s``, ``cause``,
    ``identity``, ``next_seq``."""
    CONNECTION_LOST = "connection-lost"
    """The digitiser's connection was lost (a :attr:`FAULT` of that kind, recorded under
    its own name): ``kind``, ``message``, ``at_seq``."""
    MARK = "mark"
    """An operator mark: ``note``."""
    METHOD_CHANGE = "method-change"
    """The conversion method was switched: ``from``, ``to``; ``seq`` is the first trace
    converted with the new method (replay follows these; one without seq applies from
    its time_s on)."""
    FAULT = "fault"
    """An instrument misbehaved and the session went on: ``kind`` (a :class:`FaultKind`),
    ``message``, ``at_seq``."""
    SAFE_OFF = "safe-off"
    """The generator output was switched off for a rule: ``done``, then ``attempts`` and
    ``before_seq``; or, for each attempt that failed, ``attempt``, ``error``, ``after_s``
    (``why`` when there is no generator)."""
    DRIVE_ON = "drive-on"
    """The generator output is on: ``output_on``, ``cause`` (``start``, ``generator`` when
    switched at the instrument, or the operator's action: the dashboard's confirmed key,
    ``--drive-on``, the demo), ``before_seq``."""
    DRIVE_ON_FAILED = "drive-on-failed"
    """An operator's switch-on did not take: ``cause``, ``error``."""
    DRIVE_OFF_FAILED = "drive-off-failed"
    """A switch-off (operator's, or at the end of the session) was not confirmed:
    ``done`` (false), ``attempt``, ``error``, ``cause``, ``after_s``."""
    DRIVE_OFF = "drive-off"
    """The generator output is off: ``output_on``, ``cause`` (``start``, ``safe-off``,
    ``generator``, ``end of session``, an operator's action), ``before_seq``."""
    NO_TRIGGER = "no-trigger"
    """The digitiser did not trigger within the trigger timeout: ``message``, ``timeout_s``."""
    FIGURES_RESET = "figures-reset"
    """The running figures were started afresh by the operator (the dashboard's key):
    ``cause``. Method and range changes restart them too, recorded under their own kinds."""
    RESYNC = "resync"
    """The digitiser's link was brought back in step after a bad reply: ``after`` (the
    error's type name)."""
    # -- the serial instruments (stage, thermometer; layout 3) ----------------------
    INSTRUMENT_LOST = "instrument-lost"
    """The stage or the thermometer stopped answering (acquisition goes on):
    ``instrument`` (``stage`` or ``thermometer``), ``message``, ``at_seq``."""
    INSTRUMENT_BACK = "instrument-back"
    """The stage or the thermometer answers again: ``instrument``, ``attempts``,
    ``after_s``, ``identity``."""
    STAGE_MOVE = "stage-move"
    """A move was sent to the stage: ``target_mm`` (axis -> mm), ``done`` (true when sent),
    ``error`` when it could not be."""
    STAGE_STOP = "stage-stop"
    """The stage was told to stop: ``cause`` (``end of session``, ``safe-off``, ``stage
    error``), ``done``, ``error`` when it could not be."""
    WATER_SOURCE = "water-source"
    """The conversion's water temperature changed source (a :class:`WaterSource`):
    ``source``, ``reading_c`` and ``age_s`` (null when none), ``max_age_s``,
    ``temperature_c`` (the one used), ``from_seq``."""
    # -- scans (layout 4) -------------------------------------------------------------
    SCAN_START = "scan-start"
    """A scan began: ``points`` (how many in the plan), ``kind``, ``first_point``,
    ``passive`` (true: tankside never moves the stage; another program does)."""
    SCAN_RESUMED = "scan-resumed"
    """An interrupted scan continues in the same file: ``first_point`` (the first point
    not completed), ``completed`` (points already done), ``previous_stop`` (the stop
    record the file had, or null when it had none: killed, crashed, power lost),
    ``first_seq`` (the first trace recorded after resuming)."""
    SCAN_PAUSED = "scan-paused"
    """The scan waits: ``point``, ``why`` (stage lost, stage did not arrive, drive off,
    ...). The stage is not moved until the cause is gone."""
    SCAN_CONTINUED = "scan-continued"
    """A paused scan goes on: ``point``, ``after_s``."""
    SCAN_POINT_FAILED = "scan-point-failed"
    """A point could not be measured and is recorded as failed: ``point``, ``why``."""
    SCAN_END = "scan-end"
    """The scan ended: ``completed`` (points done or failed), ``points``, ``why``
    (``complete``, or why it stopped early)."""


class FaultKind(enum.StrEnum):
    """The ``kind`` in the detail of a :attr:`EventKind.FAULT` event."""

    MALFORMED_REPLY = "malformed-reply"
    """A digitiser reply that does not parse."""
    STALLED = "stalled"
    """No complete digitiser reply within its timeout."""
    CONNECTION_LOST = "connection-lost"
    """The digitiser's transport closed (recorded as :attr:`EventKind.CONNECTION_LOST`)."""
    INSTRUMENT_ERROR = "instrument-error"
    """Any other digitiser error (one in its error queue, a refused setting)."""
    MONITOR_CHANNEL = "monitor-channel"
    """The digitiser's monitor channel of one trace could not be fetched (``cause``: the
    fault kind of the error); the hydrophone's trace was kept, without that channel."""
    CONFIGURATION = "configuration"
    """The digitiser's profile does not describe it (the full scale its volts per code and
    rails make disagrees with the range by more than 5 %); given once a session."""
    GENERATOR_QUERY = "generator-query"
    """The generator did not say whether its output is on (state now unknown)."""
    GENERATOR_THREAD = "generator-thread"
    """The generator's thread met an unexpected error (a bug); the session went on."""
    STAGE_ERROR = "stage-error"
    """The stage reported an error or sent a reply that does not parse; it was told to
    stop and the session went on."""
    THERMOMETER_REPLY = "thermometer-reply"
    """A thermometer reply that does not parse (recorded once until a good one)."""
    SERIAL_THREAD = "serial-thread"
    """The stage's or thermometer's thread met an unexpected error (a bug); the session
    went on."""


# -- result columns: one per field of a trace's result, declared with its unit and dtype
# in tankside.monitor.acoustics.converter.RESULT_FIELDS ------------------------------------
_SQL_KINDS = {"float64": "REAL", "bool": "BOOL", "str": "TEXT"}
RESULT_COLUMNS: tuple[tuple[str, str], ...] = tuple(
    (f.name, _SQL_KINDS[f.dtype]) for f in RESULT_FIELDS)
RESULT_NAMES = tuple(name for name, _ in RESULT_COLUMNS)
RESULT_UNITS = {f.name: f.unit for f in RESULT_FIELDS}

# Flags with their own column; any other flag goes to flags_json.
FLAG_COLUMNS = ("clipped", "range_changed")

# Column order of the traces and results tables.
TRACE_COLUMNS = ("seq", "time_s", "data_format", "dtype", "n", "codes", "codes_crc32",
                 "volts_per_code", "offset_v", "dt_s", "t0_s", "range_v", "code_min",
                 "code_max", "clipped_low", "clipped_high", "state_json")
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
    ("_m", "m"),
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
        codes_crc32 INTEGER NOT NULL,
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

# Static descriptors: (name, table, units, dtype); a trace column's units come from
# units_of(), a result's from its field. The codes descriptor (dtype and shape of the
# first trace) is written with the first trace.
STATIC_DESCRIPTORS = (
    [(name, "traces", units_of(name), dtype) for name, dtype in (
        ("time_s", "float64"), ("volts_per_code", "float64"), ("offset_v", "float64"),
        ("dt_s", "float64"), ("t0_s", "float64"), ("range_v", "float64"),
        ("code_min", "float64"), ("code_max", "float64"), ("clipped_low", "int64"),
        ("clipped_high", "int64"), ("codes_crc32", "uint32"))]
    + [(f.name, "results", f.unit, f.dtype) for f in RESULT_FIELDS]
    + [(name, "results", units_of(name), "bool") for name in FLAG_COLUMNS]
)


# == layout 3: bench state (stage position, water reading) with each trace ==============
# Kept apart from the tables above so that other layout-3 additions merge beside it.

#: The first layout whose files hold ``trace_positions`` and ``trace_water``.
BENCH_STATE_LAYOUT = 3


class WaterSource(enum.StrEnum):
    """Where the water temperature of a trace's conversion came from (``trace_water.source``)."""

    THERMOMETER = "thermometer"
    """The thermometer's latest reading, no older than ``[thermometer] max_age_s``."""
    BENCH = "bench"
    """No reading, or one older than ``max_age_s``: the bench file's ``[water]
    temperature_c`` (the reading, if any, is still recorded with its age)."""


BENCH_STATE_DDL = [
    # one row per stage axis of a trace acquired with a stage whose position was known
    """CREATE TABLE trace_positions (
        seq INTEGER NOT NULL REFERENCES traces(seq),
        axis TEXT NOT NULL,
        position_mm REAL NOT NULL,
        PRIMARY KEY (seq, axis))""",
    # one row per trace acquired with a thermometer configured
    """CREATE TABLE trace_water (
        seq INTEGER PRIMARY KEY REFERENCES traces(seq),
        water_reading_c REAL,
        water_reading_age_s REAL,
        water_source TEXT NOT NULL)""",
]
BENCH_STATE_DESCRIPTORS = [
    ("position_mm", "trace_positions", "mm", "float64"),
    ("water_reading_c", "trace_water", "degC", "float64"),
    ("water_reading_age_s", "trace_water", "s", "float64"),
    ("water_source", "trace_water", "", "str"),
]
DDL += BENCH_STATE_DDL
STATIC_DESCRIPTORS += BENCH_STATE_DESCRIPTORS


# == layout 4: scans ======================================================================

#: The first layout whose files can hold ``trace_points`` and ``scan_points``.
SCAN_LAYOUT = 4


class PointStatus(enum.StrEnum):
    """How a scan point ended (``scan_points.status``)."""

    DONE = "done"
    """Its traces were acquired and combined; the point is mapped."""
    FAILED = "failed"
    """It could not be measured (every trace clipped, say); ``note`` says why. The point
    is completed (a resumed scan does not visit it again) but never mapped as valid."""


SCAN_DDL = [
    # one row per trace acquired while a scan ran at a point (moves and settling: none)
    """CREATE TABLE trace_points (
        seq INTEGER PRIMARY KEY REFERENCES traces(seq),
        point_index INTEGER NOT NULL,
        counted INTEGER NOT NULL,
        why_not TEXT NOT NULL)""",
    # one row per completed point; the primary key keeps a point from being recorded twice
    """CREATE TABLE scan_points (
        point_index INTEGER PRIMARY KEY,
        status TEXT NOT NULL,
        time_s REAL NOT NULL,
        target_json TEXT NOT NULL,
        position_json TEXT NOT NULL,
        counted INTEGER NOT NULL,
        rejected INTEGER NOT NULL,
        first_seq INTEGER,
        last_seq INTEGER,
        resumed INTEGER NOT NULL,
        results_json TEXT NOT NULL,
        note TEXT NOT NULL,
        waveform_json TEXT NOT NULL)""",
]
SCAN_DESCRIPTORS = [
    ("point_index", "trace_points", "", "int64"),
    ("counted", "trace_points", "", "bool"),
    ("why_not", "trace_points", "", "str"),
    ("target_json", "scan_points", "mm", "json"),
    ("position_json", "scan_points", "mm", "json"),
    ("results_json", "scan_points", "", "json"),
    ("waveform_json", "scan_points", "", "json"),
]
DDL += SCAN_DDL
STATIC_DESCRIPTORS += SCAN_DESCRIPTORS


# == layout 4: monitor channel ===========================================================

#: The first layout whose files can hold ``trace_channels`` (a file of layout 4 written
#: before it was added has no such table and reads as one without a monitor channel).
CHANNEL_LAYOUT = 4

#: Columns of ``trace_channels``, in order.
CHANNEL_COLUMNS = ("seq", "channel", "dtype", "n", "codes", "codes_crc32", "volts_per_code",
                   "offset_v", "dt_s", "t0_s", "range_v", "clipped_low", "clipped_high")

CHANNEL_DDL = [
    # one row per trace acquired with a monitor channel that was fetched: its codes as
    # sent (BLOB, numpy dtype string, CRC-32 as in traces), never converted
    """CREATE TABLE trace_channels (
        seq INTEGER NOT NULL REFERENCES traces(seq),
        channel INTEGER NOT NULL,
        dtype TEXT NOT NULL,
        n INTEGER NOT NULL,
        codes BLOB NOT NULL,
        codes_crc32 INTEGER NOT NULL,
        volts_per_code REAL NOT NULL,
        offset_v REAL NOT NULL,
        dt_s REAL NOT NULL,
        t0_s REAL NOT NULL,
        range_v REAL,
        clipped_low INTEGER NOT NULL,
        clipped_high INTEGER NOT NULL,
        PRIMARY KEY (seq, channel))""",
]
# (descriptor names are unique across tables: the channel's carry a prefix)
CHANNEL_DESCRIPTORS = [
    ("channel_number", "trace_channels", "", "int64"),
    ("channel_codes", "trace_channels", "code", "per-row dtype"),
    ("channel_volts_per_code", "trace_channels", "V/code", "float64"),
    ("channel_offset_v", "trace_channels", "V", "float64"),
    ("channel_dt_s", "trace_channels", "s", "float64"),
    ("channel_t0_s", "trace_channels", "s", "float64"),
    ("channel_range_v", "trace_channels", "V", "float64"),
    ("channel_clipped_low", "trace_channels", "", "int64"),
    ("channel_clipped_high", "trace_channels", "", "int64"),
]
DDL += CHANNEL_DDL
STATIC_DESCRIPTORS += CHANNEL_DESCRIPTORS
