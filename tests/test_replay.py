"""Replay: recompute a stored session into a new file, exactly, or with other settings."""

from __future__ import annotations

import hashlib
import math
import struct

import numpy as np
import pytest
from session_samples import calibration_text, make_raw, zero_trace

from tankside.monitor.acoustics.calibration import load_calibration, parse_calibration
from tankside.monitor.acoustics.converter import Converter
from tankside.monitor.acoustics.loading import Loading
from tankside.monitor.acoustics.settings import ConversionSettings
from tankside.monitor.cli import main
from tankside.monitor.errors import ConfigError, TanksideError
from tankside.monitor.outcome import ExitCode
from tankside.monitor.record.replay import conversion_inputs, replay_session, result_differences
from tankside.monitor.record.schema import META_REPLAY_OF, RESULT_NAMES, EventKind
from tankside.monitor.record.store import SessionReader, SessionStore, session_metadata

LOADING = Loading(hydrophone_capacitance_f=50e-12, cable_capacitance_f=100e-12,
                  input_capacitance_f=15e-12, preamp_gain_db=6.0)
SETTINGS = ConversionSettings(method="deconvolve", regularisation=0.02)
TEMPERATURE_C = 21.5


def _bits(x) -> bytes:
    return struct.pack("<d", x)


def _raws(n_traces: int):
    raws = []
    for seq in range(n_traces):
        if seq == 3:
            raws.append(zero_trace(seq))  # conversion fails: recorded as an error
        else:
            raws.append(make_raw(seq, amplitude=0.3 + 0.02 * seq,
                                 dtype=">i2" if seq % 2 else "<i2"))
    return raws


def record_session(path, *, n_traces=10, switch_to_narrowband_at=None, tmp_cal=None,
                   cal_text=None, checks=None):
    """Convert and store traces as the live pipeline does (same Converter, same calls)."""
    cal_path = tmp_cal
    cal_path.write_text(calibration_text() if cal_text is None else cal_text)
    cal = load_calibration(cal_path, **(checks or {}))
    conv = Converter(cal, loading=LOADING, settings=SETTINGS, temperature_c=TEMPERATURE_C)
    meta = session_metadata(configuration={"calibration": {"file": str(cal_path)}},
                            instruments={}, calibration=cal, loading=LOADING,
                            settings=SETTINGS, temperature_c=TEMPERATURE_C)
    store = SessionStore.create(path, meta)
    for raw in _raws(n_traces):
        if raw.seq == switch_to_narrowband_at:
            conv = conv.with_method("narrowband")
            store.add_event(raw.time_s, EventKind.METHOD_CHANGE,
                            {"from": "deconvolve", "to": "narrowband"}, seq=raw.seq)
        try:
            flat, error = conv.process(raw.volts(), raw.dt_s).flat(), None
        except TanksideError as err:
            flat, error = None, f"{type(err).__name__}: {err}"
        store.add_trace(raw, flat, {"clipped": raw.clipped > 0, "range_changed": False}, error)
        store.maybe_commit()
    store.close("ok", "finished", {"traces": n_traces})
    return cal


def _digest(path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


class TestExactReplay:
    def test_own_settings_reproduce_every_result_bit_for_bit(self, tmp_path):
        src, out = tmp_path / "live.db", tmp_path / "again.db"
        record_session(src, tmp_cal=tmp_path / "cal.csv")
        before = _digest(src)
        summary = replay_session(src, out, check=True)
        assert _digest(src) == before  # the original is untouched
        assert (summary.traces, summary.converted, summary.failed) == (10, 9, 1)
        assert summary.differences == 0
        assert result_differences(src, out) == []
        with SessionReader(src) as a, SessionReader(out) as b:
            for old, new in zip(a.iter_traces(), b.iter_traces(), strict=True):
                assert new.raw.codes.tobytes() == old.raw.codes.tobytes()
                assert new.raw.codes.dtype == old.raw.codes.dtype
                if old.result is None:
                    assert new.result is None and new.error == old.error
                    continue
                assert tuple(new.result) == RESULT_NAMES
                for key in RESULT_NAMES:
                    x, y = old.result[key], new.result[key]
                    if isinstance(x, float):
                        assert _bits(x) == _bits(y) or (math.isnan(x) and math.isnan(y)), key
                    else:
                        assert x == y, key
            assert b.stop["counts"] == {"traces": 10, "converted": 9, "failed": 1}
            replay_of = b.metadata[META_REPLAY_OF]
            assert replay_of["source_session_uid"] == a.start["session_uid"]
            assert b.metadata["calibration_sha256"] == a.metadata["calibration_sha256"]
            # no resistive load is stored as null (strict JSON) and rebuilt as inf
            assert a.metadata["loading"]["input_resistance_ohm"] is None
            assert conversion_inputs(a.metadata)[1] == LOADING

    def test_recorded_method_change_is_followed(self, tmp_path):
        src, out = tmp_path / "live.db", tmp_path / "again.db"
        record_session(src, switch_to_narrowband_at=6, tmp_cal=tmp_path / "cal.csv")
        replay_session(src, out)
        assert result_differences(src, out) == []
        with SessionReader(out) as b:
            methods = [r["method"] for r in b.iter_results() if r["converted"]]
            assert methods[-1] == "narrowband" and methods[0] == "deconvolve"
            assert [e["kind"] for e in b.events()] == [EventKind.METHOD_CHANGE]


def test_method_schedule_by_seq_or_time():
    from tankside.monitor.record.replay import _method_schedule, _requested_method

    events = [
        {"kind": "mark", "seq": 1, "time_s": 10.0, "detail": {"note": "x"}},
        {"kind": EventKind.METHOD_CHANGE, "seq": 4, "time_s": 12.0,
         "detail": {"from": "auto", "to": "narrowband"}},
        {"kind": EventKind.METHOD_CHANGE, "seq": None, "time_s": 20.0,
         "detail": {"from": "narrowband", "to": "deconvolve"}},
    ]
    schedule = _method_schedule(events)
    got = [_requested_method(schedule, seq, t, "auto")
           for seq, t in [(0, 9.0), (3, 11.9), (4, 11.95), (9, 19.99), (10, 20.0)]]
    assert got == ["auto", "auto", "narrowband", "narrowband", "deconvolve"]


class TestOtherSettings:
    def test_other_method(self, tmp_path):
        src, out = tmp_path / "live.db", tmp_path / "nb.db"
        cal = record_session(src, tmp_cal=tmp_path / "cal.csv")
        replay_session(src, out, method="narrowband")
        direct = Converter(cal, loading=LOADING, settings=SETTINGS.replace(method="narrowband"),
                           temperature_c=TEMPERATURE_C)
        with SessionReader(out) as b:
            assert b.metadata["settings"]["method"] == "narrowband"
            assert b.metadata[META_REPLAY_OF]["method"] == "narrowband"
            for s in b.iter_traces():
                if s.result is None:
                    continue
                want = direct.process(s.raw.volts(), s.raw.dt_s).flat()
                assert s.result["method"] == "narrowband"
                assert s.result["peak_rarefactional_pa"] == want["peak_rarefactional_pa"]

    def test_other_calibration_scales_pressure(self, tmp_path):
        """Twice the sensitivity gives half the pressure: p = V / M is linear in 1/M
        (common practice; holds for the regularised inverse too, whose reference scales
        with |M_L|)."""
        src, out = tmp_path / "live.db", tmp_path / "cal2.db"
        record_session(src, tmp_cal=tmp_path / "cal.csv")
        cal2 = tmp_path / "cal2.csv"
        cal2.write_text(calibration_text(scale=2.0))
        replay_session(src, out, calibration_path=cal2)
        with SessionReader(src) as a, SessionReader(out) as b:
            assert b.calibration_text == calibration_text(scale=2.0)
            assert b.metadata["calibration_sha256"] == load_calibration(cal2).sha256
            for old, new in zip(a.iter_results(), b.iter_results(), strict=True):
                if not old["converted"]:
                    continue
                assert new["peak_compressional_pa"] == pytest.approx(
                    0.5 * old["peak_compressional_pa"], rel=1e-9)
                assert new["acoustic_working_frequency_hz"] == pytest.approx(
                    old["acoustic_working_frequency_hz"], rel=1e-9)

    def test_stored_calibration_parses_like_the_file(self, tmp_path):
        cal = record_session(tmp_path / "live.db", n_traces=1, tmp_cal=tmp_path / "cal.csv")
        with SessionReader(tmp_path / "live.db") as a:
            again = parse_calibration(a.calibration_text, source="x")
        np.testing.assert_array_equal(again.sensitivity_v_per_pa, cal.sensitivity_v_per_pa)


class TestRefusals:
    def test_out_is_input(self, tmp_path):
        src = tmp_path / "live.db"
        record_session(src, n_traces=1, tmp_cal=tmp_path / "cal.csv")
        before = _digest(src)
        with pytest.raises(ConfigError, match="never touches the original"):
            replay_session(src, tmp_path / "." / "live.db")
        assert _digest(src) == before

    def test_out_exists_needs_force(self, tmp_path, capsys):
        src, out = tmp_path / "live.db", tmp_path / "again.db"
        record_session(src, n_traces=2, tmp_cal=tmp_path / "cal.csv")
        out.write_text("old")
        assert main(["replay", str(src), "--out", str(out)]) == ExitCode.USAGE
        err = capsys.readouterr().err.strip()
        assert "--force" in err and len(err.splitlines()) == 1
        assert main(["replay", str(src), "--out", str(out), "--force", "--check",
                     "--no-progress"]) == ExitCode.OK
        assert "0 differ" in capsys.readouterr().out
        assert SessionReader(out).trace_count() == 2

    def test_missing_input(self, tmp_path, capsys):
        assert main(["replay", str(tmp_path / "no.db"), "--out", str(tmp_path / "o.db")]) \
            == ExitCode.USAGE
        assert "no such session file" in capsys.readouterr().err


def _with_typo(text: str) -> str:
    # one row 1e6 times too sensitive (120 dB), near the top of the band
    lines = text.splitlines()
    i = next(k for k, ln in enumerate(lines) if ln.startswith("1.4e+07,"))
    f, m, ph = lines[i].split(",")
    lines[i] = ",".join([f, repr(float(m) * 1e6), ph])
    return "\n".join(lines) + "\n"


def test_session_recorded_with_relaxed_checks_replays_exactly(tmp_path):
    # the calibration a session used is replayed as it was accepted, checks relaxed or not
    src, out = tmp_path / "live.db", tmp_path / "again.db"
    record_session(src, tmp_cal=tmp_path / "cal.csv", cal_text=_with_typo(calibration_text()),
                   checks={"max_step_db": math.inf})
    assert replay_session(src, out, check=True).differences == 0


def test_replacement_calibration_is_checked_unless_relaxed(tmp_path):
    src = tmp_path / "live.db"
    record_session(src, tmp_cal=tmp_path / "cal.csv")
    typo = tmp_path / "typo.csv"
    typo.write_text(_with_typo(calibration_text()))
    with pytest.raises(TanksideError, match="steps by \\+119.9 dB from 4.325e-08 V/Pa on line 29"):
        replay_session(src, tmp_path / "a.db", calibration_path=typo)
    summary = replay_session(src, tmp_path / "b.db", calibration_path=typo,
                             calibration_checks={"max_step_db": math.inf})
    assert summary.converted == 9
