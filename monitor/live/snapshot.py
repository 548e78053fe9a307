"""What the live pipeline publishes for displays: the contract between pipeline and dashboard.

The pipeline replaces its latest :class:`Snapshot` after each processed trace (a
single reference assignment, so a reader never sees a half-built one). The dashboard
and the headless status line read it at their own rate; the pipeline never waits for
them. Everything here is plain data (numpy arrays are copies owned by the snapshot).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

# Names of the running figures, in display order, with units (SI).
FIGURES = (
    ("peak_compressional_pa", "p_c", "Pa"),
    ("peak_rarefactional_pa", "p_r", "Pa"),
    ("acoustic_working_frequency_hz", "f_awf", "Hz"),
    ("pulse_intensity_integral_j_per_m2", "PII", "J/m^2"),
    ("pulse_average_intensity_w_per_m2", "I_pa", "W/m^2"),
    ("mechanical_index", "MI", ""),
)


@dataclass
class RunningFigure:
    """Running statistics of one parameter over the session.

    ``trend`` holds recent values (oldest first), at most a few hundred.
    """

    last: float = float("nan")
    minimum: float = float("nan")
    maximum: float = float("nan")
    mean: float = float("nan")
    count: int = 0
    trend: np.ndarray = field(default_factory=lambda: np.zeros(0))


@dataclass
class AlertView:
    """One alert as a display shows it."""

    alert_id: int
    time_s: float
    rule: str
    severity: str          # "info" | "warning" | "critical"
    message: str
    actions: tuple[str, ...]
    seq: int | None = None
    acknowledged: bool = False


@dataclass
class EventView:
    """One event of the session as a display lists it."""

    time_s: float
    kind: str              # an EventKind value
    text: str              # one line, e.g. "auto -> deconvolve"
    seq: int | None = None


@dataclass
class InstrumentView:
    name: str              # "digitiser" | "generator"
    resource: str
    identity: str
    connected: bool
    detail: str = ""       # e.g. "output on, 120 mVpp"
    ended: bool = False    # closed by the session at its end, not lost (as BenchView)


@dataclass
class BenchView:
    """The stage and the thermometer as a display shows them (the bench line).

    ``position_mm`` is every axis's latest position (empty while the stage is lost);
    ``reading_c`` and ``reading_age_s`` the thermometer's latest reading and its age
    now (None before the first); ``water_temperature_c`` the temperature the latest
    trace's conversion used, and ``water_source`` where it came from
    (``thermometer`` or ``bench``; "" before the first trace).
    """

    has_stage: bool = False
    stage_connected: bool = False
    stage_ended: bool = False          # closed by the session at its end, not lost
    stage_moving: bool = False
    position_mm: dict[str, float] = field(default_factory=dict)
    has_thermometer: bool = False
    thermometer_connected: bool = False
    thermometer_ended: bool = False
    reading_c: float | None = None
    reading_age_s: float | None = None
    max_age_s: float = float("nan")
    water_temperature_c: float = float("nan")
    water_source: str = ""


@dataclass
class ScanView:
    """A running scan as a display shows it (the map panel, the status line).

    Attributes
    ----------
    kind : str
        The plan's kind: ``line``, ``raster``, ``volume`` or ``points``.
    total, completed : int
        Points in the plan, and points completed (done or failed; resumed ones included).
    current : int or None
        The point being moved to or measured (None before the first and when ended).
    phase : str
        ``waiting`` (for the drive, say), ``moving``, ``settling``, ``acquiring``,
        ``paused``, ``ended``.
    why : str
        What a waiting, paused or ended scan waits for or ended on ("" otherwise).
    targets_mm : numpy.ndarray
        Shape ``(total, len(target_axes))``: every point's target, mm, in plan order.
    target_axes : tuple of str
        The columns of ``targets_mm``.
    grid_axes : tuple of str
        The scanned axes (those that vary; the first is the fast one); ``()`` when the
        targets lie on no grid (see :func:`tankside.monitor.record.scanpoints.plan_grid`).
    grid_coords_mm : tuple of numpy.ndarray
        Per grid axis, its sorted coordinates, mm.
    grid_index : numpy.ndarray
        Shape ``(total, len(grid_axes))``: each point's place on the grid.
    values : dict
        Result name (those of :data:`FIGURES`: ``peak_rarefactional_pa``, ...) -> array
        of ``total`` combined means, NaN for points not done or failed.
    failed : numpy.ndarray
        ``total`` booleans: points recorded as failed (never mapped as valid).
    time_left_s : float
        Estimated time to the end, s (NaN before the first point is done).
    beam : dict
        The beam figures of the points so far (:mod:`tankside.monitor.acoustics.beam`
        ``as_dict()``), empty until computed.
    version : int
        Changes whenever anything above does: a view of the same version is the same
        (its arrays are never written once handed out), so a display may keep it.
    """

    kind: str = ""
    total: int = 0
    completed: int = 0
    current: int | None = None
    phase: str = "waiting"
    why: str = ""
    targets_mm: np.ndarray = field(default_factory=lambda: np.zeros((0, 0)))
    target_axes: tuple[str, ...] = ()
    grid_axes: tuple[str, ...] = ()
    grid_coords_mm: tuple[np.ndarray, ...] = ()
    grid_index: np.ndarray = field(default_factory=lambda: np.zeros((0, 0), dtype=int))
    values: dict[str, np.ndarray] = field(default_factory=dict)
    failed: np.ndarray = field(default_factory=lambda: np.zeros(0, dtype=bool))
    time_left_s: float = float("nan")
    beam: dict = field(default_factory=dict)
    version: int = 0


@dataclass
class Snapshot:
    """The latest state of a live session.

    Waveform and spectrum arrays belong to the most recent converted trace.
    ``spectrum_db`` is the pressure spectrum magnitude in dB re its maximum;
    ``sensitivity_db`` is |M_L| on the same frequency grid in dB re its value at
    f_awf (NaN outside the calibrated band).
    """

    seq: int = -1
    time_s: float = float("nan")
    elapsed_s: float = 0.0
    # latest pressure waveform
    times_s: np.ndarray = field(default_factory=lambda: np.zeros(0))
    voltage_v: np.ndarray = field(default_factory=lambda: np.zeros(0))
    pressure_pa: np.ndarray = field(default_factory=lambda: np.zeros(0))
    # latest spectrum
    freqs_hz: np.ndarray = field(default_factory=lambda: np.zeros(0))
    spectrum_db: np.ndarray = field(default_factory=lambda: np.zeros(0))
    sensitivity_db: np.ndarray = field(default_factory=lambda: np.zeros(0))
    # latest result as a flat dict, keys as in `tankside convert --json`
    result: dict = field(default_factory=dict)
    method: str = ""
    narrowband_ok: bool | None = None
    narrowband_band_hz: tuple[float, float] = (float("nan"), float("nan"))
    narrowband_max_deviation_db: float = float("nan")
    # running figures, keyed by the names in FIGURES
    figures: dict[str, RunningFigure] = field(default_factory=dict)
    # alerts, newest last (at most a few hundred kept)
    alerts: list[AlertView] = field(default_factory=list)
    # instruments and session
    instruments: list[InstrumentView] = field(default_factory=list)
    traces_per_s: float = 0.0
    range_v: float = float("nan")
    range_fraction_used: float = float("nan")
    clipped_traces: int = 0
    queue_depth: int = 0
    queue_capacity: int = 0
    acquired: int = 0
    converted: int = 0
    stored: int = 0
    session_path: str = ""
    session_bytes: int = 0
    state: str = "starting"  # "starting" | "running" | "reconnecting" | "stopping" | "stopped"
    stop_reason: str = ""
    # generator output: True/False, None when unknown or no generator; and as text,
    # e.g. "output off (safe-off)" ("" without a generator)
    drive_on: bool | None = None
    drive_detail: str = ""
    # the latest trace holds a pulse above its noise (None before the first trace)
    pulse_present: bool | None = None
    no_pulse_traces: int = 0
    # converted traces whose result carries warnings (a number may be doubtful), and the
    # codes of the latest converted trace's warnings that count (() when none)
    doubtful_traces: int = 0
    last_warnings: tuple[str, ...] = ()
    # the running figures: time (s, Unix) of the last trace they took (NaN before one),
    # and why the latest trace was left out of them ("" when it was taken): "no pulse",
    # "drive off", "not converted", "clipped", "doubtful"
    figures_time_s: float = float("nan")
    figures_left_out: str = ""
    # traces left out of the running figures since they started, by reason
    figures_left_out_counts: dict[str, int] = field(default_factory=dict)
    # when (s, Unix) and why ("method change", "range change", "reset") the running
    # figures last started afresh; NaN and "" when they run from the session's start
    figures_since_s: float = float("nan")
    figures_since_reason: str = ""
    # the session's events (marks, method and range changes, drive on/off, ...), newest
    # last, at most a few hundred kept
    events: list[EventView] = field(default_factory=list)
    # the stage and the thermometer (None when the bench has neither)
    bench: BenchView | None = None
    # the scan (None when the session runs none)
    scan: ScanView | None = None
