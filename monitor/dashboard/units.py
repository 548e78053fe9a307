"""Display units for the dashboard: one fixed unit per quantity, labelled on screen.

The units are the ones common in the trade for reporting ultrasound fields (common
practice): pressures in MPa, frequencies in MHz, the pulse-intensity integral in
mJ/cm^2 and intensities in W/cm^2. Values arrive in SI from the pipeline.
"""

from __future__ import annotations

import math
import time

# figure key -> (label, unit shown, factor from SI to the unit shown)
DISPLAY_UNITS = {
    "peak_compressional_pa": ("p_c", "MPa", 1e-6),
    "peak_rarefactional_pa": ("p_r", "MPa", 1e-6),
    "acoustic_working_frequency_hz": ("f_awf", "MHz", 1e-6),
    "pulse_intensity_integral_j_per_m2": ("PII", "mJ/cm²", 0.1),  # 1 J/m^2 = 0.1 mJ/cm^2
    "pulse_average_intensity_w_per_m2": ("I_pa", "W/cm²", 1e-4),  # 1 W/m^2 = 1e-4 W/cm^2
    "mechanical_index": ("MI", "", 1.0),
}


def number(value: float | None, width: int = 7) -> str:
    """Three significant figures in at most ``width`` characters; "-" for NaN/None."""
    if value is None or not math.isfinite(value):
        return "-".rjust(width)
    mag = abs(value)
    if mag != 0 and (mag >= 1e5 or mag < 1e-3):
        mantissa, exponent = f"{value:.2e}".split("e")
        text = f"{mantissa}e{int(exponent)}"
        if len(text) > width:
            mantissa, exponent = f"{value:.1e}".split("e")
            text = f"{mantissa}e{int(exponent)}"
    elif mag >= 100:
        text = f"{value:.0f}"
    elif mag >= 10:
        text = f"{value:.1f}"
    elif mag >= 1:
        text = f"{value:.2f}"
    else:
        text = f"{value:.3f}"
    return text.rjust(width)


def in_display_unit(key: str, value_si: float | None) -> float:
    """An SI value of figure ``key`` in its display unit."""
    if value_si is None:
        return math.nan
    return float(value_si) * DISPLAY_UNITS[key][2]


def volts(value_v: float | None) -> str:
    """A voltage with mV below 1 V."""
    if value_v is None or not math.isfinite(value_v):
        return "-"
    if abs(value_v) < 1.0:
        return f"{value_v * 1e3:.0f} mV"
    return f"{value_v:.3g} V"


def size(nbytes: int) -> str:
    """A file size in B, kB, MB or GB (powers of 1000)."""
    n = float(nbytes)
    for unit in ("B", "kB", "MB", "GB"):
        if n < 1000 or unit == "GB":
            return f"{n:.0f} {unit}" if unit == "B" else f"{n:.1f} {unit}"
        n /= 1000
    return f"{n:.1f} GB"  # pragma: no cover


def clock(seconds: float | None) -> str:
    """An elapsed time as H:MM:SS."""
    if seconds is None or not math.isfinite(seconds) or seconds < 0:
        return "0:00:00"
    s = int(seconds)
    return f"{s // 3600}:{s % 3600 // 60:02d}:{s % 60:02d}"


def wall_time(time_s: float | None) -> str:
    """A Unix time as local HH:MM:SS; small values (seconds into a session) as +H:MM:SS."""
    if time_s is None or not math.isfinite(time_s):
        return "--:--:--"
    if time_s < 1e8:
        return "+" + clock(time_s)
    return time.strftime("%H:%M:%S", time.localtime(time_s))


def countdown(seconds: float | None) -> str:
    """A time left as M:SS, or H:MM:SS from an hour; "" when unknown."""
    if seconds is None or not math.isfinite(seconds):
        return ""
    s = max(0, int(math.ceil(seconds)))
    if s >= 3600:
        return f"{s // 3600}:{s % 3600 // 60:02d}:{s % 60:02d}"
    return f"{s // 60}:{s % 60:02d}"
