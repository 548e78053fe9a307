"""Building a live session's parts from a bench file, and naming its session file.

Loads the calibration and builds the converter and rules before any instrument is
touched, so that a bad file is reported first.
"""

from __future__ import annotations

import time
from pathlib import Path
from typing import Any

from ..acoustics.converter import Converter
from ..errors import ConfigError
from ..record.schema import META_PROTECTION_WARNINGS
from ..record.store import SessionStore, session_metadata
from . import instruments
from .rule_specs import protection_warnings
from .rules import RuleEngine


def session_parts(bench: Any, *, session_path: str | Path | None = None) -> dict[str, Any]:
    """The keyword arguments of :class:`~tankside.monitor.live.session.LiveSession`
    for the instruments of a :class:`~tankside.monitor.live.benchfile.BenchConfig`.

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
    path = new_session_path(bench.session_folder, session_path)
    open_dig = instruments.digitiser_opener(bench.digitiser, dig_settings)
    open_gen = (instruments.generator_opener(bench.generator)
                if bench.generator is not None else None)

    def metadata(identities: dict) -> dict:
        return session_metadata(
            configuration=bench.tables, instruments=identities, calibration=calibration,
            loading=loading, settings=settings, temperature_c=bench.temperature_c,
            extra={"bench_file": bench.source, META_PROTECTION_WARNINGS: warnings})

    def open_store(p: Path, meta: dict) -> SessionStore:
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
