"""``tankside convert`` end to end, and the trace file format."""

import json

import numpy as np
import pytest
import scipy.signal

from tankside.monitor.cli import main
from tankside.monitor.errors import TraceFileError
from tankside.monitor.record.tracefile import parse_trace, read_trace, write_trace

DT = 4e-9
M0 = 1e-7


@pytest.fixture
def files(tmp_path):
    t = np.arange(4096) * DT
    p = 1e6 * scipy.signal.gausspulse(t - 8e-6, fc=5e6, bw=0.5)
    trace = tmp_path / "trace.csv"
    write_trace(trace, M0 * p, DT, comments=["invented test trace"])
    cal = tmp_path / "cal.csv"
    f = np.arange(0.5e6, 45e6, 0.5e6)
    cal.write_text("# invented flat hydrophone\nfrequency_hz,sensitivity_db_re_1v_per_upa\n"
                   + "\n".join(f"{x:.6g},-260" for x in f) + "\n")
    return trace, cal, p


def test_json_output(files, capsys):
    trace, cal, p = files
    assert main(["convert", str(trace), "--calibration", str(cal), "--json",
                 "--temperature", "25"]) == 0
    out = json.loads(capsys.readouterr().out)
    assert out["method"] == "narrowband"
    # -260 dB re 1 V/uPa = 100 nV/Pa, so the trace's 0.1 V peak is 1 MPa
    assert out["peak_compressional_pa"] == pytest.approx(p.max(), rel=1e-6)
    assert out["acoustic_working_frequency_hz"] == pytest.approx(5e6, rel=0.01)
    assert out["water"]["temperature_c"] == 25.0
    assert out["narrowband"]["ok"] is True
    assert len(out["narrowband"]["band_hz"]) == 2
    assert out["phase_source"] == "minimum-phase"
    assert "regularisation" in out["settings"]


def test_table_output_and_pressure_file(files, capsys, tmp_path):
    trace, cal, p = files
    out_csv = tmp_path / "pressure.csv"
    assert main(["convert", str(trace), "-c", str(cal), "--method", "deconvolve",
                 "--hydrophone-capacitance", "100", "--cable-capacitance", "50",
                 "--regularisation", "0.001", "--out", str(out_csv)]) == 0
    text = capsys.readouterr().out
    assert "deconvolve" in text and "MPa" in text and "MHz" in text and "J/m^2" in text
    lines = [ln for ln in out_csv.read_text().splitlines() if not ln.startswith("#")]
    assert lines[0] == "time_s,pressure_pa"
    pressure = np.array([float(ln.split(",")[1]) for ln in lines[1:]])
    # the loading correction (100/150) was applied: pressure is 1.5 x the uncorrected value
    assert pressure.max() == pytest.approx(1.5 * p.max(), rel=0.01)


def test_pressure_file_is_written_whole_or_not_at_all(files, capsys, tmp_path):
    trace, cal, _ = files
    missing = tmp_path / "no" / "such" / "pressure.csv"
    assert main(["convert", str(trace), "-c", str(cal), "--out", str(missing)]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "does not exist" in err and "Traceback" not in err
    # an earlier output is replaced only once the new one is complete: no partial name
    out_csv = tmp_path / "pressure.csv"
    out_csv.write_text("earlier\n")
    assert main(["convert", str(trace), "-c", str(cal), "--out", str(out_csv)]) == 0
    assert out_csv.read_text().startswith("# pressure from")
    assert sorted(p.name for p in tmp_path.iterdir()) == ["cal.csv", "pressure.csv",
                                                          "trace.csv"]


@pytest.mark.parametrize("bad", ["time,volts\n0,1\n1,2\n", "time_s,voltage_v\n0,1\n1e-9,x\n",
                                 "time_s,voltage_v\n0,1\n1e-9,1\n3e-9,1\n4e-9,1\n", ""])
def test_bad_trace_is_one_line_and_exit_2(files, tmp_path, capsys, bad):
    _, cal, _ = files
    trace = tmp_path / "bad.csv"
    trace.write_text(bad)
    assert main(["convert", str(trace), "-c", str(cal)]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and err.startswith("tankside: error:")
    assert "Traceback" not in err


def test_bad_calibration_names_file_and_line(files, tmp_path, capsys):
    trace, _, _ = files
    cal = tmp_path / "cal.csv"
    cal.write_text("frequency_hz,sensitivity_v_per_pa\n1e6,1e-7\n2e6,-1\n3e6,1e-7\n")
    assert main(["convert", str(trace), "-c", str(cal)]) == 2
    err = capsys.readouterr().err
    assert f"{cal}, line 3" in err and err.count("\n") == 1


def test_out_of_band_trace(files, tmp_path, capsys):
    _, cal, _ = files
    t = np.arange(4096) * DT
    trace = tmp_path / "hi.csv"
    write_trace(trace, 0.1 * scipy.signal.gausspulse(t - 8e-6, fc=70e6, bw=0.5), DT)
    assert main(["convert", str(trace), "-c", str(cal), "--method", "narrowband"]) == 2
    assert "outside the calibrated band" in capsys.readouterr().err


class TestTraceFile:
    def test_round_trip(self, tmp_path):
        v = np.random.default_rng(1).standard_normal(100)
        write_trace(tmp_path / "t.csv", v, 2.5e-9, t0_s=-1e-7)
        got, dt, t0 = read_trace(tmp_path / "t.csv")
        np.testing.assert_allclose(got, v, rtol=1e-8)
        assert dt == pytest.approx(2.5e-9, rel=1e-9) and t0 == pytest.approx(-1e-7)

    def test_rounded_times_accepted(self):
        # times printed to 4 significant figures still lie within 1 % of a step
        rows = "\n".join(f"{i * 1.0e-9 / 3:.4g},0" for i in range(30))
        _, dt, _ = parse_trace("time_s,voltage_v\n" + rows)
        assert dt == pytest.approx(1e-9 / 3, rel=1e-3)

    def test_non_uniform_step_names_the_line(self):
        with pytest.raises(TraceFileError, match="line 5.*not uniform"):
            parse_trace("time_s,voltage_v\n0,0\n1,0\n2,0\n3.5,0\n4,0\n5,0\n")


def test_mistyped_calibration_row_is_refused_unless_relaxed(files, tmp_path, capsys):
    # -60 for -260 dB re 1 V/uPa on one row at 20 MHz: refused by default (exit 2,
    # one line naming file, line and both values); relaxed, the 5 MHz pulse comes through
    trace, cal, p = files
    lines = cal.read_text().splitlines()
    typo_line = next(i for i, ln in enumerate(lines) if ln.startswith("2e+07,"))
    lines[typo_line] = "2e+07,-60"
    cal.write_text("\n".join(lines) + "\n")
    assert main(["convert", str(trace), "--calibration", str(cal), "--json"]) == 2
    err = capsys.readouterr().err
    assert f"{cal}, line {typo_line + 1}:" in err
    assert "-60.0 dB re 1 V/uPa" in err and "-260.0 dB re 1 V/uPa" in err
    assert main(["convert", str(trace), "--calibration", str(cal), "--json",
                 "--method", "deconvolve", "--calibration-max-step", "inf"]) == 0
    out = json.loads(capsys.readouterr().out)
    assert out["peak_compressional_pa"] == pytest.approx(p.max(), rel=0.02)
    with pytest.raises(SystemExit) as info:         # refused by the parser
        main(["convert", str(trace), "--calibration", str(cal),
              "--calibration-max-step", "0"])
    assert info.value.code == 2
    assert "argument --calibration-max-step" in capsys.readouterr().err
def test_json_has_noise_gate_and_warnings(files, tmp_path, capsys):
    trace, cal, p = files
    t = np.arange(4096) * DT
    noisy = tmp_path / "noisy.csv"
    v = M0 * p + 1e-3 * np.random.default_rng(0).standard_normal(t.size)   # 40 dB
    write_trace(noisy, v, DT)
    assert main(["convert", str(noisy), "-c", str(cal), "--json", "--method", "deconvolve",
                 "--gate", "6e-6", "10e-6", "--depth", "0.03"]) == 0
    out = json.loads(capsys.readouterr().out)
    assert out["snr_db"] == pytest.approx(40.0, abs=0.5)
    assert out["gate"] == {"start_s": pytest.approx(6e-6), "end_s": pytest.approx(10e-6),
                           "automatic": False}
    assert out["derating_depth_m"] == 0.03
    codes = [w["code"] for w in out["warnings"]]
    assert "mi_not_derated" not in codes and "phase_estimated" in codes
    lo, hi = out["deconvolution"]["passband_hz"]
    assert 1e6 < lo < 3e6 and 7e6 < hi < 12e6
    assert out["peak_compressional_pa"] == pytest.approx(p.max(), rel=0.03)


def test_table_lists_warnings(files, capsys):
    trace, cal, _ = files
    assert main(["convert", str(trace), "-c", str(cal), "--low-snr", "400"]) == 0
    text = capsys.readouterr().out
    assert "warning" in text and "low_snr" in text and "mi_not_derated" in text
    assert "pulse gate" in text and "peak voltage over noise" in text
