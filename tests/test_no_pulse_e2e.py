"""End to end on the simulated bench: safe-off, then noise; then the drive back on.

After an over-pressure safe-off the digitiser sees noise only. The session must say
"source off / no pulse", keep storing raw traces, and raise no conversion or drift
alerts nor step the range down on that noise. When the operator switches the
output on again at the generator (here a plain SCPI command on its own socket),
the session notices within about two seconds and judges the pulse again.
"""

from __future__ import annotations

import time

import numpy as np
import pytest
from polling import wait_for
from scpi_client import scpi

from tankside.monitor.dashboard.app import source_state
from tankside.monitor.headless import status_line
from tankside.monitor.live.benchfile import load_bench
from tankside.monitor.live.session import LiveSession
from tankside.monitor.record.store import SessionReader
from tankside.simulators.bench import SimulatedBench

FAST = {"digitiser.record_length": 2000, "digitiser.trigger_timeout_s": 0.5,
        "digitiser.timeout_s": 1.0}
TRIGGER_PERIOD_S = 0.002
LIMIT_PA = 1.5e5          # the default scene gives about 0.18 MPa at 2 Vpp: trips at once
BACK_ON_VPP = 1.2         # about 0.11 MPa: under the limit, 0.44 of the 0.1 V half-span


@pytest.fixture
def sim():
    with SimulatedBench(seed=5, trigger_period_s=TRIGGER_PERIOD_S) as bench:
        yield bench



def test_noise_after_safe_off_then_drive_back_on(sim, tmp_path):
    sim.write_bench_file(tmp_path / "bench.toml", session_folder="sessions")
    bench = load_bench(tmp_path / "bench.toml",
                       {**FAST, "alerts.over_pressure.limit_pa": LIMIT_PA})
    session = LiveSession.from_bench(bench, session_path=tmp_path / "s.db", duration_s=60,
                                     drive_on_at_start="test operator")
    session.start()
    try:
        # Safe-off on trace 0, then a good stretch of noise (at least 120 traces, so a
        # 20-trace drift window or a 10-trace under-use count would have filled).
        wait_for(lambda: session.snapshot().acquired >= 130, 20, "130 traces")
        snap = session.snapshot()
        assert sim.scene.drive.output_on is False
        assert snap.drive_on is False and snap.pulse_present is False
        assert snap.drive_detail == "output off (safe-off)"
        generator = next(v for v in snap.instruments if v.name == "generator")
        assert generator.detail == "output off (safe-off)"
        assert "SOURCE OFF / NO PULSE: output off (safe-off)" in status_line(snap)
        assert [a.rule for a in snap.alerts] == ["over_pressure", "no_pulse"]
        assert snap.range_v == 0.1
        # the dashboard's banner and figures panel say so, from the same snapshot
        assert source_state(snap)[0] == "safe-off"
        assert snap.figures_left_out == "drive off"
        quiet_until = snap.acquired

        # The operator lowers the drive and switches it on at the generator.
        assert scpi(sim.generator_port, f"VOLT {BACK_ON_VPP}", "OUTP ON", "OUTP?") == "1"
        t_on = time.monotonic()
        wait_for(lambda: session.snapshot().drive_on is True, 5, "drive-on noticed")
        noticed_s = time.monotonic() - t_on
        assert noticed_s < 2.0
        wait_for(lambda: session.snapshot().pulse_present is True, 5, "pulse back")
        back_at = session.snapshot().acquired
        wait_for(lambda: session.snapshot().acquired >= back_at + 40, 20, "40 more traces")
        snap = session.snapshot()
        assert snap.drive_detail == "output on"
        assert "NO PULSE" not in status_line(snap) and "drive on" in status_line(snap)
        assert source_state(snap) == ("", "")
        assert snap.figures_left_out == "" and snap.figures_time_s >= snap.time_s
    finally:
        session.stop("test done")
        assert session.wait(20)
    assert session.exit_status == "operator"

    with SessionReader(tmp_path / "s.db") as r:
        rules = [a["rule"] for a in r.alerts()]
        events = r.events()
        traces = list(r.iter_traces())
    # Alerts: the over-pressure and one no-pulse note; no flood on noise.
    assert rules == ["over_pressure", "no_pulse"]
    assert not [e for e in events if e["kind"] == "range-change"]
    drive = [(e["kind"], e["detail"]["cause"]) for e in events
             if e["kind"] in ("drive-on", "drive-off")]
    # off as found, on by the operator, off by the rule, on again at the instrument,
    # off at the end of the session
    assert drive == [("drive-off", "start"), ("drive-on", "test operator"),
                     ("drive-off", "safe-off"), ("drive-on", "generator"),
                     ("drive-off", "end of session")]
    on_again = next(e for e in events if e["kind"] == "drive-on"
                    and e["detail"]["cause"] == "generator")["detail"]["before_seq"]
    assert quiet_until <= on_again
    # Every raw trace stored; the noise ones flagged.
    assert [t.raw.seq for t in traces] == list(range(len(traces)))
    assert all(t.raw.range_v == 0.1 for t in traces)
    first = traces[0]
    assert first.result["peak_compressional_pa"] >= LIMIT_PA
    assert "no_pulse" not in first.flags and "drive_off" not in first.flags
    assert all(t.flags.get("drive_off") for t in traces[1:on_again])
    # Up to the switch-on the traces are noise; between it and the next output query
    # they may hold pulses already (judged as drive off: over-pressure live, the rest
    # waiting).
    noise = traces[1:quiet_until]
    assert all(t.flags.get("no_pulse") for t in noise)
    assert np.abs(noise[-1].raw.volts()).max() < 0.1 * np.abs(first.raw.volts()).max()
    # Back on: pulses again, at the lowered drive (the scene's pressure is proportional
    # to the drive amplitude, simulators/scene.py: pressure_per_vpp_pa * amplitude_vpp;
    # its finite-amplitude distortion moves the peaks by a few per cent at most here).
    later = [t for t in traces[on_again:] if "no_pulse" not in t.flags]
    assert len(later) >= 40
    assert all(t.result is not None and "drive_off" not in t.flags for t in later[-40:])
    expected_pa = first.result["peak_compressional_pa"] * BACK_ON_VPP / 2.0
    p_c = np.median([t.result["peak_compressional_pa"] for t in later[-40:]])
    assert p_c == pytest.approx(expected_pa, rel=0.1)
