"""A deterministic stand-in for tankside.monitor.live.session.LiveSession that feeds the dashboard.

Data are invented for tests only: a 2.5 MHz tone burst with a little asymmetry (as a
mildly nonlinear field would show), its spectrum, an invented smooth hydrophone
sensitivity, and running figures over the generated traces. Nothing depends on the
clock: a new snapshot appears only when ``advance()`` is called (or on every
``snapshot()`` call when ``auto_advance`` is set).
"""

from __future__ import annotations

import numpy as np

from tankside.monitor.live.snapshot import (
    FIGURES,
    AlertView,
    InstrumentView,
    RunningFigure,
    ScanView,
    Snapshot,
)

DT_S = 4e-9            # 250 MS/s
N = 2000
F0_HZ = 2.5e6


def _burst(seq: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    t = np.arange(N) * DT_S
    amp = 1.0e6 * (1.0 + 0.05 * np.sin(0.3 * seq))       # about 1 MPa, slowly varying
    env = np.exp(-0.5 * ((t - 4e-6) / 0.8e-6) ** 2)
    p = amp * env * (np.sin(2 * np.pi * F0_HZ * t) + 0.25 * np.sin(4 * np.pi * F0_HZ * t - 0.8))
    p[1234] += 3.0 * amp                                  # a one-sample spike the plot must keep
    sensitivity_v_per_pa = 50e-9
    return t, p * sensitivity_v_per_pa, p


class FakeLiveSession:
    """Implements start/snapshot/mark/acknowledge/set_method/stop/wait/exit_code/running."""

    def __init__(self, *, auto_advance: bool = False, session_path: str = "sessions/fake.db"):
        self.auto_advance = auto_advance
        self.session_path = session_path
        self.marks: list[str] = []
        self.acknowledged: list[int] = []
        self.methods: list[str] = []
        self.stops: list[str] = []
        self.resets: list[str] = []
        self.snapshot_calls = 0
        self.running = False
        self.exit_code = 0
        self.method_requested = "auto"
        self._seq = -1
        self._alerts: list[AlertView] = []
        self._history: dict[str, list[float]] = {key: [] for key, _, _ in FIGURES}
        self._snap = Snapshot()
        self.scan: ScanView | None = None     # published with the next snapshot

    # -- the LiveSession interface -------------------------------------------------------------
    def start(self) -> None:
        self.running = True
        self.advance()

    def snapshot(self) -> Snapshot:
        self.snapshot_calls += 1
        if self.auto_advance and self.running:
            self.advance()
        return self._snap

    def mark(self, note: str) -> None:
        self.marks.append(note)

    def acknowledge(self, alert_id: int) -> None:
        self.acknowledged.append(alert_id)
        for alert in self._alerts:
            if alert.alert_id == alert_id:
                alert.acknowledged = True
        self._publish()

    def set_method(self, method: str) -> None:
        if method not in ("auto", "deconvolve", "narrowband"):
            raise ValueError(f"unknown conversion method {method!r}")
        self.methods.append(method)
        self.method_requested = method

    def reset_figures(self, cause: str = "operator") -> None:
        self.resets.append(cause)

    def stop(self, reason: str = "operator") -> None:
        self.stops.append(reason)
        self.running = False
        self._publish(state="stopped", stop_reason=reason)

    def wait(self, timeout_s: float | None = None) -> bool:
        return not self.running

    # -- test controls ----------------------------------------------------------------
    def advance(self, n: int = 1) -> None:
        """Generate ``n`` more traces and publish a new snapshot."""
        for _ in range(n):
            self._seq += 1
            for key, value in self._figures_of(self._seq).items():
                self._history[key].append(value)
        self._publish()

    def add_alert(self, rule: str, severity: str, message: str,
                  actions: tuple[str, ...] = ("record",)) -> int:
        alert_id = len(self._alerts) + 1
        self._alerts.append(AlertView(alert_id=alert_id, time_s=float(self._seq) * 0.05,
                                      rule=rule, severity=severity, message=message,
                                      actions=actions, seq=self._seq))
        self._publish()
        return alert_id

    # -- internals -------------------------------------------------------------------
    @staticmethod
    def _figures_of(seq: int) -> dict[str, float]:
        _, _, p = _burst(seq)
        pc, pr = float(p.max()), float(-p.min())
        return {
            "peak_compressional_pa": pc,
            "peak_rarefactional_pa": pr,
            "acoustic_working_frequency_hz": F0_HZ,
            "pulse_intensity_integral_j_per_m2": 0.02 * (pc / 1e6) ** 2,
            "pulse_average_intensity_w_per_m2": 1.0e4 * (pc / 1e6) ** 2,
            "mechanical_index": pr / 1e6 / np.sqrt(F0_HZ / 1e6),
        }

    def _publish(self, state: str | None = None, stop_reason: str = "") -> None:
        seq = max(self._seq, 0)
        t, v, p = _burst(seq)
        freqs = np.fft.rfftfreq(N, DT_S)
        mag = np.abs(np.fft.rfft(p))
        spectrum_db = 20 * np.log10(np.maximum(mag, 1e-12 * mag.max()) / mag.max())
        # invented sensitivity: a gentle resonance, calibrated 0.5 .. 40 MHz
        sens = 1.0 / np.sqrt((1 - (freqs / 60e6) ** 2) ** 2 + (freqs / 120e6) ** 2)
        sens_db = 20 * np.log10(sens / np.interp(F0_HZ, freqs, sens))
        sens_db[(freqs < 0.5e6) | (freqs > 40e6)] = np.nan
        lo, hi = F0_HZ / 2, min(40e6, 8 * F0_HZ)
        window = (freqs >= lo) & (freqs <= hi)
        worst = float(np.nanmax(np.abs(sens_db[window])))
        figures = {}
        for key, values in self._history.items():
            arr = np.asarray(values, dtype=float)
            if arr.size:
                figures[key] = RunningFigure(last=arr[-1], minimum=arr.min(), maximum=arr.max(),
                                             mean=arr.mean(), count=arr.size,
                                             trend=arr[-300:].copy())
        last = {k: f.last for k, f in figures.items()}
        self._snap = Snapshot(
            seq=self._seq, time_s=self._seq * 0.05, elapsed_s=self._seq * 0.05,
            times_s=t, voltage_v=v, pressure_pa=p,
            freqs_hz=freqs, spectrum_db=spectrum_db, sensitivity_db=sens_db,
            result=dict(last, method="narrowband"), method="narrowband",
            narrowband_ok=worst <= 3.0, narrowband_band_hz=(lo, hi),
            narrowband_max_deviation_db=worst, figures=figures,
            alerts=[AlertView(**vars(a)) for a in self._alerts],
            instruments=[
                InstrumentView("digitiser", "TCPIP0::127.0.0.1::5025::SOCKET",
                               "Invented Bench Co,DIG-1,0001,1.0", True),
                InstrumentView("generator", "TCPIP0::127.0.0.1::5026::SOCKET",
                               "Invented Bench Co,GEN-1,0002,1.0", True, "output on, 120 mVpp"),
            ],
            traces_per_s=20.0, range_v=0.5, range_fraction_used=0.62, clipped_traces=0,
            queue_depth=1, queue_capacity=64, acquired=self._seq + 1, converted=self._seq + 1,
            stored=self._seq + 1, session_path=self.session_path, session_bytes=123_456,
            state=state or ("running" if self.running else "stopped"), stop_reason=stop_reason,
            scan=self.scan,
        )
