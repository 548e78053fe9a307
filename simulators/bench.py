"""The simulated bench: a digitiser and a generator on 127.0.0.1 sharing one scene.

    with SimulatedBench(seed=1) as bench:
        bench.digitiser_resource     # "TCPIP0::127.0.0.1::<port>::SOCKET"
        bench.faults.stall_next_reply(2.0)
        bench.scene.set_position_m(0.0, 0.5e-3, 0.0)
        bench.write_bench_file(tmp_path / "bench.toml")

With ``port=N`` the digitiser listens on N and the generator on N + 1; the default 0
picks two free ports.
"""

from __future__ import annotations

import threading
import time
from pathlib import Path

from .dialects import DEFAULT_DIALECT
from .digitiser import SimulatedDigitiser
from .faults import FaultPlan
from .generator import SimulatedGenerator
from .hydrophone import DEMO_CALIBRATION_PATH
from .scene import Drive, Scene, SceneParameters
from .server import LOOPBACK, InstrumentServer
from .stage import SimulatedStage
from .thermometer import SimulatedThermometer

PROFILE_DIR = Path(__file__).resolve().parent / "profiles"
DIGITISER_PROFILE_PATH = PROFILE_DIR / "sim-digitiser.toml"
GENERATOR_PROFILE_PATH = PROFILE_DIR / "sim-generator.toml"

# Settings that suit the default scene: 3 cycles at 3.5 MHz, 2 Vpp -> about 0.18 MPa at
# the focus and 37 mV at the hydrophone, so a 0.1 V span is about three quarters used.
BENCH_DEFAULTS = {
    "record_length": 10000,
    "sample_rate_hz": 250e6,
    "range_v": 0.1,
    "trigger_source": "EXT",
    "trigger_level_v": 1.0,
}


class SimulatedBench:
    """Simulated digitiser and generator SCPI servers sharing one :class:`Scene`.

    Parameters
    ----------
    seed : int
        Seed of the digitiser's noise and jitter.
    faults : FaultPlan, optional
        Shared fault plan (a new one if None); also at :attr:`faults`.
    port : int
        Digitiser port (generator on ``port + 1``); 0 picks free ports.
    trigger_period_s : float, optional
        Burst (trigger) period at power-on; default 0.05 s (20 traces/s). Tests set it small.
    precomputed : int or bool
        If above 0 (or True, meaning 8), the digitiser completes acquisitions at once and
        serves this many pre-computed traces in turn (for fetch benchmarks).
    scene_parameters : SceneParameters, optional
    drive : Drive, optional
        The generator's power-on drive; by default the demo's settings with the
        output off, as most real generators power on.
    noise_v_rms, jitter_s : float
        Digitiser front-end noise (V rms) and trigger jitter (s rms).
    dialect : str
        The digitiser's command words (:data:`~tankside.simulators.dialects.DIALECTS`);
        the default speaks ``simulators/profiles/sim-digitiser.toml``. Another dialect
        needs its own profile: set :attr:`digitiser_profile_path` before writing a bench
        file.
    start : bool
        Start the servers at once (default); otherwise call :meth:`start`.
    stage, thermometer : bool
        Also start a simulated stage (moving the scene's hydrophone) and a simulated
        thermometer, each on a pty: :attr:`stage`, :attr:`thermometer` and their
        ``device_path``.
    """

    def __init__(self, seed: int = 0, faults: FaultPlan | None = None, *, port: int = 0,
                 trigger_period_s: float | None = None, precomputed: int | bool = 0,
                 scene_parameters: SceneParameters | None = None, drive: Drive | None = None,
                 noise_v_rms: float = 0.3e-3, jitter_s: float = 0.5e-9, start: bool = True,
                 stage: bool = False, thermometer: bool = False,
                 dialect: str = DEFAULT_DIALECT):
        if not (port == 0 or 1 <= port <= 65534):
            raise ValueError(f"port must be 0 or 1..65534 (the generator takes port + 1), "
                             f"got {port}")
        self.faults = faults if faults is not None else FaultPlan()
        self.seed = seed
        drive = drive or Drive(output_on=False)
        if trigger_period_s is not None:
            drive = Drive(drive.output_on, drive.amplitude_vpp, drive.frequency_hz,
                          drive.burst_cycles, float(trigger_period_s))
        self.scene = Scene(scene_parameters, drive=drive)
        self._stop = threading.Event()
        self.digitiser = SimulatedDigitiser(
            self.scene, seed=seed, clock=time.monotonic, sleep=self._stop.wait,
            noise_v_rms=noise_v_rms, jitter_s=jitter_s, precomputed=precomputed,
            dialect=dialect,
            missed_triggers=lambda: self.faults.take_missed_triggers("digitiser"))
        self.generator = SimulatedGenerator(self.scene, power_on=drive)
        self._port = port
        self.digitiser_server = InstrumentServer(self.digitiser, name="digitiser", host=LOOPBACK,
                                                 port=port, faults=self.faults,
                                                 stop_event=self._stop)
        self.generator_server = InstrumentServer(self.generator, name="generator", host=LOOPBACK,
                                                 port=port + 1 if port else 0, faults=self.faults,
                                                 stop_event=self._stop)
        self.digitiser_profile_path = DIGITISER_PROFILE_PATH
        self.generator_profile_path = GENERATOR_PROFILE_PATH
        self.calibration_path = DEMO_CALIBRATION_PATH
        self._serial = (stage, thermometer)
        self.stage: SimulatedStage | None = None
        self.thermometer: SimulatedThermometer | None = None
        self._started = False
        if start:
            self.start()

    # ------------------------------------------------------------ lifecycle
    def start(self) -> SimulatedBench:
        if self._started:
            return self
        self.digitiser_server.start()
        try:
            self.generator_server.start()
        except OSError:
            self.digitiser_server.close()
            raise
        stage, thermometer = self._serial
        try:
            if stage and self.stage is None:
                # the stage starts where the scene's hydrophone is (stage origin at the
                # focus)
                x, y, z = self.scene.position_m
                self.stage = SimulatedStage(self.scene, start_mm=(1e3 * x, 1e3 * y, 1e3 * z))
            if thermometer and self.thermometer is None:
                self.thermometer = SimulatedThermometer(seed=self.seed)
        except OSError:            # no pty (PtyUnavailable): nothing is left serving
            self._started = True
            self.close()
            raise
        self._started = True
        return self

    def close(self) -> None:
        """Stop both servers (idempotent)."""
        self._stop.set()
        if self._started:
            self.digitiser_server.close()
            self.generator_server.close()
            self._started = False
        for device in (self.stage, self.thermometer):
            if device is not None:
                device.close()

    def __enter__(self) -> SimulatedBench:
        return self.start()

    def __exit__(self, *exc) -> None:
        self.close()

    # ------------------------------------------------------------ addresses
    @property
    def digitiser_port(self) -> int:
        return self.digitiser_server.port

    @property
    def generator_port(self) -> int:
        return self.generator_server.port

    @property
    def digitiser_resource(self) -> str:
        return self.digitiser_server.resource

    @property
    def generator_resource(self) -> str:
        return self.generator_server.resource

    # ------------------------------------------------------------ bench file
    def bench_file_text(self, *, session_folder: str = "sessions") -> str:
        """The bench TOML (the layout tankside.monitor.live.benchfile reads) for this bench,
        as text."""
        d = self.scene.drive
        s = BENCH_DEFAULTS
        return "\n".join([
            "# Bench file for the tankside simulated bench (invented demo scene).",
            "# Written by `tankside simulate`; valid while that process runs.",
            "[digitiser]",
            f'resource = "{self.digitiser_resource}"',
            f"profile = {_toml_str(self.digitiser_profile_path)}",
            'visa_library = "@py"',
            f"record_length = {s['record_length']}",
            f"sample_rate_hz = {s['sample_rate_hz']!r}",
            f"range_v = {s['range_v']!r}",
            f'trigger_source = "{s["trigger_source"]}"',
            f"trigger_level_v = {s['trigger_level_v']!r}",
            "",
            "[generator]",
            f'resource = "{self.generator_resource}"',
            f"profile = {_toml_str(self.generator_profile_path)}",
            'visa_library = "@py"',
            f"amplitude_vpp = {d.amplitude_vpp!r}",
            f"frequency_hz = {d.frequency_hz!r}",
            f"burst_cycles = {d.burst_cycles}",
            f"burst_period_s = {d.burst_period_s!r}",
            "# Applied with the output off. tankside never switches the output on by",
            "# itself: use the dashboard's drive key, or watch --drive-on.",
            "leave_on_at_end = false",
            "",
            "[calibration]",
            f"file = {_toml_str(self.calibration_path)}",
            "",
            "[water]",
            "temperature_c = 20.0",
            "",
            "# For an open-circuit calibration, give the loading (the demo file is loaded):",
            "# [loading]",
            "# hydrophone_capacitance_f = 100e-12",
            "# cable_capacitance_f = 50e-12",
            "",
            "# Alert thresholds and actions (README, 'Alerts'); take the rated maximum",
            "# from your hydrophone's data sheet:",
            "# [alerts.over_pressure]",
            "# rated_max_pa = 5.0e6",
            '# actions = ["record", "bell", "safe-off"]',
            "",
            "[session]",
            f"folder = {_toml_str(session_folder)}",
            "",
            *self._serial_sections(),
        ])

    def _serial_sections(self) -> list[str]:
        lines: list[str] = []
        if self.stage is not None:
            lines += [
                "# The simulated stage (stage origin at the focus; invented soft limits that",
                "# keep the hydrophone clear of the invented transducer and walls).",
                "[stage]",
                f"profile = {_toml_str(PROFILE_DIR / 'sim-stage.toml')}",
                f"port = {_toml_str(self.stage.device_path)}",
                "",
                "[stage.limits]",
                "x = [-20.0, 20.0]",
                "y = [-20.0, 20.0]",
                "z = [-30.0, 30.0]",
                "",
            ]
        if self.thermometer is not None:
            lines += [
                "# The simulated water thermometer (invented slow drift).",
                "[thermometer]",
                f"profile = {_toml_str(PROFILE_DIR / 'sim-thermometer.toml')}",
                f"port = {_toml_str(self.thermometer.device_path)}",
                "max_age_s = 30.0",
                "",
            ]
        return lines

    def write_bench_file(self, path: str | Path, *, session_folder: str = "sessions") -> Path:
        """Write the bench TOML to ``path``; return the path."""
        path = Path(path)
        # written beside and renamed: a reader never sees half a bench file
        partial = path.with_name(f".{path.name}.partial")
        partial.write_text(self.bench_file_text(session_folder=session_folder),
                           encoding="utf-8")
        partial.replace(path)
        return path


def _toml_str(value: object) -> str:
    text = str(value).replace("\\", "\\\\").replace('"', '\\"')
    return f'"{text}"'
