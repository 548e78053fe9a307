"""`tankside watch` on the simulated bench: protection switched off is printed and recorded.

``--alert over_pressure.enabled=false`` (or an over-pressure rule without actions, or
without safe-off) is accepted, but the command prints a warning before the session
starts and the session file carries the same words in its metadata.
"""

from __future__ import annotations

import textwrap

import pytest

from tankside.monitor.cli import main
from tankside.monitor.outcome import ExitCode
from tankside.monitor.record.schema import META_PROTECTION_WARNINGS
from tankside.monitor.record.store import SessionReader
from tankside.simulators.bench import SimulatedBench

TRIGGER_PERIOD_S = 0.002


@pytest.fixture
def sim():
    with SimulatedBench(seed=9, trigger_period_s=TRIGGER_PERIOD_S) as bench:
        yield bench


def bench_file(sim, tmp_path, extra: str = ""):
    path = sim.write_bench_file(tmp_path / "bench.toml", session_folder="sessions")
    text = path.read_text()
    text = text.replace("record_length = 10000", "record_length = 2000")
    text = text.replace("[digitiser]\n", "[digitiser]\ntrigger_timeout_s = 0.5\ntimeout_s = 1.0\n")
    path.write_text(text + textwrap.dedent(extra))
    return path


def watch(path, db, *extra):
    return main(["watch", "--accept-caution", "--bench", str(path), "--headless", "--traces", "10",
                 "--session", str(db), "--status-every", "0.5", *extra])


@pytest.mark.parametrize(("option", "words"), [
    ("over_pressure.enabled=false", "over_pressure is disabled"),
    ("over_pressure.actions=[]", "over_pressure has no actions"),
    ('over_pressure.actions=["record","bell"]', "does not switch the drive off"),
])
def test_alert_option_that_switches_protection_off(sim, tmp_path, capsys, option, words):
    db = tmp_path / "w.db"
    assert watch(bench_file(sim, tmp_path), db, "--alert", option) == ExitCode.OK
    err = capsys.readouterr().err
    warning = next(line for line in err.splitlines() if "WARNING" in line)
    assert warning.startswith("tankside: WARNING: protection off: ") and words in warning
    with SessionReader(db) as r:
        recorded = r.metadata[META_PROTECTION_WARNINGS]
        assert len(r.seqs()) == 10
    assert len(recorded) == 1 and words in recorded[0]
    assert warning.endswith(recorded[0])


def test_bench_file_rule_without_safe_off_is_said_aloud(sim, tmp_path, capsys):
    db = tmp_path / "w.db"
    path = bench_file(sim, tmp_path, """
        [alerts.over_pressure]
        actions = ["record", "bell", "stop"]
        """)
    assert watch(path, db) == ExitCode.OK
    assert "protection off: over_pressure does not switch the drive off" in \
        capsys.readouterr().err
    with SessionReader(db) as r:
        assert "without \"safe-off\"" in r.metadata[META_PROTECTION_WARNINGS][0]


def test_default_protection_prints_nothing_and_records_an_empty_list(sim, tmp_path, capsys):
    db = tmp_path / "w.db"
    assert watch(bench_file(sim, tmp_path), db) == ExitCode.OK
    assert "WARNING" not in capsys.readouterr().err
    with SessionReader(db) as r:
        assert r.metadata[META_PROTECTION_WARNINGS] == []
