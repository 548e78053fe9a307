"""Display arithmetic for the snapshot: spectra in dB, the drive's status text.

Pure functions of a converted trace's arrays and of the generator state, so that the
processing stage only decides *when* to publish and these decide *what* a display
is handed.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from .snapshot import BenchView


def result_arrays(result: Any, flat: dict) -> dict[str, np.ndarray]:
    """Arrays of one converted trace for a display.

    Parameters
    ----------
    result : TraceResult
        Needs ``pressure_pa``, ``freqs_hz`` (Hz), ``spectrum_pa`` (magnitude) and
        ``sensitivity_v_per_pa`` (complex, V/Pa) on the same grid.
    flat : dict
        The flat result (for ``acoustic_working_frequency_hz``).

    Returns
    -------
    dict
        ``pressure_pa``, ``freqs_hz``, ``spectrum_db`` (dB re its maximum) and
        ``sensitivity_db`` (|M_L| in dB re its value at f_awf; NaN when f_awf is
        unknown).
    """
    spec = np.asarray(result.spectrum_pa, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        top = float(np.nanmax(spec)) if spec.size else 0.0
        spectrum_db = 20.0 * np.log10(spec / top) if top > 0 else np.full_like(spec, np.nan)
        sens = np.abs(np.asarray(result.sensitivity_v_per_pa))
        freqs = np.asarray(result.freqs_hz, dtype=float)
        f_awf = float(flat.get("acoustic_working_frequency_hz", np.nan))
        ref = np.nan
        if np.isfinite(f_awf) and freqs.size:
            finite = np.isfinite(sens)
            if finite.any():
                ref = float(np.interp(f_awf, freqs[finite], sens[finite]))
        if np.isfinite(ref) and ref > 0:
            sensitivity_db = 20.0 * np.log10(sens / ref)
        else:
            sensitivity_db = np.full_like(freqs, np.nan)
    return {"pressure_pa": np.array(result.pressure_pa, dtype=float), "freqs_hz": freqs.copy(),
            "spectrum_db": spectrum_db, "sensitivity_db": sensitivity_db}


def event_text(kind: str, detail: dict) -> str:
    """One line for an event in a display's log, from its kind and detail.

    The detail keys are those listed for each kind in
    :class:`tankside.monitor.record.schema.EventKind`.
    """
    if kind == "mark":
        return str(detail.get("note", "")) or "(no note)"
    if kind == "method-change":
        return f"{detail.get('from', '?')} -> {detail.get('to', '?')}"
    if kind == "range-change":
        text = f"{detail.get('from_v', '?')} V -> {detail.get('to_v', '?')} V"
        if detail.get("error"):
            text += f" failed: {detail['error']}"
        return text
    if kind in ("drive-on", "drive-off", "figures-reset"):
        return f"by {detail.get('cause', '?')}"
    return ", ".join(f"{key} {value}" for key, value in detail.items())


def optional_bool(value: object) -> bool | None:
    """``value`` as a bool, or None when it is None, NaN or not a truth value."""
    if value is None:
        return None
    if isinstance(value, float) and not np.isfinite(value):
        return None
    try:
        return bool(value)
    except (TypeError, ValueError):
        return None


def drive_text(drive_on: bool | None, cause: str) -> str:
    """The generator's output as the status panel says it."""
    if drive_on is None:
        return "output state unknown"
    if drive_on:
        return "output on"
    return "output off (safe-off)" if cause == "safe-off" else "output off"


def stage_text(view: BenchView, *, compact: bool = False) -> str:
    """The stage's position as the bench line says it (``""`` without a stage).

    ``"stage x 5.00 y -2.00 z 40.00 mm"``; compact ``"x5.0 y-2.0 z40.0"``; ``LOST`` while
    it does not answer, ``moving`` while it moves.
    """
    if not view.has_stage:
        return ""
    if view.stage_ended:
        return "stage closed"
    if not view.stage_connected:
        return "stage LOST"
    if not view.position_mm:
        return "stage -"
    if compact:
        axes = " ".join(f"{a}{mm:.1f}" for a, mm in view.position_mm.items())
        return f"{axes}{' mv' if view.stage_moving else ''}"
    axes = " ".join(f"{a} {mm:.2f}" for a, mm in view.position_mm.items())
    return f"stage {axes} mm{' moving' if view.stage_moving else ''}"


def water_text(view: BenchView, *, degree: str = "°C", compact: bool = False) -> str:
    """The thermometer's reading and its age, and the temperature the conversion uses
    when that is the bench file's (``""`` without a thermometer)."""
    if not view.has_thermometer:
        return ""
    if view.reading_c is None:
        reading = "-"
    else:
        age = view.reading_age_s if view.reading_age_s is not None else float("nan")
        reading = f"{view.reading_c:.2f}{'' if compact else ' '}{degree}"
        reading += f" {age:.0f}s" if compact else f" ({age:.0f} s)"
    text = reading if compact else f"water {reading}"
    if view.thermometer_ended:
        text += " closed"
    elif not view.thermometer_connected:
        text += " LOST"
    if view.water_source == "bench":
        used = f"{view.water_temperature_c:g}{degree}"
        text += f" ->{used}" if compact else f", using the bench {used}"
    return text
