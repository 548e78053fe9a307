"""Running figures on the simulated bench (127.0.0.1): what they leave out, when they restart.

The scene is the simulator's invented default (about 0.18 MPa at 2 Vpp). On a 20 mV
range every trace clips: its peaks are floors hidden by the rails, so none may enter
the figures. A method change, a reset asked by the operator and a range change each
start the figures afresh, and the display is told when and why.
"""

from __future__ import annotations

import math

import pytest
from polling import wait_for

from tankside.monitor.live.actions import Cause, SetRange
from tankside.monitor.live.benchfile import load_bench
from tankside.monitor.live.session import LiveSession
from tankside.monitor.record.store import SessionReader
from tankside.simulators.bench import SimulatedBench

FAST = {"digitiser.record_length": 2000, "digitiser.trigger_timeout_s": 0.5,
        "digitiser.timeout_s": 1.0, "digitiser.range_v": 0.02,
        "alerts.clipping.actions": ["record"]}


@pytest.fixture
def sim():
    with SimulatedBench(seed=7, trigger_period_s=0.002) as bench:
        yield bench


def test_clipped_left_out_and_restarts_shown_and_recorded(sim, tmp_path):
    sim.write_bench_file(tmp_path / "bench.toml", session_folder="sessions")
    bench = load_bench(tmp_path / "bench.toml", FAST)
    session = LiveSession.from_bench(bench, session_path=tmp_path / "s.db", duration_s=60,
                                     drive_on_at_start="test operator")
    session.start()

    def figures_count(snap) -> int:
        return snap.figures["peak_rarefactional_pa"].count

    try:
        wait_for(lambda: session.snapshot().figures_left_out_counts.get("clipped", 0) >= 30,
                 20, "30 clipped traces")
        snap = session.snapshot()
        assert snap.clipped_traces >= 30 and snap.figures_left_out == "clipped"
        assert figures_count(snap) == 0        # every trace clipped: none taken
        assert not math.isfinite(snap.figures_since_s)       # running from the start

        session.set_method("deconvolve")
        wait_for(lambda: session.snapshot().figures_since_reason == "method change", 10,
                 "restart on the method change")
        session.reset_figures("test operator")
        wait_for(lambda: session.snapshot().figures_since_reason == "reset", 10,
                 "restart on the reset")
        reset_at = session.snapshot().figures_since_s
        assert math.isfinite(reset_at)
        # a range wide enough for the pulse: the figures restart and fill again
        session._acq.commands.put(SetRange(0.5, Cause(rule="test", seq=None)))
        wait_for(lambda: session.snapshot().figures_since_reason == "range change", 10,
                 "restart on the range change")
        wait_for(lambda: figures_count(session.snapshot()) >= 20, 20, "20 good traces")
        snap = session.snapshot()
        assert snap.figures_since_s >= reset_at
        assert "clipped" not in snap.figures_left_out_counts
        assert snap.figures["peak_rarefactional_pa"].minimum > 0
        session.mark("after the range change")
        wait_for(lambda: any(e.kind == "mark" for e in session.snapshot().events), 5,
                 "the mark in the snapshot's events")
        # the displays' event log holds what the file does
        shown = [(e.kind, e.text) for e in session.snapshot().events]
        assert ("drive-on", "by test operator") in shown
        assert ("method-change", "auto -> deconvolve") in shown
        assert ("figures-reset", "by test operator") in shown
        assert ("mark", "after the range change") in shown
        assert any(kind == "range-change" and text.endswith("-> 0.5 V") for kind, text in shown)
    finally:
        session.stop("test done")
        assert session.wait(20)

    with SessionReader(tmp_path / "s.db") as r:
        events = r.events()
    kinds = [e["kind"] for e in events]
    assert kinds.count("figures-reset") == 1
    reset = next(e for e in events if e["kind"] == "figures-reset")
    assert reset["detail"] == {"cause": "test operator"}
    assert kinds.index("method-change") < kinds.index("figures-reset") < \
        max(i for i, k in enumerate(kinds) if k == "range-change")
