"""Hydrophone calibration: loading a certificate's sensitivity table from CSV.

File layout
-----------
A header row, then one row per calibrated frequency; lines whose first non-blank
character is ``#`` are comments and blank lines are ignored. Columns, in any order:

``frequency_hz``
    Calibration frequency, Hz; finite, non-negative, strictly increasing.
``sensitivity_v_per_pa`` *or* ``sensitivity_db_re_1v_per_upa``
    Sensitivity magnitude, V/Pa, or in dB re 1 V/uPa (``-260 dB`` is ``100 nV/Pa``).
``phase_deg`` *or* ``phase_rad`` (optional)
    Phase of the complex sensitivity. Wrapped phase is unwrapped.

Phase convention
----------------
The complex sensitivity is ``M(f) = V(f) / P(f)`` for time dependence ``exp(+j 2 pi f t)``,
the same convention as :func:`numpy.fft.rfft`. A hydrophone that only delays the
pressure by ``tau`` has phase ``-360 f tau`` degrees.

Without a phase column, the phase is the minimum-phase estimate from the magnitude
(:func:`minimum_phase_rad`) and ``phase_source`` is ``"minimum-phase"``.

Plausibility
------------
One mistyped row can wreck every pressure (``-51.6`` for ``-251.6 dB re 1 V/uPa`` makes
the sensitivity 1e10 times too large there), so the loader refuses:

* a magnitude that steps by more than ``max_step_db`` (default :data:`MAX_STEP_DB`,
  20 dB) from a neighbouring row; ``max_step_db=math.inf`` switches this off;
* a phase step of more than 180 degrees between neighbouring rows that unwrapping cannot
  settle. Unwrapping takes any step above 180 degrees for a wrap, which is right only
  when the file gives its phase within one turn (every value within -180..180 degrees,
  or within 0..360): then such a step is a wrap. A file whose phase leaves that turn
  gives its phase unwrapped, and a step above 180 degrees in it is a jump unwrapping
  would silently rewrite. ``check_phase_steps=False`` switches this off.

The smooth sensitivity of a hydrophone changes by a few dB between neighbouring
calibration frequencies even across a resonance (common practice); 20 dB is an order
of magnitude beyond that.
What the sensitivity is
-----------------------
Comment lines may declare the electrical condition of the sensitivity
(:class:`tankside.monitor.acoustics.loading.CalibrationLoad`), one ``name = value`` each::

    # calibration_kind = end-of-cable
    # calibration_input_resistance_ohm = 1e6
    # calibration_input_capacitance_f = 20e-12

``calibration_kind`` is ``open-circuit`` (the default when nothing is declared) or
``end-of-cable``; the input defaults to no resistance (``inf``) and 0 F. Other comments
are free text. The same names in the bench file's ``[loading]`` table win over the file.
"""

from __future__ import annotations

import hashlib
import math
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from ..errors import CalibrationError, ConfigError
from .loading import CalibrationLoad

#: Fewest calibration points accepted (interpolation and the phase estimate need a band).
MIN_POINTS = 3
#: Largest magnitude step between neighbouring rows accepted by default, dB.
MAX_STEP_DB = 20.0
# Where the operator relaxes the plausibility checks (the bench file, the commands).
_RELAX_MAGNITUDE = ("max_step_db in the bench file's [calibration], or "
                    "--calibration-max-step DB; inf switches the check off")
_RELAX_PHASE = ("check_phase_steps = false in the bench file's [calibration], or "
                "--no-calibration-phase-check")

FREQUENCY = "frequency_hz"
MAGNITUDE_COLUMNS = ("sensitivity_v_per_pa", "sensitivity_db_re_1v_per_upa")
PHASE_COLUMNS = ("phase_deg", "phase_rad")
KNOWN_COLUMNS = (FREQUENCY, *MAGNITUDE_COLUMNS, *PHASE_COLUMNS)

# Beyond the calibrated band the log-magnitude follows the edge slope, at most this
# steep (ln|M| per ln f: 2 is 40 dB per decade).
_EXTRAPOLATION_MAX_SLOPE = 2.0
# Quadrature step and margin beyond the band of the gain-phase integral, nepers.
_BODE_STEP = 0.002
_BODE_MARGIN = 12.0
# The edge slope is fitted over the calibration points within this ratio of the edge.
_EDGE_FIT_RATIO = 2.0 ** 0.25


@dataclass(frozen=True, eq=False)
class Calibration:
    """A hydrophone sensitivity as certified.

    Attributes
    ----------
    frequency_hz : numpy.ndarray
        Calibration frequencies, Hz, strictly increasing.
    sensitivity_v_per_pa : numpy.ndarray
        Complex sensitivity, V/Pa, with the phase applied (convention in the module notes).
    phase_source : str
        ``"measured"`` (phase from the file) or ``"minimum-phase"`` (estimated).
    source : str
        File name, or a label for in-memory text.
    text : str
        The file verbatim.
    sha256 : str
        Hex SHA-256 of the file's bytes (of the UTF-8 text for in-memory text).
    load : CalibrationLoad
        What the sensitivity is (open-circuit, or end-of-cable into a stated input), as
        the file's comment lines declare it.
    """

    frequency_hz: np.ndarray
    sensitivity_v_per_pa: np.ndarray
    phase_source: str
    source: str
    text: str = field(repr=False)
    sha256: str = ""
    load: CalibrationLoad = field(default_factory=CalibrationLoad)

    @property
    def band_hz(self) -> tuple[float, float]:
        """Lowest and highest calibrated frequency, Hz."""
        return float(self.frequency_hz[0]), float(self.frequency_hz[-1])

    @property
    def magnitude_v_per_pa(self) -> np.ndarray:
        return np.abs(self.sensitivity_v_per_pa)

    @property
    def phase_rad(self) -> np.ndarray:
        """Unwrapped phase, rad."""
        return np.unwrap(np.angle(self.sensitivity_v_per_pa))

    def interpolate(self, freqs_hz: np.ndarray) -> np.ndarray:
        """Complex sensitivity at ``freqs_hz`` (V/Pa); NaN outside the calibrated band.

        Log-magnitude and unwrapped phase are interpolated linearly in frequency.
        """
        freqs_hz = np.asarray(freqs_hz, dtype=float)
        log_mag = np.interp(freqs_hz, self.frequency_hz, np.log(self.magnitude_v_per_pa))
        phase = np.interp(freqs_hz, self.frequency_hz, self.phase_rad)
        out = np.exp(log_mag + 1j * phase)
        lo, hi = self.band_hz
        out[(freqs_hz < lo) | (freqs_hz > hi)] = np.nan
        return out


def load_calibration(path: str | Path, *, max_step_db: float = MAX_STEP_DB,
                     check_phase_steps: bool = True) -> Calibration:
    """Read a calibration CSV file (layout and plausibility checks in the module notes).

    Raises
    ------
    CalibrationError
        The file cannot be read, or any problem listed in :func:`parse_calibration`.
    """
    path = Path(path)
    try:
        raw = path.read_bytes()
    except OSError as err:
        raise CalibrationError(str(path), None, f"cannot read the file ({err.strerror})") from err
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError as err:
        raise CalibrationError(str(path), None, "not UTF-8 text") from err
    cal = parse_calibration(text, source=str(path), max_step_db=max_step_db,
                            check_phase_steps=check_phase_steps)
    return Calibration(cal.frequency_hz, cal.sensitivity_v_per_pa, cal.phase_source,
                       cal.source, cal.text, hashlib.sha256(raw).hexdigest(), cal.load)


def parse_calibration(text: str, source: str = "<text>", *,
                      max_step_db: float = MAX_STEP_DB,
                      check_phase_steps: bool = True) -> Calibration:
    """Parse calibration CSV text (layout in the module notes).

    Parameters
    ----------
    text : str
    source : str
        File name or label, for the messages.
    max_step_db : float
        Largest magnitude step between neighbouring rows, dB (> 0; ``math.inf``: no check).
    check_phase_steps : bool
        Refuse a phase step above 180 degrees that unwrapping cannot settle.

    Raises
    ------
    CalibrationError
        Empty file; missing, unknown, repeated or conflicting columns; a row with the
        wrong number of fields or an unparsable number; frequencies negative, non-finite
        or not strictly increasing; magnitude non-positive or non-finite; non-finite
        phase; fewer than ``MIN_POINTS`` rows; a magnitude or phase step between
        neighbouring rows that fails the plausibility checks (module notes); a
        ``calibration_*`` declaration that is unknown, repeated or not valid.
    """
    if not max_step_db > 0:
        raise ValueError(f"max_step_db must be above 0 dB, got {max_step_db!r}")
    header, rows = _split(text, source)
    load = _declared_load(text, source)
    columns = _check_header(header, source)
    values: dict[str, list[float]] = {name: [] for name in columns}
    lines = []
    for lineno, line in rows:
        fields = [f.strip() for f in line.split(",")]
        if len(fields) != len(columns):
            raise CalibrationError(source, lineno,
                                   f"expected {len(columns)} fields, found {len(fields)}")
        for name, f in zip(columns, fields, strict=True):
            try:
                values[name].append(float(f))
            except ValueError as err:
                raise CalibrationError(source, lineno,
                                       f"{name}: {f!r} is not a number") from err
        lines.append(lineno)
    if len(lines) < MIN_POINTS:
        raise CalibrationError(source, None, f"too few points: {len(lines)} calibration rows, "
                               f"at least {MIN_POINTS} needed")
    freq = np.array(values[FREQUENCY])
    magnitude = _magnitude(values, columns, lines, source)
    _check_frequencies(freq, lines, source)
    _check_magnitude_steps(magnitude, values, columns, lines, source, max_step_db)
    if "phase_deg" in columns or "phase_rad" in columns:
        name = "phase_deg" if "phase_deg" in columns else "phase_rad"
        phase = np.array(values[name])
        bad = np.flatnonzero(~np.isfinite(phase))
        if bad.size:
            raise CalibrationError(source, lines[bad[0]], f"{name} is not finite")
        if check_phase_steps:
            _check_phase_steps(phase, name, lines, source)
        if name == "phase_deg":
            phase = np.deg2rad(phase)
        phase = np.unwrap(phase)
        phase_source = "measured"
    else:
        phase = minimum_phase_rad(freq, magnitude)
        phase_source = "minimum-phase"
    sens = magnitude * np.exp(1j * phase)
    freq.setflags(write=False)
    sens.setflags(write=False)
    return Calibration(freq, sens, phase_source, source, text,
                       hashlib.sha256(text.encode("utf-8")).hexdigest(), load)


DECLARATIONS = ("calibration_kind", "calibration_input_resistance_ohm",
                "calibration_input_capacitance_f")


def _declared_load(text: str, source: str) -> CalibrationLoad:
    """The ``# calibration_* = value`` comment lines as a CalibrationLoad."""
    found: dict[str, tuple[int, str]] = {}
    for lineno, line in enumerate(text.splitlines(), start=1):
        stripped = line.strip()
        if not stripped.startswith("#"):
            continue
        body = stripped.lstrip("#").strip()
        if not body.startswith(("calibration_kind", "calibration_input")):
            continue
        name, eq, value = (part.strip() for part in body.partition("="))
        if not eq or name not in DECLARATIONS:
            raise CalibrationError(source, lineno, f"unknown declaration {body!r}; expected "
                                   f"'name = value' with name one of {', '.join(DECLARATIONS)}")
        if name in found:
            raise CalibrationError(source, lineno, f"{name} declared twice (first on line "
                                   f"{found[name][0]})")
        found[name] = (lineno, value)
    if not found:
        return CalibrationLoad()
    kw: dict = {}
    for name, (lineno, value) in found.items():
        key = name.removeprefix("calibration_")
        if key == "kind":
            kw[key] = value
            continue
        try:
            kw[key] = float(value)
        except ValueError as err:
            raise CalibrationError(source, lineno, f"{name}: {value!r} is not a number") from err
    try:
        return CalibrationLoad(**kw, declared=True)
    except ConfigError as err:
        first = min(lineno for lineno, _ in found.values())
        raise CalibrationError(source, first, str(err)) from err


def _split(text: str, source: str) -> tuple[tuple[int, str], list[tuple[int, str]]]:
    header: tuple[int, str] | None = None
    rows: list[tuple[int, str]] = []
    for lineno, line in enumerate(text.splitlines(), start=1):
        stripped = line.strip()
        if not stripped or stripped.startswith("#"):
            continue
        if header is None:
            header = (lineno, stripped)
        else:
            rows.append((lineno, stripped))
    if header is None:
        raise CalibrationError(source, None, "empty file: no header row and no data")
    return header, rows


def _check_header(header: tuple[int, str], source: str) -> list[str]:
    lineno, line = header
    columns = [c.strip() for c in line.split(",")]
    for name in columns:
        if name not in KNOWN_COLUMNS:
            raise CalibrationError(source, lineno, f"unknown column {name!r}; expected "
                                   f"{FREQUENCY}, one of {' or '.join(MAGNITUDE_COLUMNS)}, "
                                   f"optionally one of {' or '.join(PHASE_COLUMNS)}")
        if columns.count(name) > 1:
            raise CalibrationError(source, lineno, f"column {name!r} appears more than once")
    if FREQUENCY not in columns:
        raise CalibrationError(source, lineno, f"missing column {FREQUENCY!r}")
    mags = [c for c in columns if c in MAGNITUDE_COLUMNS]
    if len(mags) != 1:
        raise CalibrationError(source, lineno, "need exactly one magnitude column, "
                               f"{' or '.join(MAGNITUDE_COLUMNS)}; found {len(mags)}")
    if sum(c in PHASE_COLUMNS for c in columns) > 1:
        raise CalibrationError(source, lineno, "give phase_deg or phase_rad, not both")
    return columns


def _magnitude(values: dict, columns: list[str], lines: list[int], source: str) -> np.ndarray:
    if "sensitivity_v_per_pa" in columns:
        name = "sensitivity_v_per_pa"
        raw = np.array(values[name])
        magnitude = raw
    else:
        name = "sensitivity_db_re_1v_per_upa"
        raw = np.array(values[name])
        with np.errstate(over="ignore", invalid="ignore"):
            magnitude = db_re_1v_per_upa_to_v_per_pa(raw)
    bad = np.flatnonzero(~np.isfinite(raw) | ~np.isfinite(magnitude) | ~(magnitude > 0))
    if bad.size:
        i = bad[0]
        raise CalibrationError(source, lines[i], f"{name} = {raw[i]!r}: the magnitude must be "
                               "finite and positive")
    return magnitude


def _check_frequencies(freq: np.ndarray, lines: list[int], source: str) -> None:
    bad = np.flatnonzero(~np.isfinite(freq) | (freq < 0))
    if bad.size:
        raise CalibrationError(source, lines[bad[0]],
                               f"frequency_hz = {freq[bad[0]]!r}: must be finite and >= 0")
    bad = np.flatnonzero(np.diff(freq) <= 0)
    if bad.size:
        i = bad[0] + 1
        raise CalibrationError(source, lines[i], f"frequencies not strictly increasing: "
                               f"{freq[i]!r} Hz follows {freq[i - 1]!r} Hz")


def _check_magnitude_steps(magnitude: np.ndarray, values: dict, columns: list[str],
                           lines: list[int], source: str, max_step_db: float) -> None:
    if not math.isfinite(max_step_db):
        return
    name = next(c for c in columns if c in MAGNITUDE_COLUMNS)
    written = values[name]
    unit = " dB re 1 V/uPa" if name == "sensitivity_db_re_1v_per_upa" else " V/Pa"
    steps_db = np.diff(20.0 * np.log10(magnitude))
    bad = np.flatnonzero(np.abs(steps_db) > max_step_db)
    if not bad.size:
        return
    k = int(bad[0])
    # A row that jumps away from both neighbours is the odd one; otherwise name the pair.
    spike = (k + 1 < steps_db.size and abs(steps_db[k + 1]) > max_step_db
             and np.sign(steps_db[k + 1]) != np.sign(steps_db[k]))
    i = k + 1
    after = (f" and back to {written[k + 2]!r}{unit} on line {lines[k + 2]}" if spike else "")
    raise CalibrationError(
        source, lines[i],
        f"{name} = {written[i]!r}{unit} steps by {steps_db[k]:+.1f} dB from "
        f"{written[k]!r}{unit} on line {lines[k]}{after}; neighbouring rows may differ by "
        f"at most {max_step_db:g} dB (a typing error? if the certificate really says so, "
        f"allow a larger step: {_RELAX_MAGNITUDE})")


def _check_phase_steps(phase: np.ndarray, name: str, lines: list[int], source: str) -> None:
    degrees = np.rad2deg(phase) if name == "phase_rad" else phase
    one_turn = bool(np.all(np.abs(degrees) <= 180.0) or np.all((degrees >= 0) & (degrees <= 360.0)))
    if one_turn:
        return      # wrapped phase: a step above 180 degrees is a wrap
    steps = np.diff(degrees)
    bad = np.flatnonzero(np.abs(steps) > 180.0)
    if not bad.size:
        return
    k = int(bad[0])
    raise CalibrationError(
        source, lines[k + 1],
        f"{name} = {float(phase[k + 1])!r} steps by {steps[k]:+.1f} degrees from "
        f"{float(phase[k])!r} on "
        f"line {lines[k]}; the phase leaves one turn, so it is given unwrapped, and a step "
        f"above 180 degrees between neighbouring rows is one unwrapping cannot tell from a "
        f"wrap (a typing error? if the certificate really says so: {_RELAX_PHASE})")


def db_re_1v_per_upa_to_v_per_pa(level_db):
    """Sensitivity level in dB re 1 V/uPa to magnitude in V/Pa (``-260 dB`` -> ``1e-7``)."""
    return 10.0 ** (np.asarray(level_db, dtype=float) / 20.0) * 1e6


def v_per_pa_to_db_re_1v_per_upa(magnitude_v_per_pa):
    """Sensitivity magnitude in V/Pa to dB re 1 V/uPa."""
    return 20.0 * np.log10(np.asarray(magnitude_v_per_pa, dtype=float) * 1e-6)


#: The low-frequency assumptions compared for the ``phase_estimated`` warning: the log-log
#: slope of ``|M|`` below the calibrated band, 0 (flat) and 2 (40 dB per decade), the
#: bounds of the range the fitted edge slope is held to (the estimate in use lies between).
LOW_SLOPE_ASSUMPTIONS = (0.0, 2.0)


def minimum_phase_rad(frequency_hz: np.ndarray, magnitude: np.ndarray, *,
                      low_slope: float | None = None) -> np.ndarray:
    """Minimum-phase estimate of the phase of a sensitivity known by its magnitude only.

    Bode's gain-phase relation (the Hilbert transform of the log-magnitude written on a
    logarithmic frequency axis) is evaluated by quadrature on a dense grid in
    ``u = ln f``. Inside the band the log-magnitude is interpolated linearly in frequency
    (as everywhere else in tankside). Beyond each band edge it continues with the
    log-log slope fitted over the outermost quarter-octave of calibration points, limited to
    the physically expected roll-off: between 0 and +40 dB per decade below the band,
    between 0 and -40 dB per decade above it (a flat edge is held flat). The slope runs
    on far enough (12 nepers) that the kernel's remaining weight is negligible.

    What lies below the band is not measured, and the phase in the band depends on it
    (the kernel falls off only logarithmically): ``low_slope`` replaces the fitted slope
    below the band by a stated one, to see how much (:data:`LOW_SLOPE_ASSUMPTIONS`).

    Parameters
    ----------
    frequency_hz : numpy.ndarray
        Strictly increasing frequencies, Hz (at least two positive).
    magnitude : numpy.ndarray
        Positive magnitudes (any unit).
    low_slope : float, optional, keyword-only
        Log-log slope of the magnitude below the band (ln|M| per ln f); default: the
        fitted edge slope, clamped to 0..2.

    Returns
    -------
    numpy.ndarray
        Phase, rad, at ``frequency_hz`` (convention in the module notes; 0 at 0 Hz).

    References
    ----------
    H. W. Bode, *Network Analysis and Feedback Amplifier Design*, Van Nostrand, 1945,
    ch. 14 (gain-phase relation ``phi(w0) = (1/pi) int dA/du ln coth(|u|/2) du``).
    """
    f = np.asarray(frequency_hz, dtype=float)
    log_mag = np.log(np.asarray(magnitude, dtype=float))
    out = np.zeros(f.size)
    pos = f > 0
    fp, ap = f[pos], log_mag[pos]
    if fp.size < 2:
        return out
    u_lo, u_hi = math.log(fp[0]), math.log(fp[-1])
    s_lo = float(np.clip(_edge_slope(fp, ap, low=True) if low_slope is None else low_slope,
                         0.0, _EXTRAPOLATION_MAX_SLOPE))
    s_hi = float(np.clip(_edge_slope(fp, ap, low=False), -_EXTRAPOLATION_MAX_SLOPE, 0.0))
    du = min(_BODE_STEP, (u_hi - u_lo) / 64.0)
    du = max(du, (u_hi - u_lo + 2 * _BODE_MARGIN) / 2**18)   # bounded work for any band
    n_nodes = int(math.ceil((u_hi - u_lo + 2 * _BODE_MARGIN) / du)) + 1
    u = u_lo - _BODE_MARGIN + du * np.arange(n_nodes)
    a = np.interp(np.exp(u), fp, ap)
    a = np.where(u < u_lo, ap[0] + s_lo * (u - u_lo), a)
    a = np.where(u > u_hi, ap[-1] + s_hi * (u - u_hi), a)
    slope = np.diff(a) / du                      # on cell midpoints
    offsets = (np.arange(-(n_nodes - 1), n_nodes - 1) + 0.5) * du
    kernel = np.log(1.0 / np.tanh(np.abs(offsets) / 2.0))
    # scipy.signal takes over a second to import and only a magnitude-only calibration
    # needs it, so it is imported here rather than by every command and session process
    from scipy.signal import fftconvolve

    # phase at node j = sum_k slope[k] * kernel(mid_k - u_j) * du / pi
    full = fftconvolve(slope, kernel[::-1], mode="full")
    phase_nodes = full[n_nodes - 2:2 * n_nodes - 2] * du / math.pi
    out[pos] = np.interp(np.log(fp), u, phase_nodes)
    return out
def _edge_slope(f: np.ndarray, log_mag: np.ndarray, *, low: bool) -> float:
    """Log-log slope over the outermost quarter-octave of points at one band edge (clamped)."""
    pos = f > 0
    f, log_mag = f[pos], log_mag[pos]
    if f.size < 2:
        return 0.0
    if low:
        sel = f <= _EDGE_FIT_RATIO * f[0]
        if sel.sum() < 2:
            sel = np.zeros(f.size, bool)
            sel[:2] = True
    else:
        sel = f >= f[-1] / _EDGE_FIT_RATIO
        if sel.sum() < 2:
            sel = np.zeros(f.size, bool)
            sel[-2:] = True
    x = np.log(f[sel])
    y = log_mag[sel]
    dx = x - x.mean()
    denom = float(np.dot(dx, dx))
    if denom == 0.0:
        return 0.0
    slope = float(np.dot(dx, y - y.mean()) / denom)
    return float(np.clip(slope, -_EXTRAPOLATION_MAX_SLOPE, _EXTRAPOLATION_MAX_SLOPE))
