"""Invented traces and session files for the store, replay and export tests."""

from __future__ import annotations

import numpy as np

from tankside.drivers.trace import RawTrace, count_at_rails
from tankside.monitor.record.store import SessionStore, session_metadata

RAILS = {"int8": (-128, 127), "int16": (-32768, 32767), "float32": (-1.0, 1.0)}


def make_raw(seq: int, *, n: int = 2000, dtype: str = "<i2", dt_s: float = 4e-9,
             f0_hz: float = 2.0e6, amplitude: float = 0.6, time_s: float | None = None) -> RawTrace:
    """A deterministic Gaussian-windowed tone burst (invented), quantised like a digitiser."""
    dt = np.dtype(dtype)
    kind = {"i1": "int8", "i2": "int16", "f4": "float32"}[f"{dt.kind}{dt.itemsize}"]
    lo, hi = RAILS[kind]
    rng = np.random.default_rng(seq)
    t = np.arange(n) * dt_s
    centre = n * dt_s / 2
    sigma = 0.6e-6
    wave = amplitude * np.exp(-((t - centre) / sigma) ** 2 / 2) * np.sin(2 * np.pi * f0_hz * t)
    wave = wave + 0.002 * rng.standard_normal(n)
    if kind == "float32":
        codes = np.clip(wave, lo, hi).astype(dt)
        volts_per_code = 0.25
    else:
        codes = np.clip(np.round(wave * hi), lo, hi).astype(dt)
        volts_per_code = 0.5 / (hi - lo)
    low, high = count_at_rails(codes, lo, hi)
    return RawTrace(codes=codes, volts_per_code=volts_per_code, offset_v=0.0013, dt_s=dt_s,
                    t0_s=-1.0e-6, seq=seq, time_s=1.8e9 + 0.02 * seq if time_s is None else time_s,
                    range_v=0.5, code_min=lo, code_max=hi, clipped_low=low, clipped_high=high,
                    data_format=kind, state={"record_length": n, "coupling": "DC"})


def fake_result(seq: int) -> dict:
    """A result dict in the layout of TraceResult.flat() with awkward float64 values."""
    rng = np.random.default_rng(1000 + seq)
    x = rng.standard_normal(12) * 10.0 ** rng.integers(-300, 300, 12)
    return {
        "method": "deconvolve", "peak_compressional_pa": float(x[0]),
        "peak_rarefactional_pa": float(x[1]), "acoustic_working_frequency_hz": float(x[2]),
        "pulse_intensity_integral_j_per_m2": 5e-324, "pulse_duration_s": float(x[3]),
        "pulse_average_intensity_w_per_m2": float("inf"), "mechanical_index": float("nan"),
        "water_temperature_c": 20.0, "water_density_kg_per_m3": float(x[4]),
        "water_sound_speed_m_per_s": 1482.3456789012345, "narrowband_ok": bool(seq % 2),
        "narrowband_band_low_hz": float(x[5]), "narrowband_band_high_hz": float(x[6]),
        "narrowband_max_deviation_db": float(x[7]), "phase_source": "measured",
        "snr_db": float(x[8]), "gate_start_s": float(x[9]), "gate_end_s": float(x[10]),
        "derating_depth_m": float("nan"),
        "warnings": '[{"code": "low_snr", "message": "invented"}]',
    }


CAL_TEXT = "frequency_hz,sensitivity_v_per_pa\r\n1e6,5.0e-8\r\n2e6,4.8e-8\r\n"


def write_session(path, n_traces: int = 5, **store_kw) -> list[RawTrace]:
    """A small, cleanly stopped session with fake results, one alert and one event."""
    meta = session_metadata(configuration={"digitiser": {"range_v": 0.5}},
                            instruments={"digitiser": {"resource": "TCPIP0::127.0.0.1::1::SOCKET",
                                                       "identity": "INVENTED,DIG,0,1"}},
                            calibration_text=CAL_TEXT, calibration_source="cal.csv",
                            loading={"hydrophone_capacitance_f": None}, settings={"method": "auto"},
                            temperature_c=21.5)
    raws = [make_raw(i) for i in range(n_traces)]
    store = SessionStore.create(path, meta, **store_kw)
    for raw in raws:
        store.add_trace(raw, fake_result(raw.seq) if raw.seq != 2 else None,
                        {"range_changed": raw.seq == 1},
                        error="trace is all zero" if raw.seq == 2 else None)
    aid = store.add_alert(1.8e9, "clipping", "warning", "samples at the rails", ["record", "bell"],
                          seq=1)
    store.acknowledge_alert(aid, 1.8e9 + 3.0)
    store.add_event(1.8e9 + 1.0, "range-change", {"from_v": 0.5, "to_v": 1.0}, seq=1)
    store.close("ok", "finished", {"traces": n_traces})
    return raws


def calibration_text(scale: float = 1.0) -> str:
    """An invented hydrophone calibration, 0.5-15 MHz, gently falling, 20 ns delay phase."""
    lines = ["# invented calibration for the store tests",
             "frequency_hz,sensitivity_v_per_pa,phase_deg"]
    for k in range(1, 31):
        f_hz = 0.5e6 * k
        m = scale * 5.0e-8 * (1.0 - 0.01 * f_hz / 1e6)
        lines.append(f"{f_hz:.6g},{m:.6g},{-360.0 * f_hz * 20e-9:.6g}")
    return "\n".join(lines) + "\n"


def zero_trace(seq: int, n: int = 2000) -> RawTrace:
    """An all-zero trace (nothing to convert)."""
    raw = make_raw(seq, n=n)
    return RawTrace(codes=np.zeros(n, dtype="<i2"), volts_per_code=raw.volts_per_code,
                    offset_v=0.0, dt_s=raw.dt_s, t0_s=raw.t0_s, seq=seq, time_s=raw.time_s,
                    range_v=raw.range_v, code_min=raw.code_min, code_max=raw.code_max,
                    clipped_low=0, clipped_high=0, data_format="int16", state=raw.state)


def write_converted_session(path, n_traces: int = 4, *, n: int = 2000) -> list[RawTrace]:
    """A small session converted as the live pipeline does (a real Converter on the
    invented calibration), with a method change, an alert, a mark and a stop record:
    everything ``export`` and ``replay`` read."""
    from tankside.monitor.acoustics.calibration import parse_calibration
    from tankside.monitor.acoustics.converter import Converter
    from tankside.monitor.acoustics.loading import Loading
    from tankside.monitor.acoustics.settings import ConversionSettings
    from tankside.monitor.errors import TanksideError
    from tankside.monitor.record.schema import EventKind

    cal = parse_calibration(calibration_text(), source="cal.csv")
    loading, settings = Loading(), ConversionSettings(method="deconvolve")
    conv = Converter(cal, loading=loading, settings=settings, temperature_c=21.5)
    meta = session_metadata(configuration={"digitiser": {"range_v": 0.5}},
                            instruments={"digitiser": {"resource": "TCPIP0::127.0.0.1::1::SOCKET",
                                                       "identity": "INVENTED,DIG,0,1"}},
                            calibration=cal, loading=loading, settings=settings,
                            temperature_c=21.5)
    raws = [make_raw(i, n=n, dtype=">i2" if i % 2 else "<i2") for i in range(n_traces)]
    store = SessionStore.create(path, meta)
    for raw in raws:
        if raw.seq == n_traces // 2:
            conv = conv.with_method("narrowband")
            store.add_event(raw.time_s, EventKind.METHOD_CHANGE,
                            {"from": "deconvolve", "to": "narrowband"}, seq=raw.seq)
        try:
            flat, error = conv.process(raw.volts(), raw.dt_s).flat(), None
        except TanksideError as err:
            flat, error = None, f"{type(err).__name__}: {err}"
        store.add_trace(raw, flat, {"clipped": raw.clipped > 0, "range_changed": False}, error)
    store.add_alert(raws[0].time_s, "clipping", "warning", "samples at the rails", ["record"],
                    seq=0)
    store.add_event(raws[-1].time_s, EventKind.MARK, {"note": "end"}, seq=None)
    store.close("completed", "trace count reached", {"traces": n_traces})
    return raws
