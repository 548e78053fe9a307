"""Building a live session's parts from a bench file, and naming its session file.

Loads the calibration and builds the converter and rules before any instrument is
touched, so that a bad file is reported first.
"""

from __future__ import annotations

import time
from collections.abc import Callable
from pathlib import Path
from typing import Any

import numpy as np

from ..acoustics.beam import beam_figures
from ..acoustics.converter import Converter
from ..errors import ConfigError, SessionFileError
from ..record.reader import SessionReader
from ..record.scanpoints import GRID_TOLERANCE_MM
from ..record.schema import LAYOUT_VERSION, META_PROTECTION_WARNINGS, META_SCAN_PLAN
from ..record.store import SessionStore, session_metadata
from . import instruments
from .rule_specs import protection_warnings
from .rules import RuleEngine
from .scan import ScanResume
from .snapshot import ScanView


def session_parts(bench: Any, *, session_path: str | Path | None = None,
                  resume: bool = False) -> dict[str, Any]:
    """The keyword arguments of :class:`~tankside.monitor.live.session.LiveSession`
    for the instruments of a :class:`~tankside.monitor.live.benchfile.BenchConfig`.

    ``resume``: ``session_path`` is an existing session file to go on writing (a resumed
    scan, :func:`scan_resume`), reopened instead of created.

    Raises
    ------
    CalibrationError, ConfigError
        A bad calibration, setting or session path (before any instrument is opened).
    """
    calibration = bench.calibration()
    loading = bench.loading()
    settings = bench.conversion_settings()
    converter = Converter(calibration, loading=loading, settings=settings,
                          temperature_c=bench.temperature_c)
    alerts = bench.alert_config()
    rules = RuleEngine(alerts)
    warnings = list(protection_warnings(alerts))
    dig_settings = bench.digitiser_settings()
    path = session_file(bench.session_folder, session_path, resume=resume)
    open_dig = instruments.digitiser_opener(bench.digitiser, dig_settings)
    open_gen = (instruments.generator_opener(bench.generator)
                if bench.generator is not None else None)

    def metadata(identities: dict) -> dict:
        return session_metadata(
            configuration=bench.tables, instruments=identities, calibration=calibration,
            loading=loading, settings=settings, temperature_c=bench.temperature_c,
            extra={"bench_file": bench.source, META_PROTECTION_WARNINGS: warnings})

    def open_store(p: Path, meta: dict) -> SessionStore:
        if resume:       # the file keeps its own metadata; the resume event says what ran
            return SessionStore.reopen(p, commit_interval_s=bench.commit_interval_s)[0]
        return SessionStore.create(p, meta, commit_interval_s=bench.commit_interval_s)

    resources = {"digitiser": bench.digitiser.resource}
    generator: dict[str, Any] = {}
    if bench.generator is not None:
        resources["generator"] = bench.generator.resource
        gen_config = bench.generator
        generator = {
            "apply_generator_settings":
                lambda device: instruments.apply_generator_settings(device, gen_config),
            "leave_drive_on_at_end": gen_config.leave_on_at_end,
            "safe_off_give_up_s": gen_config.safe_off_give_up_s}
    serial: dict[str, Any] = {}
    if getattr(bench, "stage", None) is not None:
        resources["stage"] = bench.stage.resource
        serial["open_stage"] = instruments.stage_opener(bench.stage)
        serial["stage_limits"] = dict(bench.stage.limits)
    if getattr(bench, "thermometer", None) is not None:
        resources["thermometer"] = bench.thermometer.resource
        serial["open_thermometer"] = instruments.thermometer_opener(bench.thermometer)
        serial["max_age_s"] = bench.thermometer.max_age_s
        serial["bench_temperature_c"] = bench.temperature_c
    return {**generator, **serial, "open_digitiser": open_dig, "open_generator": open_gen,
            "converter": converter,
            "rules": rules, "open_store": open_store, "metadata": metadata,
            "session_path": path, "trigger_timeout_s": bench.trigger_timeout_s,
            "queue_capacity": bench.queue_capacity, "give_up_s": bench.reconnect_give_up_s,
            "resources": resources}


def session_file(folder: str | Path, session_path: str | Path | None, *,
                 resume: bool) -> Path:
    """The session file a session writes: an existing one to resume (``resume``), or a
    new one (:func:`new_session_path`).

    Raises
    ------
    ConfigError
        No file to resume, or the new file exists already.
    """
    if resume:
        if session_path is None or not Path(session_path).is_file():
            raise ConfigError(f"{session_path}: no such session file to resume")
        return Path(session_path)
    return new_session_path(folder, session_path)


def new_session_path(folder: str | Path, session_path: str | Path | None = None) -> Path:
    """The session file to create: ``session_path``, or a new name in ``folder``.

    Raises
    ------
    ConfigError
        The file exists already, or its folder cannot be made.
    """
    path = Path(session_path) if session_path is not None else default_session_path(folder)
    if path.exists():
        raise ConfigError(f"{path}: session file already exists (choose a new name)")
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
    except OSError as err:
        raise ConfigError(f"{path.parent}: cannot create the session folder: {err}") from err
    return path


def default_session_path(folder: str | Path) -> Path:
    """``FOLDER/session-YYYYmmdd-HHMMSS.db`` (local time), with a suffix if taken."""
    folder = Path(folder)
    stem = time.strftime("session-%Y%m%d-%H%M%S")
    path = folder / f"{stem}.db"
    n = 1
    while path.exists():
        path = folder / f"{stem}-{n}.db"
        n += 1
    return path


def scan_resume(path: str | Path, bench: Any) -> tuple[Any, ScanResume]:
    """The plan (:class:`~.scanplan.ScanPlan`, as recorded) and what a resumed scan takes
    from its session file.

    Raises
    ------
    SessionFileError
        Not a session file, not of this tankside's layout, or one that ran no scan.
    """
    path = Path(path)
    with SessionReader(path) as reader:
        if reader.layout != LAYOUT_VERSION:
            raise SessionFileError(f"{path}: a layout {reader.layout} session; only files "
                                   f"of layout {LAYOUT_VERSION} can be resumed")
        plan = reader.scan_plan
        if plan is None:
            raise SessionFileError(f"{path}: this session ran no scan; nothing to resume")
        completed = tuple(reader.scan_points())
        last = reader.last_seq()
        previous = reader.stop
    from .scanplan import ScanPlan

    rebuilt = ScanPlan.from_dict(plan)
    done = {p.index for p in completed}
    first_point = next((p.index for p in rebuilt.points if p.index not in done), None)
    return rebuilt, ScanResume(completed=completed, previous_stop=previous,
                            first_seq=0 if last is None else last + 1,
                            first_point=first_point, configuration=dict(bench.tables))


def scan_parts(bench: Any, *, session_path: str | Path | None = None, scan_plan: Any = None,
               resume: bool = False) -> dict[str, Any]:
    """:func:`session_parts`, with a scan: a new one (``scan_plan``, recorded in the
    metadata) or the one recorded in ``session_path`` (``resume``)."""
    from .scanplan import check_limits

    if resume:
        if session_path is None:
            raise ConfigError("resuming a scan needs its session file")
        plan, resumed = scan_resume(session_path, bench)
        limits = dict(bench.stage.limits) if getattr(bench, "stage", None) else {}
        check_limits(plan, limits, source=str(session_path))
        parts = session_parts(bench, session_path=session_path, resume=True)
        return {**parts, "scan_plan": plan, "scan_resume": resumed,
                "beam_figures": beam_figures_for(plan)}
    parts = session_parts(bench, session_path=session_path)
    if scan_plan is None:
        return parts
    build_metadata = parts["metadata"]

    def metadata(identities: dict) -> dict:
        return {**build_metadata(identities), META_SCAN_PLAN: scan_plan.as_dict()}

    return {**parts, "metadata": metadata, "scan_plan": scan_plan,
            "beam_figures": beam_figures_for(scan_plan)}


def beam_figures_for(plan: Any) -> Callable[[ScanView], dict]:
    """The beam figures of a scan's points so far, from its map (:class:`ScanView`): the
    maximum and widths of p_r over the plan's targets, and, when the plan scans its beam
    axis and gives ``source_distance_mm``, the derated axial figures
    (:func:`tankside.monitor.acoustics.beam.beam_figures`)."""
    beam_axis = str(getattr(plan, "beam_axis", "z"))
    distance = getattr(plan, "source_distance_mm", None)

    def figures(view: ScanView) -> dict:
        coords = {axis: view.targets_mm[:, i] for i, axis in enumerate(view.target_axes)}
        p_r = view.values.get("peak_rarefactional_pa")
        if p_r is None or not np.isfinite(p_r).any():
            return {}
        axial: dict[str, Any] = {}
        if distance is not None and beam_axis in view.grid_axes:
            axial = {"pii_j_per_m2": view.values["pulse_intensity_integral_j_per_m2"],
                     "p_r_pa": p_r, "f_awf_hz": view.values["acoustic_working_frequency_hz"],
                     "source_distance_mm": float(distance), "beam_axis": beam_axis}
        # the plan's targets are exact: gridded as the map grids them
        return beam_figures(coords, p_r, tolerance_mm=GRID_TOLERANCE_MM, **axial).as_dict()

    return figures
