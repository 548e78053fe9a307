"""The simulated bench with its serial instruments: the stage, moved through tankside's
stage driver over a pty, moves the hydrophone in the scene, and the digitiser's traces
(fetched over TCP through the SCPI driver) follow it."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.optimize import brentq

from tankside.drivers.digitiser import Digitiser, DigitiserSettings
from tankside.drivers.profile import load_profile
from tankside.drivers.scpi import ScpiLink
from tankside.drivers.stage import load_stage_profile, open_stage
from tankside.drivers.thermometer import load_thermometer_profile, open_thermometer
from tankside.simulators.bench import PROFILE_DIR, SimulatedBench
from tankside.simulators.scene import Drive, beam_factor

SETTINGS = DigitiserSettings(record_length=10000, sample_rate_hz=250e6, range_v=0.1,
                             trigger_source="EXT", trigger_level_v=1.0)


@pytest.fixture
def bench():
    # the simulated generator powered on with its output on: a test of the instruments
    with SimulatedBench(seed=4, trigger_period_s=0.005, drive=Drive(), stage=True,
                        thermometer=True) as b:
        yield b


def _peak(dig) -> float:
    return float(np.median([np.abs(dig.acquire(k, trigger_timeout_s=1.0).volts()).max()
                            for k in range(5)]))


def test_traces_follow_the_stage(bench):
    link = ScpiLink.open(bench.digitiser_resource, timeout_s=2.0, resync_timeout_s=5.0)
    dig = Digitiser(link, load_profile(bench.digitiser_profile_path))
    dig.configure(SETTINGS)
    stage = open_stage(load_stage_profile(PROFILE_DIR / "sim-stage.toml"),
                       port=bench.stage.device_path, limits={"x": (-10, 10)})
    try:
        at_focus = _peak(dig)
        params, f = bench.scene.params, bench.scene.drive.frequency_hz
        on_axis = beam_factor((0.0, 0.0, 0.0), f, params)
        # where the scene's beam (invented) falls to half its on-axis value in the
        # geometric focal plane (scipy.optimize.brentq inside the main lobe)
        x_mm = 1e3 * brentq(lambda x: beam_factor((x, 0.0, 0.0), f, params) - 0.5 * on_axis,
                            0.0, 1.0e-3)
        stage.move_to({"x": x_mm})
        assert stage.wait_until_still(5.0)["x"] == pytest.approx(x_mm, abs=1e-3)
        off_axis = _peak(dig)
        # the peak voltage follows the scene's beam; it also carries the nonlinear
        # harmonics, hence the 5 % allowance
        assert off_axis / at_focus == pytest.approx(0.5, rel=0.05)
        assert bench.scene.position_m[0] == pytest.approx(x_mm * 1e-3, abs=1e-6)
    finally:
        stage.close()
        link.close(quiet=True)


def test_bench_thermometer_reads_water(bench):
    thermometer = open_thermometer(load_thermometer_profile(PROFILE_DIR / "sim-thermometer.toml"),
                                   port=bench.thermometer.device_path)
    try:
        assert abs(thermometer.read_celsius() - bench.thermometer.true_celsius()) < 0.05
    finally:
        thermometer.close()
