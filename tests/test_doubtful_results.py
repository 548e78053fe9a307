"""Doubtful numbers are said where they are read: stored, exported, counted, alerted.

The warnings themselves come from the converter (tests/test_conversion_world.py); here
they travel: into the session file and its exports, the headless status line, the
dashboard's figures panel and the doubtful_result rule.
"""

from __future__ import annotations

import csv
import json

import pytest
from alert_samples import engine, obs, result

from tankside.monitor.cli import main
from tankside.monitor.live.benchfile import load_bench
from tankside.monitor.live.session import LiveSession
from tankside.monitor.outcome import ExitCode
from tankside.monitor.record.store import SessionReader
from tankside.simulators.bench import SimulatedBench


def _warned(*codes):
    """A trace whose result carries warnings with these codes (as the processing stage
    hands them to the rules)."""
    return {"result": result(), "warning_codes": codes}


class TestRule:
    def test_fires_once_when_warnings_persist(self):
        e = engine()
        fired = [f.rule for i in range(12) for f in e.on_trace(obs(i, **_warned("low_snr")))]
        assert fired == ["doubtful_result"]
        # the default needs 5 in a row
        e = engine()
        firings = [e.on_trace(obs(i, **_warned("low_snr"))) for i in range(5)]
        assert [bool(f) for f in firings] == [False, False, False, False, True]
        assert "low_snr" in firings[-1][0].message

    def test_mi_not_derated_alone_does_not_count_by_default(self):
        e = engine()
        assert not any(e.on_trace(obs(i, **_warned("mi_not_derated"))) for i in range(20))
        e = engine(doubtful_result={"ignore": []})
        assert any(e.on_trace(obs(i, **_warned("mi_not_derated"))) for i in range(20))

    def test_a_clean_trace_breaks_the_run(self):
        e = engine(doubtful_result={"consecutive_traces": 3})
        seq = [_warned("gated_out_arrivals"), _warned("gated_out_arrivals"), _warned()] * 4
        assert not any(e.on_trace(obs(i, **r)) for i, r in enumerate(seq))

    def test_ignore_must_be_a_list_of_words(self):
        from tankside.monitor.errors import ConfigError
        from tankside.monitor.live.rules import AlertConfig
        with pytest.raises(ConfigError, match="doubtful_result.ignore"):
            AlertConfig.from_table({"doubtful_result": {"ignore": "low_snr"}})


@pytest.fixture
def recorded(tmp_path):
    # the simulated bench at its default noise (the demo's): its results carry warnings
    # (mi_not_derated on every trace, as no derating depth is set)
    with SimulatedBench(seed=3, trigger_period_s=0.005) as sim:
        path = sim.write_bench_file(tmp_path / "bench.toml", session_folder="sessions")
        bench = load_bench(path, {"digitiser.record_length": 4000})
        session = LiveSession.from_bench(bench, session_path=tmp_path / "s.db", max_traces=12,
                                         drive_on_at_start="test operator")
        session.start()
        assert session.wait(60)
    return tmp_path / "s.db", session


def test_warnings_and_snr_are_stored_with_each_trace_and_exported(recorded, tmp_path):
    db, _ = recorded
    with SessionReader(db) as r:
        stored = r.trace(5).result
    codes = [w["code"] for w in json.loads(stored["warnings"])]
    assert "mi_not_derated" in codes
    assert 20.0 < stored["snr_db"] < 120.0
    assert 0.0 <= stored["gate_start_s"] < stored["gate_end_s"]
    out = tmp_path / "r.csv"
    assert main(["export", str(db), "--results", str(out)]) == ExitCode.OK
    with open(out, newline="", encoding="utf-8") as fh:
        rows = list(csv.DictReader(fh))
    assert len(rows) == 12 and "mi_not_derated" in rows[5]["warnings"]
    assert float(rows[5]["snr_db"]) == pytest.approx(stored["snr_db"])
    h5 = tmp_path / "s.h5"
    assert main(["export", str(db), "--hdf5", str(h5)]) == ExitCode.OK
    import h5py
    with h5py.File(h5) as f:
        found = [k for k in f.keys()]
        assert found, "HDF5 export holds datasets"
        names = set()
        f.visit(names.add)
        assert any(n.endswith("warnings") for n in names)
        assert any(n.endswith("snr_db") for n in names)


def test_headless_counts_doubtful_traces_without_the_ignored_code(recorded):
    from tankside.monitor.headless import status_line

    _, session = recorded
    snap = session.snapshot()
    assert "| doubtful " in status_line(snap)
    # mi_not_derated alone does not make a trace doubtful (the rule's ignore list)
    assert "mi_not_derated" not in snap.last_warnings
