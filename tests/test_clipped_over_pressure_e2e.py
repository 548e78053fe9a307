"""End to end on the simulated bench: an over-pressure hidden by clipping still trips safe-off.

The default scene gives about 185 kPa and 37 mV at the hydrophone at 2 Vpp. On the
0.05 V range (rails at +-25 mV) the trace clips and its pressure stops near 125 kPa,
under a 150 kPa limit. With auto-range off, or with 0.05 V the largest range the
digitiser offers, nothing can step the range up: over_pressure must count the clipped
trace (its pressure is a floor on the true one) and switch the generator off. The
generator starts with its output off and the operator switches it on at the
instrument (a plain SCPI command on its own socket); its state is read back the same
way.
"""

from __future__ import annotations

import pytest
from polling import wait_for
from scpi_client import scpi

from tankside.monitor.live.benchfile import load_bench
from tankside.monitor.live.session import LiveSession
from tankside.monitor.record.schema import EventKind
from tankside.monitor.record.store import SessionReader
from tankside.simulators.bench import DIGITISER_PROFILE_PATH, SimulatedBench
from tankside.simulators.scene import Drive

FAST = {"digitiser.record_length": 2000, "digitiser.trigger_timeout_s": 0.5,
        "digitiser.timeout_s": 1.0}
TRIGGER_PERIOD_S = 0.002
LIMIT_PA = 1.5e5
CLIPPING_RANGE_V = 0.05


@pytest.fixture
def sim():
    drive = Drive(output_on=False, amplitude_vpp=2.0, burst_period_s=TRIGGER_PERIOD_S)
    with SimulatedBench(seed=11, drive=drive) as bench:
        yield bench



def bench_without_drive_on(sim, tmp_path):
    path = sim.write_bench_file(tmp_path / "bench.toml", session_folder="sessions")
    # The session must not switch the drive on: the operator does, at the generator.
    path.write_text(path.read_text().replace("output = true\n", ""))
    return path


def run_until_safe_off(sim, bench, tmp_path):
    session = LiveSession.from_bench(bench, session_path=tmp_path / "s.db", duration_s=60)
    session.start()
    try:
        wait_for(lambda: session.snapshot().acquired >= 5, 20, "5 traces")
        assert scpi(sim.generator_port, "OUTP?") == "0"
        assert scpi(sim.generator_port, "OUTP ON", "OUTP?") == "1"
        wait_for(lambda: any(a.rule == "over_pressure" for a in session.snapshot().alerts),
                 20, "an over-pressure alert")
        wait_for(lambda: scpi(sim.generator_port, "OUTP?") == "0", 5, "output read back off")
        assert sim.scene.drive.output_on is False
    finally:
        session.stop("test done")
        assert session.wait(20)
    assert session.exit_status == "operator"
    with SessionReader(tmp_path / "s.db") as r:
        alerts = r.alerts()
        events = r.events()
        traces = list(r.iter_traces())
    return alerts, events, traces


def check_clipped_over_pressure(alerts, events, traces):
    over = [a for a in alerts if a["rule"] == "over_pressure"]
    assert len(over) == 1
    message = over[0]["message"]
    assert "at least" in message and "(clipped)" in message
    tripped = next(t for t in traces if t.raw.seq == over[0]["seq"])
    assert tripped.raw.clipped > 0
    assert tripped.raw.range_v == CLIPPING_RANGE_V
    p_c = tripped.result["peak_compressional_pa"]
    # the floor seen through the rails stays under the limit: without the clipped
    # margin nothing would have fired
    assert p_c < LIMIT_PA
    assert p_c >= LIMIT_PA * 0.5
    assert all(t.result is None or max(t.result["peak_compressional_pa"],
                                       abs(t.result["peak_rarefactional_pa"])) < LIMIT_PA
               for t in traces)
    safe_off = [e for e in events if e["kind"] == EventKind.SAFE_OFF]
    assert safe_off and safe_off[0]["detail"]["done"] is True
    assert safe_off[0]["detail"]["rule"] == "over_pressure"


def test_clipped_over_pressure_with_auto_range_off(sim, tmp_path):
    path = bench_without_drive_on(sim, tmp_path)
    bench = load_bench(path, {**FAST, "digitiser.range_v": CLIPPING_RANGE_V,
                              "alerts.over_pressure.limit_pa": LIMIT_PA,
                              "alerts.clipping.actions": ["record"]})
    alerts, events, traces = run_until_safe_off(sim, bench, tmp_path)
    check_clipped_over_pressure(alerts, events, traces)
    assert not [e for e in events if e["kind"] == "range-change"]
    assert all(t.raw.range_v == CLIPPING_RANGE_V for t in traces)


def test_clipped_over_pressure_at_the_largest_range(sim, tmp_path):
    # A profile whose largest range is 0.05 V: auto-range is on but has nowhere to go.
    profile = tmp_path / "small-ranges.toml"
    text = DIGITISER_PROFILE_PATH.read_text()
    ladder = "values_v = [0.02, 0.05, 0.1, 0.2, 0.5, 1.0, 2.0, 5.0]"
    assert ladder in text
    profile.write_text(text.replace(ladder, "values_v = [0.02, 0.05]"))
    path = bench_without_drive_on(sim, tmp_path)
    bench = load_bench(path, {**FAST, "digitiser.range_v": CLIPPING_RANGE_V,
                              "digitiser.profile": str(profile),
                              "alerts.over_pressure.limit_pa": LIMIT_PA})
    alerts, events, traces = run_until_safe_off(sim, bench, tmp_path)
    check_clipped_over_pressure(alerts, events, traces)
    assert "clipping" in [a["rule"] for a in alerts]
    assert all(t.raw.range_v == CLIPPING_RANGE_V for t in traces)
