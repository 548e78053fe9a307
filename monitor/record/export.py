"""Export a stored session: results CSV, one trace as CSV, the calibration file, HDF5.

Results CSV
    One row per trace: ``seq``, ``time_s`` (s since the Unix epoch), the result fields
    under the names of ``convert --json`` flattened (the names of
    :data:`tankside.monitor.acoustics.converter.RESULT_FIELDS`), then
    ``converted``, ``clipped``, ``range_changed`` and ``error``; then, in a session that
    recorded them (layout 3), ``position_<axis>_mm`` for every stage axis (empty where a
    trace has no position), and ``water_reading_c``, ``water_reading_age_s`` and
    ``water_source`` (``thermometer`` or ``bench``: which temperature the conversion
    used, itself in ``water_temperature_c``); then, in a session with a scan (layout 4),
    ``point_index``, ``counted`` and ``why_not``: the scan point the trace was acquired
    at, whether it counts towards that point and why not (all three empty for a trace
    acquired between points: moving, settling). Floats are written
    with ``repr`` (shortest text that reads back to the same float64); booleans as
    ``true``/``false``; a field without a value (conversion failed) is empty.

Map CSV (a session with a scan)
    One row per completed scan point, by index: ``point_index``, ``status`` (``done`` or
    ``failed``), ``time_s`` (when it was completed), ``target_<axis>_mm`` and then
    ``position_<axis>_mm`` (the mean stage reading of its counted traces) for every axis
    (sorted; empty where a point has none), ``counted``, ``rejected``, ``first_seq``,
    ``last_seq`` (empty when none), ``resumed``, then ``mean_<name>`` and
    ``spread_<name>`` (sample standard deviation) of every combined result
    (:data:`~tankside.monitor.record.scanpoints.COMBINED_RESULTS`; the name keeps its unit
    suffix, so ``mean_peak_rarefactional_pa`` is in Pa; empty where the point has no
    value, a failed point has none), and ``note``; for a scan whose plan combines
    ``mean-waveform``, then ``waveform_<name>``: the results of each point's mean
    waveform, converted once.

Trace CSV
    ``time_s,voltage_v``, the form ``tankside convert`` reads, written by
    :func:`tankside.monitor.record.tracefile.write_trace`: sample times relative to the trigger
    and volts (``codes * volts_per_code + offset_v``), with ``#`` comment lines naming
    the session, the trace and its exact time step. With a channel given
    (``export --trace SEQ --channel N``), the trace's channel N: the hydrophone's (as
    without one) or the monitor channel recorded with it, in the same form, never
    converted; a channel the trace does not record is an error.

Calibration
    The recorded calibration file, verbatim (a UTF-8 byte-order mark is restored when
    that is what the recorded sha256 says the original had).

HDF5 layout (``format`` attribute ``"tankside-session-export"``, ``layout_version`` 1)
    ``/``                    attributes: format, layout_version, source_file,
                             session_uid, tool_version, start_time_s, stopped_cleanly
    ``/metadata``            one attribute per metadata key, JSON text; the dataset
                             ``calibration_text`` (string) with attribute ``sha256``
    ``/traces/codes``        the codes exactly as sent, shape (N, n) when every trace
                             has the same length and dtype; otherwise 1-D, all traces
                             end to end in a common dtype that holds every code exactly,
                             with ``/traces/code_start`` and ``/traces/code_count``
    ``/traces/<column>``     one 1-D dataset per trace column, length N: seq, time_s,
                             volts_per_code, offset_v, dt_s, t0_s, range_v, code_min,
                             code_max, clipped_low, clipped_high, dtype, data_format,
                             state_json, and codes_crc32 (the CRC-32 of each trace's codes
                             as the session recorded and the export checked it; -1 for
                             a session of layout 1, which records none)
    ``/results/<field>``     one 1-D dataset per result field plus converted, clipped,
                             range_changed and error; ``narrowband_ok`` is int8
                             (1 true, 0 false, -1 no result); NaN for a missing number
    ``/alerts/<column>``     alert_id, time_s, rule, severity, message, actions_json,
                             seq (-1: none), acknowledged_time_s (NaN: not acknowledged)
    ``/events/<column>``     event_id, time_s, kind, seq (-1: none), detail_json
    ``/stop``                attributes stop_time_s, exit_status, reason, counts_json
                             (absent when the session was not stopped cleanly)
    ``/monitor``             only in a session whose traces record a monitor channel
                             (table ``trace_channels``), one entry per trace, in the
                             order of ``/traces``: ``volts`` shape (N, n) float64 (V, as
                             sent times its scale plus its offset, never converted; NaN
                             past a trace's sample_count, and the whole row for a trace
                             without its monitor channel), ``sample_count`` (0: none),
                             ``channel`` (-1: none), ``volts_per_code``, ``offset_v``,
                             ``dt_s``, ``t0_s``, ``range_v`` (NaN: none or not set),
                             ``clipped_low``, ``clipped_high`` (-1: none)
    ``/bench/axes``          the stage axes (strings; empty without a stage)
    ``/bench/position_mm``   shape (N, axes), mm, NaN where a trace has no position
    ``/bench/water_*``       water_reading_c (degC), water_reading_age_s (s), NaN where
                             none; water_source ("thermometer", "bench", "" without one)
    ``/results/point_index`` in a session with a scan: each trace's scan point (-1 for a
                             trace between points), ``counted`` (int8: 1, 0, -1 between
                             points) and ``why_not`` (string, "" when counted or between)
    ``/scan``                in a session with a scan; attributes kind (the plan's, ""
                             when unknown), points_planned (-1 when the plan lists none),
                             points_completed, axes, grid_from ("plan": the grid covers
                             every planned point; "completed points")
    ``/scan/points/<column>`` one 1-D dataset per column of the map CSV, one entry per
                             completed point: point_index, status, time_s,
                             target_<axis>_mm, position_<axis>_mm (NaN: none), counted,
                             rejected, first_seq, last_seq (-1: none), resumed (int8),
                             note, mean_<name> and spread_<name> (NaN: none) and
                             n_<name> (values combined, 0: none); in a scan whose
                             plan combines "mean-waveform", waveform_<name> (the mean
                             waveform's result, NaN: none)
    ``/scan/grid``           when the targets lie on a grid (a line, raster, volume):
                             attributes axes (grid dimension k is axis axes[k], the fast
                             axis first) and fixed_<axis>_mm for the axes that do not vary;
                             ``<axis>_mm``, each axis's sorted coordinates (mm), an HDF5
                             dimension scale attached to dimension k of every dataset
                             below; ``point_index`` (int64, -1 where no planned point),
                             ``done`` (int8: 1 done, 0 failed, -1 not completed or no
                             point), ``mean_<name>`` and ``spread_<name>`` (float64, NaN
                             where no point, a failed point, or no value)
    ``/scan/beam``           the ``beam`` figures of the last ``scan-end`` event, when it
                             has them: one attribute per figure (numbers float64, text as
                             strings, null as NaN), a group per nested object, and the
                             whole as JSON text in the attribute ``beam_json``

Every numeric dataset carries a ``units`` attribute (SI; ``""`` when dimensionless).
"""

from __future__ import annotations

import csv
import hashlib
import math
import os
import re
from collections.abc import Iterator
from contextlib import contextmanager
from typing import Any

import numpy as np

from ..errors import ConfigError, OutputFileError, SessionValueError
from .benchstate import TraceBench
from .h5data import h5py_module as _h5
from .h5data import number_dataset as _numbers
from .h5data import string_dataset as _strings
from .outputs import GuardedFile, describe_os_error, output_file
from .scanexport import has_scan, no_scan_error, scan_export, write_scan_group
from .scanpoints import COMBINED_RESULTS
from .schema import (
    META_CALIBRATION_SHA256,
    RESULT_COLUMNS,
    RESULT_NAMES,
    RESULT_UNITS,
)
from .steps import StepsFactory, silent
from .store import SessionReader, strict_json

__all__ = ["export_results_csv", "export_trace_csv", "export_calibration", "export_hdf5",
           "export_map_csv", "RESULTS_CSV_COLUMNS", "POINT_CSV_COLUMNS", "MAP_COUNT_COLUMNS",
           "MAP_RESULT_COLUMNS"]

RESULTS_CSV_COLUMNS = ("seq", "time_s", *RESULT_NAMES, "converted", "clipped",
                       "range_changed", "error")
#: The per-trace scan columns of the results CSV (a session with a scan).
POINT_CSV_COLUMNS = ("point_index", "counted", "why_not")
#: The map CSV's columns after the positions; then MAP_RESULT_COLUMNS, then ``note``.
MAP_COUNT_COLUMNS = ("counted", "rejected", "first_seq", "last_seq", "resumed")
MAP_RESULT_COLUMNS = tuple(f"{stat}_{name}" for name in COMBINED_RESULTS
                           for stat in ("mean", "spread"))
_BOM = "\ufeff"


def _cell(value) -> str:
    if value is None:
        return ""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, float):
        return repr(value)
    return str(value)


def export_results_csv(reader: SessionReader, out, *, progress: StepsFactory = silent) -> int:
    """Write the results CSV; returns the number of rows. Like every export, the file is
    written under a temporary name and appears under ``out`` only when complete
    (:func:`~tankside.monitor.record.outputs.output_file`)."""
    rows = 0
    axes = reader.stage_axes()
    water = reader.has_water_readings()
    points = reader.trace_points() if has_scan(reader) else None
    bench_columns = (*(f"position_{axis}_mm" for axis in axes),
                     *(_WATER_COLUMNS if water else ()))
    point_columns = POINT_CSV_COLUMNS if points is not None else ()
    with output_file(out) as tmp, open(tmp, "w", newline="", encoding="utf-8") as fh, \
            progress(reader.trace_count(), "results") as bar:
        writer = csv.writer(fh, lineterminator="\n")
        writer.writerow((*RESULTS_CSV_COLUMNS, *bench_columns, *point_columns))
        for r in reader.iter_results():
            if not r["converted"]:
                r = {**r, **{name: None for name in RESULT_NAMES}}
            cells = [_cell(r.get(c)) for c in RESULTS_CSV_COLUMNS]
            if bench_columns:
                cells += _bench_cells(r["bench"], axes, water)
            if points is not None:
                at = points.get(r["seq"])
                cells += ["", "", ""] if at is None else [_cell(v) for v in at]
            writer.writerow(cells)
            rows += 1
            bar.update()
    return rows


_WATER_COLUMNS = ("water_reading_c", "water_reading_age_s", "water_source")


def _bench_cells(bench: TraceBench | None, axes: tuple[str, ...], water: bool) -> list[str]:
    positions = {} if bench is None else bench.positions_mm
    cells = [_cell(positions.get(axis)) for axis in axes]
    if water:
        cells += ([""] * 3 if bench is None else
                  [_cell(bench.water_reading_c), _cell(bench.water_reading_age_s),
                   _cell(None if bench.water_source is None else str(bench.water_source))])
    return cells


def export_map_csv(reader: SessionReader, out) -> int:
    """Write the map CSV (one row per completed scan point; the module docstring lists
    its columns); returns the number of rows.

    Raises
    ------
    SessionFileError
        The session ran no scan (nothing is written).
    """
    scan = scan_export(reader)
    if scan is None:
        raise no_scan_error(reader, "--map")
    # a mean-waveform scan: the results of each point's mean waveform, converted once
    waveform = any(p.waveform for p in scan.points)
    header = ("point_index", "status", "time_s",
              *(f"target_{axis}_mm" for axis in scan.axes),
              *(f"position_{axis}_mm" for axis in scan.axes),
              *MAP_COUNT_COLUMNS, *MAP_RESULT_COLUMNS, "note",
              *((f"waveform_{name}" for name in COMBINED_RESULTS) if waveform else ()))
    with output_file(out) as tmp, open(tmp, "w", newline="", encoding="utf-8") as fh:
        writer = csv.writer(fh, lineterminator="\n")
        writer.writerow(header)
        for p in scan.points:
            cells = [_cell(p.index), str(p.status), _cell(p.time_s)]
            cells += [_cell(p.target_mm.get(axis)) for axis in scan.axes]
            cells += [_cell(p.position_mm.get(axis)) for axis in scan.axes]
            cells += [_cell(v) for v in (p.counted, p.rejected, p.first_seq, p.last_seq,
                                         p.resumed)]
            for name in COMBINED_RESULTS:
                c = p.results.get(name)
                cells += ["", ""] if c is None else [_cell(c.mean), _cell(c.spread)]
            cells.append(p.note)
            if waveform:
                cells += [_cell(p.waveform.get(name)) for name in COMBINED_RESULTS]
            writer.writerow(cells)
    return len(scan.points)


def trace_channels(raw) -> dict[int, str]:
    """The channels a stored trace records: number -> ``"hydrophone"`` or ``"monitor"``
    (the hydrophone's number from the trace's state, 1 when it records none)."""
    hydrophone = raw.state.get("channel")
    out = {hydrophone if isinstance(hydrophone, int) else 1: "hydrophone"}
    if raw.monitor is not None:
        out[raw.monitor.channel] = "monitor"
    return out


def trace_channel(reader: SessionReader, seq: int, channel: int | None):
    """``(raw trace, its monitor channel or None)``: the trace ``seq`` and, when
    ``channel`` names its monitor channel, that channel; None for the hydrophone's.

    Raises
    ------
    SessionFileError
        No trace ``seq``.
    ConfigError
        The trace records no channel ``channel``.
    """
    raw = reader.trace(seq).raw
    recorded = trace_channels(raw)
    if channel is not None and channel not in recorded:
        have = " and ".join(f"{n} ({what})" for n, what in sorted(recorded.items()))
        raise ConfigError(f"{reader.path}: trace {seq} records channel {have}; "
                          f"no channel {channel}")
    if channel is not None and recorded[channel] == "monitor":
        return raw, raw.monitor
    return raw, None


def export_trace_csv(reader: SessionReader, seq: int, out, *,
                     channel: int | None = None) -> int:
    """Write trace ``seq`` in volts as ``time_s,voltage_v``; returns the sample count.

    ``channel`` picks the hydrophone's channel (the default) or the trace's monitor
    channel (:func:`trace_channels`); another is a :class:`ConfigError`.
    """
    from .tracefile import trace_text

    raw, monitor = trace_channel(reader, seq, channel)
    source = raw if monitor is None else monitor
    table = "traces" if monitor is None else "trace_channels"
    for column, value in (("dt_s", source.dt_s), ("t0_s", source.t0_s),
                          ("volts_per_code", source.volts_per_code),
                          ("offset_v", source.offset_v)):
        if not math.isfinite(value) or (column == "dt_s" and not value > 0):
            # a trace file needs real times and volts; the session keeps the value as sent
            raise SessionValueError(str(reader.path), table, f"seq {raw.seq}", column,
                                    f"{value!r} cannot be written as a trace file (expected "
                                    f"a finite number{' > 0' if column == 'dt_s' else ''})")
    if monitor is None:
        what = [f"range {raw.range_v!r} V, {raw.clipped} samples at the rails; codes as "
                "sent are in the session file"]
    else:
        span = "not set" if monitor.range_v is None else f"{monitor.range_v!r} V"
        what = [f"monitor channel {monitor.channel} (raw volts, not converted): range "
                f"{span}, {monitor.clipped_low + monitor.clipped_high} samples at the rails"]
    text = trace_text("time_s,voltage_v", source.volts(), source.dt_s, source.t0_s, comments=[
        f"trace {raw.seq} of session {reader.path.name} ({reader.start['session_uid']})",
        f"acquired at {raw.time_s!r} s since the Unix epoch; dt_s = {source.dt_s!r}", *what])
    with output_file(out) as tmp:
        tmp.write_text(text, encoding="utf-8")
    return raw.n


def export_calibration(reader: SessionReader, out) -> str:
    """Write the recorded calibration file verbatim; returns its sha256 (hex)."""
    text = reader.calibration_text
    data = text.encode("utf-8")
    recorded = reader.metadata.get(META_CALIBRATION_SHA256)
    if recorded and hashlib.sha256(data).hexdigest() != recorded:
        with_bom = (_BOM + text).encode("utf-8")
        if hashlib.sha256(with_bom).hexdigest() == recorded:
            data = with_bom
    with output_file(out) as tmp:
        tmp.write_bytes(data)
    return hashlib.sha256(data).hexdigest()


# -- HDF5 --------------------------------------------------------------------------------
_TRACE_FLOATS = ("time_s", "volts_per_code", "offset_v", "dt_s", "t0_s", "range_v",
                 "code_min", "code_max")
_TRACE_INTS = ("seq", "clipped_low", "clipped_high", "codes_crc32")
_TRACE_STRS = ("dtype", "data_format", "state_json")


def _hdf5_reason(err: BaseException) -> str:
    # HDF5 reports a failed write as an OSError with its errno or, from the library, a
    # RuntimeError whose text holds "errno = N"; both name the temporary file at length.
    code = getattr(err, "errno", None)
    if code is None:
        found = re.search(r"errno = (\d+)", str(err))
        code = int(found.group(1)) if found else None
    if code is not None:
        return describe_os_error(OSError(code, os.strerror(code)))
    return str(err).splitlines()[0][:120] if str(err) else type(err).__name__


@contextmanager
def _hdf5_file(out, tmp) -> Iterator[tuple[Any, GuardedFile]]:
    """``(h5py.File, its GuardedFile)`` writing ``tmp``; a failed write is an
    OutputFileError naming ``out``.

    HDF5 (h5py 3.16.0 with HDF5 2.0.0, measured here) crashes the process at exit, or
    prints errors as objects are freed, when a write to its file failed. So it writes
    through a :class:`~tankside.monitor.record.outputs.GuardedFile`, which never tells it:
    the first failure is kept, the export asks for it between traces, and
    the file is closed with later writes discarded.
    """
    h5py = _h5()
    try:
        raw = open(tmp, "w+b", buffering=0)  # closed below, after h5py has let go
    except OSError as err:
        raise OutputFileError(f"{out}: cannot create the HDF5 file "
                              f"({describe_os_error(err)})") from err
    guarded = GuardedFile(raw)
    try:
        try:
            f = h5py.File(guarded, "w")
        except (OSError, RuntimeError) as err:
            raise OutputFileError(f"{out}: cannot create the HDF5 file "
                                  f"({_hdf5_reason(guarded.failed or err)})") from err
        try:
            yield f, guarded
            guarded.check()
        except BaseException:
            guarded.abandon()      # the file is removed: closing it need write nothing
            _close_quietly(f)
            raise
        try:
            f.close()
        except (OSError, RuntimeError) as err:
            raise OutputFileError(_hdf5_failure(out, guarded.failed or err)) from err
        if guarded.failed is not None:
            raise OutputFileError(_hdf5_failure(out, guarded.failed)) from guarded.failed
    except (OSError, RuntimeError) as err:  # from the block: a write failed
        raise OutputFileError(_hdf5_failure(out, guarded.failed or err)) from err
    finally:
        raw.close()


class _Checked:
    """A progress bar that first checks that the output is still being written."""

    def __init__(self, bar, check):
        self._bar = bar
        self._check = check

    def update(self, steps: int = 1) -> None:
        self._check()
        self._bar.update(steps)


def _hdf5_failure(out, err: BaseException) -> str:
    return (f"{out}: writing the HDF5 file failed ({_hdf5_reason(err)}); nothing written "
            "under that name")


def _close_quietly(f) -> None:
    try:
        f.close()
    except (OSError, RuntimeError):
        pass  # the file is removed; the error that got us here is the one reported


def export_hdf5(reader: SessionReader, out, *, progress: StepsFactory = silent) -> int:
    """Write the whole session to HDF5 (layout in the module docstring); returns N traces."""
    h5py = _h5()
    # Traces committed while the export runs (a session still being recorded) are left
    # out, so that every dataset holds the same traces.
    last = reader.last_seq()
    stop_seq = None if last is None else last + 1
    n_traces = len(reader.seqs(stop_seq))
    layouts = reader.trace_layouts(stop_seq)
    uniform = len(layouts) == 1
    meta = reader.metadata
    stop = reader.stop
    with output_file(out) as tmp, _hdf5_file(out, tmp) as (f, guard), \
            progress(n_traces, "hdf5") as bar:
        f.attrs.update({"format": "tankside-session-export", "layout_version": 1,
                        "source_file": str(reader.path), **{k: reader.start[k] for k in
                        ("session_uid", "tool_version", "start_time_s")},
                        "stopped_cleanly": stop is not None})
        g = f.create_group("metadata")
        for key, value in meta.items():
            g.attrs[key] = strict_json(value)
        if meta.get("calibration_text") is not None:
            ds = g.create_dataset("calibration_text", data=meta["calibration_text"],
                                  dtype=h5py.string_dtype())
            ds.attrs["sha256"] = meta.get(META_CALIBRATION_SHA256) or ""
        monitor = (_MonitorColumns(f.create_group("monitor"), n_traces)
                   if n_traces and reader.has_monitor_channel() else None)
        _write_traces(f.create_group("traces"), reader, n_traces, layouts, uniform,
                      _Checked(bar, guard.check), stop_seq, monitor)
        if monitor is not None:
            monitor.finish()
        scan = scan_export(reader)
        _write_results(f.create_group("results"), reader, stop_seq, scan is not None)
        _write_alerts(f.create_group("alerts"), reader.alerts())
        _write_events(f.create_group("events"), reader.events())
        _write_bench(f.create_group("bench"), reader, stop_seq)
        if scan is not None:
            write_scan_group(f.create_group("scan"), scan)
        if stop is not None:
            s = f.create_group("stop")
            s.attrs.update({"stop_time_s": stop["stop_time_s"], "exit_status": stop["exit_status"],
                            "reason": stop["reason"], "counts_json": strict_json(stop["counts"])})
    return n_traces


def _write_traces(g, reader, n_traces, layouts, uniform, bar, stop_seq, monitor=None):
    starts: list[int] = []      # where each trace's codes begin, when not uniform
    counts: list[int] = []
    if uniform and n_traces:
        dtype_str, n = next(iter(layouts))
        codes = g.create_dataset("codes", shape=(n_traces, n), dtype=np.dtype(dtype_str),
                                 chunks=(1, n))
    else:
        common = np.result_type(*[np.dtype(d) for d, _ in layouts]) if layouts else np.int16
        codes = g.create_dataset("codes", shape=(reader.total_samples(stop_seq),),
                                 dtype=common)
    codes.attrs["units"] = "code"
    cols: dict[str, list[Any]] = {c: [] for c in (*_TRACE_FLOATS, *_TRACE_INTS, *_TRACE_STRS)}
    pos = 0
    for i, stored in enumerate(reader.iter_traces(stop_seq=stop_seq)):
        raw = stored.raw
        if uniform:
            codes[i] = raw.codes
        else:
            codes[pos:pos + raw.n] = raw.codes
            starts.append(pos)
            counts.append(raw.n)
            pos += raw.n
        for c in _TRACE_FLOATS:
            cols[c].append(float(getattr(raw, c)))
        cols["seq"].append(raw.seq)
        cols["clipped_low"].append(raw.clipped_low)
        cols["clipped_high"].append(raw.clipped_high)
        cols["codes_crc32"].append(-1 if stored.codes_crc32 is None else stored.codes_crc32)
        cols["dtype"].append(raw.codes.dtype.str)
        cols["data_format"].append(raw.data_format)
        cols["state_json"].append(strict_json(raw.state))
        if monitor is not None:
            monitor.add(i, raw.monitor)
        bar.update()
    if not uniform:
        _numbers(g, "code_start", starts, np.int64, "")
        _numbers(g, "code_count", counts, np.int64, "")
    for c in _TRACE_FLOATS:
        _numbers(g, c, cols[c], np.float64)
    for c in _TRACE_INTS:
        _numbers(g, c, cols[c], np.int64, "")
    for c in _TRACE_STRS:
        _strings(g, c, cols[c])


class _MonitorColumns:
    """``/monitor`` (module docstring), filled one trace at a time: ``volts`` grows to the
    longest monitor record (NaN beyond a shorter one), so no session is held in memory."""

    _FLOATS = ("volts_per_code", "offset_v", "dt_s", "t0_s", "range_v")
    _INTS = ("sample_count", "channel", "clipped_low", "clipped_high")

    def __init__(self, g, n_traces: int):
        self.g = g
        self.volts = g.create_dataset("volts", shape=(n_traces, 0), maxshape=(n_traces, None),
                                      dtype=np.float64, chunks=(1, 1024), fillvalue=np.nan)
        self.volts.attrs["units"] = "V"
        self.cols: dict[str, list[Any]] = {c: [] for c in (*self._FLOATS, *self._INTS)}

    def add(self, i: int, channel) -> None:
        if channel is None:
            for c in self._FLOATS:
                self.cols[c].append(math.nan)
            for c in self._INTS:
                self.cols[c].append(0 if c == "sample_count" else -1)
            return
        if channel.n > self.volts.shape[1]:
            self.volts.resize(channel.n, axis=1)
        with np.errstate(all="ignore"):     # as sent: a huge scale overflows to inf
            self.volts[i, :channel.n] = channel.volts()
        for c in self._FLOATS:
            value = getattr(channel, c)
            self.cols[c].append(math.nan if value is None else float(value))
        self.cols["sample_count"].append(channel.n)
        self.cols["channel"].append(channel.channel)
        self.cols["clipped_low"].append(channel.clipped_low)
        self.cols["clipped_high"].append(channel.clipped_high)

    def finish(self) -> None:
        for c in self._FLOATS:
            _numbers(self.g, c, self.cols[c], np.float64)
        for c in self._INTS:
            _numbers(self.g, c, self.cols[c], np.int64, "")


def _write_results(g, reader, stop_seq, with_points: bool):
    cols: dict[str, list[Any]] = {c: [] for c in ("seq", *RESULT_NAMES, "converted", "clipped",
                                                  "range_changed", "error")}
    kinds = dict(RESULT_COLUMNS)
    points = reader.trace_points() if with_points else {}
    at_point: tuple[list[int], list[int], list[str]] = ([], [], [])
    for r in reader.iter_results(stop_seq):
        if with_points:
            index, counted, why_not = points.get(r["seq"], (-1, -1, ""))
            at_point[0].append(index)
            at_point[1].append(int(counted))
            at_point[2].append(why_not)
        for c in cols:
            v = r.get(c)
            if c in kinds and kinds[c] == "BOOL":
                v = -1 if (v is None or not r["converted"]) else int(v)
            elif c in kinds and kinds[c] == "TEXT" or c == "error":
                v = "" if v is None else str(v)
            elif c in kinds:
                v = math.nan if v is None else float(v)
            cols[c].append(v)
    for c, values in cols.items():
        if c in ("converted", "clipped", "range_changed"):
            _numbers(g, c, values, bool, "")
        elif kinds.get(c) == "BOOL":
            _numbers(g, c, values, np.int8, "")
        elif kinds.get(c) == "TEXT" or c == "error":
            _strings(g, c, values)
        elif c == "seq":
            _numbers(g, c, values, np.int64, "")
        else:
            _numbers(g, c, values, np.float64, RESULT_UNITS[c])
    if with_points:
        _numbers(g, "point_index", at_point[0], np.int64, "")
        _numbers(g, "counted", at_point[1], np.int8, "")
        _strings(g, "why_not", at_point[2])


def _write_alerts(g, alerts):
    _numbers(g, "alert_id", [a["alert_id"] for a in alerts], np.int64, "")
    _numbers(g, "time_s", [a["time_s"] for a in alerts], np.float64)
    for c in ("rule", "severity", "message"):
        _strings(g, c, [a[c] for a in alerts])
    _strings(g, "actions_json", [strict_json(list(a["actions"])) for a in alerts])
    _numbers(g, "seq", [-1 if a["seq"] is None else a["seq"] for a in alerts], np.int64, "")
    _numbers(g, "acknowledged_time_s", [math.nan if a["acknowledged_time_s"] is None
                                        else a["acknowledged_time_s"] for a in alerts],
             np.float64)


def _write_events(g, events):
    _numbers(g, "event_id", [e["event_id"] for e in events], np.int64, "")
    _numbers(g, "time_s", [e["time_s"] for e in events], np.float64)
    _strings(g, "kind", [e["kind"] for e in events])
    _numbers(g, "seq", [-1 if e["seq"] is None else e["seq"] for e in events], np.int64, "")
    _strings(g, "detail_json", [strict_json(e["detail"]) for e in events])


def _write_bench(g, reader, stop_seq):
    """``/bench``: every trace's stage position and water reading (NaN / "" where none)."""
    axes = reader.stage_axes()
    positions: list[list[float]] = []
    readings: list[float] = []
    ages: list[float] = []
    sources: list[str] = []
    for r in reader.iter_results(stop_seq):
        bench = r["bench"]
        known = {} if bench is None else bench.positions_mm
        positions.append([known.get(axis, math.nan) for axis in axes])
        reading = None if bench is None else bench.water_reading_c
        age = None if bench is None else bench.water_reading_age_s
        readings.append(math.nan if reading is None else reading)
        ages.append(math.nan if age is None else age)
        sources.append("" if bench is None or bench.water_source is None
                       else str(bench.water_source))
    _strings(g, "axes", axes)
    ds = g.create_dataset("position_mm", data=np.array(positions, dtype=np.float64).reshape(
        len(positions), len(axes)))
    ds.attrs["units"] = "mm"
    _numbers(g, "water_reading_c", readings, np.float64, "degC")
    _numbers(g, "water_reading_age_s", ages, np.float64, "s")
    _strings(g, "water_source", sources)

