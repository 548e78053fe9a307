"""Re-run the signal chain on a stored session, into a new session file.

The raw traces are copied exactly as recorded; every result is recomputed with
:class:`tankside.monitor.acoustics.converter.Converter`, built from the calibration text, loading,
conversion settings and water temperature stored in the session (or another
calibration file or method when asked). With the session's own settings the new
results equal the stored ones bit for bit: the same code runs on the same float64
volts (``RawTrace.volts()``), and the store keeps float64 exactly.

What is followed from the record, so that a replay reproduces the live run:

- the water temperature of each converted trace (``water_temperature_c`` in its
  result), falling back to the session's ``temperature_c`` for traces that failed;
- operator method changes: ``method-change`` events whose ``detail`` holds the new
  requested method under ``"method"`` (or ``"to"``); the change applies from the
  event's ``seq`` (the first trace converted with it) or, without a seq, to traces
  acquired at or after the event's time. ``--method`` overrides all of them.

The bench state of each trace (stage position, water reading; layout 3) is copied as
recorded. Events are copied into the new session; alerts are not (they were raised on the old
results). The original file is only ever opened read-only.
"""

from __future__ import annotations

import dataclasses
import math
import os
import time
from dataclasses import dataclass
from pathlib import Path

from .. import __version__
from ..acoustics.settings import Method
from ..errors import ConfigError, SessionFileError, SessionValueError, TanksideError
from ..outcome import ExitStatus
from .outputs import output_file
from .schema import (
    META_CALIBRATION_SHA256,
    META_CALIBRATION_SOURCE,
    META_CALIBRATION_TEXT,
    META_LOADING,
    META_REPLAY_OF,
    META_SETTINGS,
    META_START_TIME_S,
    META_TEMPERATURE_C,
    META_TOOL_VERSION,
    REQUIRED_FOR_REPLAY,
    RESULT_NAMES,
    EventKind,
)
from .steps import StepsFactory, silent
from .store import SessionReader, SessionStore

__all__ = ["ReplaySummary", "build_converter", "conversion_inputs", "replay_session",
           "result_differences"]


@dataclass
class ReplaySummary:
    """What a replay did."""

    out_path: Path
    traces: int
    converted: int
    failed: int
    seconds: float
    differences: int | None = None   # results differing from the source (when checked)
    note: str | None = None          # how the source was read, when not in place


def _metadata_error(source: str, key: str, problem: str) -> SessionValueError:
    return SessionValueError(source, "metadata", f"key {key!r}", "value_json", problem)


def _rebuild(cls, data: dict | None, key: str, source: str):
    """An instance of a frozen settings dataclass from its recorded ``as_dict()``; a
    recorded value it refuses is a SessionValueError naming the metadata key."""
    if data is None:
        return cls()
    if not isinstance(data, dict):
        raise _metadata_error(source, key, f"expected a JSON object, found "
                                           f"{type(data).__name__}")
    try:
        for name in ("from_table", "from_dict"):
            if hasattr(cls, name):
                return getattr(cls, name)(data)
        fields = {f.name: f for f in dataclasses.fields(cls)}
        unknown = sorted(set(data) - set(fields))
        if unknown:
            raise ConfigError(f"settings this tankside does not know: {', '.join(unknown)}")
        kwargs = {}
        for name, value in data.items():
            default = fields[name].default
            if isinstance(value, list) and isinstance(default, tuple):
                value = tuple(value)  # JSON has no tuples
            kwargs[name] = value
        return cls(**kwargs)
    except (TanksideError, TypeError, ValueError, ArithmeticError) as err:
        # a recorded value of the wrong kind (text for a capacitance, say) can fail in
        # the class's own checks with any of these
        raise _metadata_error(source, key, f"not usable ({err})") from err


def conversion_inputs(metadata: dict, *, calibration=None, method: str | None = None,
                      source: str = "the session"):
    """(calibration, loading, settings, temperature_c) that a session's metadata records.

    Parameters
    ----------
    metadata : dict
        ``SessionReader.metadata``.
    calibration : Calibration, optional
        Use this instead of the recorded calibration text.
    method : str, optional
        Override the recorded conversion method.
    source : str
        The session file, for messages.

    Raises
    ------
    SessionFileError
        Something replay needs is not recorded; a SessionValueError when a recorded
        value cannot be used (it names the metadata key).
    """
    from ..acoustics.calibration import parse_calibration
    from ..acoustics.loading import Loading
    from ..acoustics.settings import ConversionSettings

    missing = [key for key in REQUIRED_FOR_REPLAY if metadata.get(key) is None
               and not (key == META_CALIBRATION_TEXT and calibration is not None)]
    if missing:
        raise SessionFileError(f"{source}: the session lacks what replay needs: "
                               f"{', '.join(missing)}")
    if calibration is None:
        # The recorded calibration is the one the session used, checks relaxed or not:
        # replay takes it as it was accepted, so its results stay reproducible.
        text = metadata[META_CALIBRATION_TEXT]
        if not isinstance(text, str):
            raise _metadata_error(source, META_CALIBRATION_TEXT, "expected text")
        label = metadata.get(META_CALIBRATION_SOURCE)
        try:
            calibration = parse_calibration(text, source=label if isinstance(label, str)
                                            and label else "<stored calibration>",
                                            max_step_db=math.inf, check_phase_steps=False)
        except TanksideError as err:
            raise _metadata_error(source, META_CALIBRATION_TEXT,
                                  f"the recorded calibration does not parse: {err}") from err
    loading = _rebuild(Loading, metadata[META_LOADING], META_LOADING, source)
    settings = _rebuild(ConversionSettings, metadata[META_SETTINGS], META_SETTINGS, source)
    if method is not None:
        settings = settings.replace(method=method)
    temperature_c = metadata[META_TEMPERATURE_C]
    if isinstance(temperature_c, bool) or not isinstance(temperature_c, int | float) \
            or not math.isfinite(temperature_c):
        raise _metadata_error(source, META_TEMPERATURE_C,
                              f"expected a water temperature in degC, found {temperature_c!r}")
    return calibration, loading, settings, float(temperature_c)


def build_converter(metadata: dict, *, calibration=None, method: str | None = None,
                    temperature_c: float | None = None):
    """The Converter a session's metadata describes (arguments as :func:`conversion_inputs`;
    ``temperature_c`` overrides the recorded water temperature, degC)."""
    from ..acoustics.converter import Converter

    cal, loading, settings, temp = conversion_inputs(metadata, calibration=calibration,
                                                     method=method)
    return Converter(cal, loading=loading, settings=settings,
                     temperature_c=temp if temperature_c is None else float(temperature_c))


def _method_schedule(events: list[dict], source: str = "the session"):
    """(seq or None, time_s, method) of each recorded method change, in order; a method
    that is not a :class:`Method` is a SessionValueError naming the event."""
    out = []
    for ev in events:
        if ev["kind"] != EventKind.METHOD_CHANGE:
            continue
        m = ev["detail"].get("method", ev["detail"].get("to"))
        if m is None:
            continue
        if not isinstance(m, str) or m not in tuple(Method):
            raise SessionValueError(source, "events", f"event_id {ev.get('event_id')}",
                                    "detail_json", f"method-change to {m!r}: expected one of "
                                                   f"{', '.join(Method)}")
        out.append((ev["seq"], ev["time_s"], m))
    return out


def _requested_method(schedule, seq: int, time_s: float, initial: str) -> str:
    method = initial
    for ev_seq, ev_time, m in schedule:
        if (ev_seq is not None and seq >= ev_seq) or (ev_seq is None and time_s >= ev_time):
            method = m
    return method


def _check_paths(src: Path, out: Path, force: bool) -> None:
    if not src.is_file():
        raise SessionFileError(f"{src}: no such session file")
    if out.resolve() == src.resolve() or (out.exists() and os.path.samefile(out, src)):
        raise ConfigError(f"--out {out}: replay writes a new session and never touches the "
                          "original; choose another file")
    if out.exists() and not force:
        raise ConfigError(f"--out {out}: file exists (use --force to replace it)")


def replay_session(src, out, *, calibration_path=None, calibration_checks: dict | None = None,
                   method: str | None = None, force: bool = False, check: bool = False,
                   progress: StepsFactory = silent) -> ReplaySummary:
    """Recompute every result of session ``src`` into the new session ``out``.

    Parameters
    ----------
    src, out : str or Path
        The recorded session, and the new file (refused if it is ``src``; replaced only
        with ``force``).
    calibration_path : str or Path, optional
        Another calibration file instead of the recorded one.
    calibration_checks : dict, optional
        Keywords of ``load_calibration`` for that file (``max_step_db``,
        ``check_phase_steps``); the recorded calibration is taken as it was accepted.
    method : str, optional
        Another conversion method (a :class:`~tankside.monitor.acoustics.settings.Method`).
    check : bool
        Count results that differ from the recorded ones (``summary.differences``).
    progress : StepsFactory
        Told the number of traces and each one done (default: nowhere).
    """
    from ..acoustics.calibration import load_calibration

    src, out = Path(src), Path(out)
    _check_paths(src, out, force)
    t_start = time.perf_counter()
    with SessionReader(src) as reader:
        note = reader.note
        meta = reader.metadata
        calibration = (load_calibration(calibration_path, **(calibration_checks or {}))
                       if calibration_path else None)
        from ..acoustics.converter import Converter

        cal, loading, settings, temp0 = conversion_inputs(meta, calibration=calibration,
                                                          method=method, source=str(src))
        new_meta = dict(meta)
        if calibration is not None:
            new_meta[META_CALIBRATION_TEXT] = calibration.text
            new_meta[META_CALIBRATION_SHA256] = calibration.sha256
            new_meta[META_CALIBRATION_SOURCE] = str(calibration.source)
        new_meta[META_SETTINGS] = settings.as_dict()
        new_meta[META_TOOL_VERSION] = __version__
        new_meta[META_START_TIME_S] = time.time()
        new_meta[META_REPLAY_OF] = {
            "source_file": str(src.resolve()),
            "source_session_uid": reader.start["session_uid"],
            "source_calibration_sha256": meta.get(META_CALIBRATION_SHA256),
            "source_stopped_cleanly": reader.stopped_cleanly,
            "calibration_file": str(calibration_path) if calibration_path else None,
            "method": method,
        }
        events = reader.events()
        schedule = [] if method is not None else _method_schedule(events, str(src))
        initial_method = settings.method
        converters = {}

        def converter_for(requested: str, temperature_c: float, seq: int):
            # one Converter (and its cached plans) per method and temperature in use; one
            # that cannot be built is the record's fault, not one trace's
            key = (requested, temperature_c)
            if key not in converters:
                s = settings if requested == initial_method else settings.replace(
                    method=requested)
                try:
                    converters[key] = Converter(cal, loading=loading, settings=s,
                                                temperature_c=temperature_c)
                except TanksideError as err:
                    table, row, column = (("metadata", f"key {META_TEMPERATURE_C!r}",
                                           "value_json") if temperature_c == temp0 else
                                          ("results", f"seq {seq}", "water_temperature_c"))
                    raise SessionValueError(str(src), table, row, column,
                                            f"no conversion with it: {err}") from err
            return converters[key]

        # Traces committed while the replay runs (a session still being recorded) wait
        # for the next replay, so that the counts describe one set of traces.
        last = reader.last_seq()
        stop_seq = None if last is None else last + 1
        total = len(reader.seqs(stop_seq))
        converted = failed = differences = 0
        # The new session is written under a temporary name beside --out and renamed
        # when it is complete; with force, an existing --out is replaced only then.
        with output_file(out, session=True) as tmp:
            store = SessionStore.create(tmp, new_meta, label=out)
            try:
                with progress(total, "replay") as bar:
                    for stored in reader.iter_traces(stop_seq=stop_seq):
                        raw = stored.raw
                        temp = temp0
                        if stored.result is not None and not math.isnan(
                                stored.result.get("water_temperature_c", math.nan)):
                            temp = stored.result["water_temperature_c"]
                        requested = _requested_method(schedule, raw.seq, raw.time_s,
                                                      initial_method)
                        converter = converter_for(requested, temp, raw.seq)
                        try:
                            result = converter.process(raw.volts(), raw.dt_s)
                            flat, error = result.flat(), None
                            converted += 1
                        except (TanksideError, ArithmeticError, ValueError) as err:
                            # Recorded with the trace, as the live pipeline does: one trace
                            # whose numbers the chain cannot take (a time step of 1e305 s
                            # read from a damaged file, say) fails alone and is counted.
                            flat, error = None, f"{type(err).__name__}: {err}"
                            failed += 1
                        store.add_trace(raw, flat, stored.flags, error, stored.bench,
                                        channel=raw.monitor)
                        store.maybe_commit()
                        if check and _differs(stored.result, flat):
                            differences += 1
                        bar.update()
                for ev in events:
                    store.add_event(ev["time_s"], ev["kind"], ev["detail"], seq=ev["seq"])
                counts = {"traces": total, "converted": converted, "failed": failed}
                store.commit()
            except BaseException:
                try:
                    store.close(ExitStatus.ERROR, "replay did not finish",
                                {"traces": store.traces_written})
                except TanksideError:
                    pass  # the file is removed; the first error is the one to report
                raise
            store.close(ExitStatus.OK, "replay", counts)
    return ReplaySummary(out, total, converted, failed, time.perf_counter() - t_start,
                         differences if check else None, note)


def _same(a, b) -> bool:
    if isinstance(a, float) and isinstance(b, float):
        return a == b or (math.isnan(a) and math.isnan(b))
    return a == b


def _differs(old: dict | None, new: dict | None) -> bool:
    if old is None or new is None:
        return (old is None) != (new is None)
    return any(not _same(old.get(k), new.get(k)) for k in RESULT_NAMES)


def result_differences(path_a, path_b) -> list[tuple[int, str, object, object]]:
    """(seq, field, value in a, value in b) for every result that differs between two
    sessions (NaN equals NaN; a trace missing from one side is reported as ``"trace"``)."""
    diffs: list[tuple[int, str, object, object]] = []
    with SessionReader(path_a) as a, SessionReader(path_b) as b:
        rows_b = {r["seq"]: r for r in b.iter_results()}
        for ra in a.iter_results():
            rb = rows_b.pop(ra["seq"], None)
            if rb is None:
                diffs.append((ra["seq"], "trace", True, None))
                continue
            for key in ("converted", *RESULT_NAMES):
                if not _same(ra[key], rb[key]):
                    diffs.append((ra["seq"], key, ra[key], rb[key]))
        diffs.extend((seq, "trace", None, True) for seq in sorted(rows_b))
    return diffs
