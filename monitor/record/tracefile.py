"""Trace files: CSV with a ``time_s,voltage_v`` header (and ``time_s,pressure_pa`` out).

Lines starting with ``#`` are comments; blank lines are ignored. The time step must be
uniform: every time may differ from ``t0 + i * dt`` by at most 1 % of ``dt`` (room for
times printed to a few significant figures), else the file is refused.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np

from ..errors import TraceFileError
from .outputs import output_file

#: Allowed departure of each time from the uniform grid, as a fraction of the step.
STEP_TOLERANCE = 0.01
MIN_SAMPLES = 2


def parse_trace(text: str, source: str = "<text>") -> tuple[np.ndarray, float, float]:
    """Parse trace CSV text.

    Returns
    -------
    voltage_v : numpy.ndarray
        Samples, V.
    dt_s : float
        Time step, s.
    t0_s : float
        Time of the first sample, s.

    Raises
    ------
    TraceFileError
        Wrong header, a bad row or number, too few samples, or a non-uniform time step
        (the message names the file and line).
    """
    header: list[str] | None = None
    times: list[float] = []
    volts: list[float] = []
    lines: list[int] = []
    for lineno, line in enumerate(text.splitlines(), start=1):
        s = line.strip()
        if not s or s.startswith("#"):
            continue
        fields = [f.strip() for f in s.split(",")]
        if header is None:
            header = fields
            if header != ["time_s", "voltage_v"]:
                raise TraceFileError(f"{source}, line {lineno}: header must be "
                                     f"'time_s,voltage_v', found {s!r}")
            continue
        if len(fields) != 2:
            raise TraceFileError(f"{source}, line {lineno}: expected 2 fields, "
                                 f"found {len(fields)}")
        try:
            t, v = float(fields[0]), float(fields[1])
        except ValueError as err:
            raise TraceFileError(f"{source}, line {lineno}: not a number in {s!r}") from err
        if not (math.isfinite(t) and math.isfinite(v)):
            raise TraceFileError(f"{source}, line {lineno}: values must be finite")
        times.append(t)
        volts.append(v)
        lines.append(lineno)
    if header is None:
        raise TraceFileError(f"{source}: empty file (expected header 'time_s,voltage_v')")
    if len(times) < MIN_SAMPLES:
        raise TraceFileError(f"{source}: {len(times)} samples, at least {MIN_SAMPLES} needed")
    time_s = np.array(times)
    n = time_s.size
    dt = (time_s[-1] - time_s[0]) / (n - 1)
    if not dt > 0:
        raise TraceFileError(f"{source}: times must increase")
    off_grid = np.abs(time_s - (time_s[0] + dt * np.arange(n)))
    worst = int(np.argmax(off_grid))
    if off_grid[worst] > STEP_TOLERANCE * dt:
        raise TraceFileError(f"{source}, line {lines[worst]}: time step not uniform "
                             f"(time {time_s[worst]!r} s is {off_grid[worst] / dt:.3g} steps "
                             f"off a uniform grid of {dt!r} s)")
    return np.array(volts), float(dt), float(time_s[0])


def read_trace(path: str | Path) -> tuple[np.ndarray, float, float]:
    """Read a trace CSV file; see :func:`parse_trace`."""
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8-sig")
    except (OSError, UnicodeDecodeError) as err:
        raise TraceFileError(f"{path}: cannot read the trace ({err})") from err
    return parse_trace(text, str(path))


def trace_text(header: str, values: np.ndarray, dt_s: float, t0_s: float = 0.0,
               comments: list[str] | None = None) -> str:
    """The text of a trace file: ``#`` comment lines, the header, then one
    ``time,value`` line per sample (times to 12 and values to 9 significant digits)."""
    t = t0_s + dt_s * np.arange(len(values))
    body = "\n".join(f"{a:.12g},{b:.9g}" for a, b in zip(t, values, strict=True))
    head = "".join(f"# {c}\n" for c in (comments or []))
    return f"{head}{header}\n{body}\n"


def _write(path: str | Path, header: str, values: np.ndarray, dt_s: float, t0_s: float,
           comments: list[str] | None) -> None:
    text = trace_text(header, values, dt_s, t0_s, comments)
    with output_file(path) as partial:      # whole or not at all (OutputFileError)
        partial.write_text(text, encoding="utf-8")


def write_trace(path: str | Path, voltage_v: np.ndarray, dt_s: float, *, t0_s: float = 0.0,
                comments: list[str] | None = None) -> None:
    """Write a voltage trace as ``time_s,voltage_v`` CSV."""
    _write(path, "time_s,voltage_v", voltage_v, dt_s, t0_s, comments)


def write_pressure(path: str | Path, pressure_pa: np.ndarray, dt_s: float, *, t0_s: float = 0.0,
                   comments: list[str] | None = None) -> None:
    """Write a pressure waveform as ``time_s,pressure_pa`` CSV."""
    _write(path, "time_s,pressure_pa", pressure_pa, dt_s, t0_s, comments)
