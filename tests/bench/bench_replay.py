"""Replay speed of a stored session against the session's own real time.

A session of 10,000-sample traces recorded at 50 traces/s (invented tone bursts, converted
and stored the way the live pipeline does) is replayed into a new file; the figures are
the replay rate beside the recording rate, and the parts of the work measured alone
(reading the traces back, converting them, writing them). Target: replay at least 5x
faster than real time.
"""

from __future__ import annotations

import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from session_samples import calibration_text, make_raw  # noqa: E402

from tankside.monitor.acoustics.calibration import load_calibration  # noqa: E402
from tankside.monitor.acoustics.converter import Converter  # noqa: E402
from tankside.monitor.acoustics.settings import ConversionSettings  # noqa: E402
from tankside.monitor.record.export import export_hdf5, export_results_csv  # noqa: E402
from tankside.monitor.record.replay import replay_session  # noqa: E402
from tankside.monitor.record.store import SessionReader, SessionStore, session_metadata  # noqa: E402

RATE_HZ = 50.0
N_SAMPLES = 10_000
N_TRACES = 500


def record(folder: Path, method: str) -> Path:
    cal_path = folder / "cal.csv"
    cal_path.write_text(calibration_text())
    cal = load_calibration(cal_path)
    settings = ConversionSettings(method=method)
    conv = Converter(cal, settings=settings, temperature_c=20.0)
    path = folder / "live.db"
    store = SessionStore.create(path, session_metadata(
        configuration={}, instruments={}, calibration=cal, settings=settings,
        loading=conv.loading, temperature_c=20.0))
    for seq in range(N_TRACES):
        raw = make_raw(seq, n=N_SAMPLES, time_s=1.8e9 + seq / RATE_HZ)
        store.add_trace(raw, conv.process(raw.volts(), raw.dt_s).flat())
        store.maybe_commit()
    store.close("ok", "bench", {"traces": N_TRACES})
    return path


def main() -> None:
    for method in ("auto", "deconvolve"):
        bench(method)


def bench(method: str) -> None:
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        src = record(folder, method)
        real_time_s = N_TRACES / RATE_HZ

        t0 = time.perf_counter()
        summary = replay_session(src, folder / "replay.db", check=True)
        replay_s = time.perf_counter() - t0

        with SessionReader(src) as reader:
            t0 = time.perf_counter()
            traces = [s.raw for s in reader.iter_traces()]
            read_s = time.perf_counter() - t0
            meta = reader.metadata
            used = sorted({r["method"] for r in reader.iter_results()})
        cal = load_calibration(folder / "cal.csv")
        conv = Converter(cal, settings=ConversionSettings.from_table(meta["settings"]),
                         temperature_c=20.0)
        t0 = time.perf_counter()
        results = [conv.process(raw.volts(), raw.dt_s).flat() for raw in traces]
        convert_s = time.perf_counter() - t0
        t0 = time.perf_counter()
        store = SessionStore.create(folder / "write-only.db", meta)
        for raw, flat in zip(traces, results, strict=True):
            store.add_trace(raw, flat)
            store.maybe_commit()
        store.close("ok", "bench", {})
        write_s = time.perf_counter() - t0

        with SessionReader(src) as reader:
            t0 = time.perf_counter()
            export_results_csv(reader, folder / "r.csv")
            csv_s = time.perf_counter() - t0
            t0 = time.perf_counter()
            export_hdf5(reader, folder / "s.h5")
            h5_s = time.perf_counter() - t0

    per = 1e3 / N_TRACES
    print(f"replay bench, method {method!r} (used: {', '.join(used)}): {N_TRACES} traces x "
          f"{N_SAMPLES} samples, recorded at {RATE_HZ:g} traces/s ({real_time_s:.1f} s of "
          "session)")
    print(f"  replay (read + convert + write)  {replay_s:7.2f} s  {replay_s * per:6.2f} ms/trace"
          f"  {real_time_s / replay_s:6.1f}x real time  (target >= 5x); "
          f"{summary.differences} results differ from the recorded ones")
    print(f"  read traces only                 {read_s:7.2f} s  {read_s * per:6.2f} ms/trace"
          f"  {real_time_s / read_s:6.1f}x real time")
    print(f"  convert only                     {convert_s:7.2f} s  {convert_s * per:6.2f} "
          f"ms/trace  {real_time_s / convert_s:6.1f}x real time")
    print(f"  write only                       {write_s:7.2f} s  {write_s * per:6.2f} ms/trace"
          f"  {real_time_s / write_s:6.1f}x real time")
    print(f"  export results CSV               {csv_s:7.2f} s   export HDF5 {h5_s:.2f} s "
          f"({real_time_s / h5_s:.1f}x real time)")


if __name__ == "__main__":
    main()
