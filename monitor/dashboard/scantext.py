"""A running scan in words: its point, phase, positions and beam figures.

Plain functions of a :class:`ScanView` (no Textual), shared by the dashboard's map
panel and the headless status line.
"""

from __future__ import annotations

import math

from ..live.snapshot import ScanView


def mm_text(value_mm: float) -> str:
    """A coordinate in mm as a tick label: at most two decimals, no trailing zeros."""
    if not math.isfinite(value_mm):
        return "-"
    text = f"{value_mm:.2f}".rstrip("0").rstrip(".")
    return "0" if text in ("-0", "") else text


def point_number(view: ScanView) -> int:
    """The point shown as "point N/total": the one being measured (1-based), else the
    number completed."""
    return view.current + 1 if view.current is not None else view.completed


def phase_text(view: ScanView) -> str:
    """"acquiring", "paused: stage lost", "ended", ..."""
    return f"{view.phase}: {view.why}" if view.why else view.phase


def scanned_axes(view: ScanView) -> tuple[str, ...]:
    """The axes a position is given on: the scanned ones, or every target axis."""
    return view.grid_axes or view.target_axes


def position_mm(view: ScanView, index: int | None) -> dict[str, float]:
    """A point's target on the scanned axes, mm ({} when there is none)."""
    if index is None or not 0 <= index < view.targets_mm.shape[0]:
        return {}
    cols = {a: k for k, a in enumerate(view.target_axes)}
    row = view.targets_mm[index]
    return {a: float(row[cols[a]]) for a in scanned_axes(view) if a in cols}


def position_text(position: dict[str, float]) -> str:
    """``x 2.5 y -1`` (mm)."""
    return " ".join(f"{a} {mm_text(v)}" for a, v in position.items())


def beam_text(beam: object) -> str:
    """One line of beam figures: maximum position, -6 dB widths, MI at its depth.

    Reads the layout of :meth:`tankside.monitor.acoustics.beam.BeamFigures.as_dict`;
    a figure missing or not found is left out, and "" is returned when none is there;
    ``{"error": text}`` (the figures failed on the points so far) is said as such.
    """
    if not isinstance(beam, dict):
        return ""
    if isinstance(beam.get("error"), str):
        return f"beam figures not had: {beam['error']}"
    parts = []
    maximum = beam.get("maximum")
    where = maximum.get("position_mm") if isinstance(maximum, dict) else None
    if isinstance(where, dict):
        scanned = beam.get("scanned_axes") or list(where)
        pos = {a: where[a] for a in scanned
               if isinstance(where.get(a), int | float)}
        if pos:
            parts.append(f"max at {position_text(pos)}")
    listed = beam.get("widths")
    widths = [w for w in listed if isinstance(w, dict)] if isinstance(listed, list) else []
    widths = [w for w in widths
              if w.get("level_db") == -6.0 and isinstance(w.get("width_mm"), int | float)]
    if widths:
        parts.append("-6 dB " + " ".join(f"{w.get('axis', '?')} {mm_text(w['width_mm'])}"
                                         for w in widths) + " mm")
    axial = beam.get("axial")
    if isinstance(axial, dict) and isinstance(axial.get("mechanical_index"), int | float):
        depth = axial.get("depth_of_max_mm")
        at = f" at {mm_text(depth)} mm" if isinstance(depth, int | float) else ""
        parts.append(f"MI {axial['mechanical_index']:.2f}{at}")
    return "beam " + " · ".join(parts) if parts else ""
