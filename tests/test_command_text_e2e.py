"""End to end on the simulated bench: bench-file words reach the digitiser as one command each.

``coupling = "DC;:CHAN1:RANG 5"`` would chain a range command onto the coupling one and
put the digitiser on 5 V while every stored trace says otherwise. The bench file is
refused with a message naming the file and the key, and the digitiser (asked over its
own TCP connection) is left as it was; with a plain word the session runs and the
range the digitiser reports is the one every stored trace records.
"""

from __future__ import annotations

from pathlib import Path

import pytest
from scpi_client import scpi

from tankside.monitor.cli import main
from tankside.monitor.errors import ConfigError
from tankside.monitor.live.benchfile import load_bench
from tankside.monitor.live.session import LiveSession
from tankside.monitor.outcome import ExitCode
from tankside.monitor.record.store import SessionReader
from tankside.simulators.bench import BENCH_DEFAULTS, SimulatedBench

FAST = {"digitiser.record_length": 2000, "digitiser.trigger_timeout_s": 0.5,
        "digitiser.timeout_s": 1.0}
TRIGGER_PERIOD_S = 0.002


@pytest.fixture
def sim():
    with SimulatedBench(seed=7, trigger_period_s=TRIGGER_PERIOD_S) as bench:
        yield bench



def bench_with(sim, tmp_path: Path, line: str) -> Path:
    path = sim.write_bench_file(tmp_path / "bench.toml", session_folder="sessions")
    text = path.read_text()
    assert "[digitiser]\n" in text
    path.write_text(text.replace("[digitiser]\n", f"[digitiser]\n{line}\n", 1))
    return path


@pytest.mark.parametrize("line", ['coupling = "DC;:CHAN1:RANG 5"',
                                  'trigger_slope = "POS;*RST"',
                                  'coupling = "DC\\n"'])
def test_chained_words_are_refused_and_the_digitiser_left_alone(sim, tmp_path, capsys, line):
    before = scpi(sim.digitiser_port, "CHAN1:RANG?"), scpi(sim.digitiser_port, "CHAN1:COUP?")
    path = bench_with(sim, tmp_path, line)
    key = line.split(" =")[0]
    with pytest.raises(ConfigError, match=rf"^{path}: \[digitiser\] {key}:"):
        load_bench(path)
    assert main(["watch", "--accept-caution", "--bench", str(path), "--headless",
                 "--traces", "5"]) == ExitCode.USAGE
    err = capsys.readouterr().err
    assert f"{path}: [digitiser] {key}:" in err
    assert not (tmp_path / "sessions").exists() or not list((tmp_path / "sessions").iterdir())
    after = scpi(sim.digitiser_port, "CHAN1:RANG?"), scpi(sim.digitiser_port, "CHAN1:COUP?")
    assert after == before


def test_the_range_in_use_is_the_range_recorded(sim, tmp_path):
    path = bench_with(sim, tmp_path, 'coupling = "DC"')
    bench = load_bench(path, FAST)
    session = LiveSession.from_bench(bench, session_path=tmp_path / "s.db", max_traces=40)
    session.start()
    assert session.wait(30)
    assert session.exit_status == "completed"
    range_v = float(scpi(sim.digitiser_port, "CHAN1:RANG?"))
    assert range_v == BENCH_DEFAULTS["range_v"]
    assert scpi(sim.digitiser_port, "CHAN1:COUP?") == "DC"
    with SessionReader(tmp_path / "s.db") as r:
        traces = list(r.iter_traces())
        events = r.events()
    assert len(traces) == 40
    assert not [e for e in events if e["kind"] == "range-change"]
    assert {t.raw.range_v for t in traces} == {range_v}
    assert {t.raw.codes.size for t in traces} == {2000}


def test_a_non_ascii_profile_character_is_refused_before_anything_is_sent(sim, tmp_path,
                                                                          capsys):
    # a profile typed from a manual with a micro sign in a command: refused when the
    # profile is loaded, naming file and key, before any instrument is touched (it used
    # to pass loading and end the session at the first fetch)
    before = scpi(sim.digitiser_port, "CHAN1:RANG?")
    profile = tmp_path / "typed-from-manual.toml"
    text = Path(sim.digitiser_profile_path).read_text(encoding="utf-8")
    line = next(ln for ln in text.splitlines() if ln.startswith("set_range"))
    profile.write_text(text.replace(line, line.replace("RANG", "RANG\u00b5"), 1),
                       encoding="utf-8")
    path = sim.write_bench_file(tmp_path / "bench.toml", session_folder="sessions")
    bench_text = path.read_text().replace(str(sim.digitiser_profile_path), str(profile), 1)
    path.write_text(bench_text)
    assert main(["watch", "--accept-caution", "--bench", str(path), "--headless",
                 "--traces", "5"]) == ExitCode.USAGE
    err = capsys.readouterr().err
    assert f"{profile}: [commands] set_range" in err and "printable ASCII" in err
    assert "Traceback" not in err and err.count("\n") == 1
    assert not (tmp_path / "sessions").exists() or not list((tmp_path / "sessions").iterdir())
    assert scpi(sim.digitiser_port, "CHAN1:RANG?") == before
