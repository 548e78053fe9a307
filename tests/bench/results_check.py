"""Every result field of a fixed set of noisy traces, saved once and compared after a change.

For work on the speed of the signal chain, whose results must not move beyond
floating-point round-off::

    python tests/bench/results_check.py save /tmp/ref.npz     # before the change
    python tests/bench/results_check.py compare /tmp/ref.npz  # after it

The traces: the analytic hydrophone models of ``tests/hydrophone_models.py`` (simulated
with scipy.signal), SNR 30-60 dB, some with a DC offset, an echo and a long pre-trigger,
at 10,000 and 100,000 samples; each through deconvolve, narrowband and auto, with a
measured phase and magnitude-only. The traces themselves are saved with the results, so
``compare`` converts the very same samples. Saved per case: every field of
``TraceResult.flat()``, the other scalars of the result, its arrays (pressure, spectrum,
weights, noise spectrum) and the error (type and message) when the conversion fails.
``compare`` prints the worst relative difference of each field and exits 1 when any is at
or above 1e-9 (arrays: largest difference over the largest magnitude) or any text differs.
"""

from __future__ import annotations

import json
import math
import sys
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

import hydrophone_models as hm  # noqa: E402

from tankside.monitor.acoustics.converter import Converter  # noqa: E402
from tankside.monitor.acoustics.loading import Loading  # noqa: E402
from tankside.monitor.acoustics.settings import ConversionSettings  # noqa: E402
from tankside.monitor.errors import TanksideError  # noqa: E402

LIMIT = 1e-9
# (model, pulse, snr_db, offset fraction, echo, centre as a share of the record)
TRACES = (
    ("resonant", "gauss", 30.0, 0.0, False, 0.3),
    ("resonant", "burst", 45.0, 0.05, True, 0.5),
    ("membrane", "gauss", 60.0, 0.0, True, 0.7),
    ("membrane", "peaked", 40.0, -0.02, False, 0.6),
    ("needle", "gauss", 50.0, 0.01, False, 0.8),
    ("needle", "one-cycle", 35.0, 0.0, True, 0.4),
    ("band-limited", "gauss", 55.0, 0.0, False, 0.75),
    ("band-limited", "burst", 30.0, 0.03, True, 0.6),
)
SIZES = (10_000, 100_000)
MODES = (("deconvolve", True), ("deconvolve", False), ("narrowband", False),
         ("auto", False), ("auto", True))
_LOADING = Loading(hydrophone_capacitance_f=100e-12, cable_capacitance_f=50e-12)


def _traces() -> dict[str, np.ndarray]:
    out = {}
    for i, (model, pulse, snr, offset, echo, share) in enumerate(TRACES):
        for n in SIZES:
            centre = share * n * hm.DT
            v = hm.clean_voltage(model, pulse, echo=echo, n=n, centre_s=centre)
            out[f"{model}|{pulse}|{n}"] = hm.noisy(v, snr, seed=100 + i,
                                                   offset_fraction=offset)
    return out


def _results(traces: dict[str, np.ndarray]) -> dict[str, object]:
    out: dict[str, object] = {}
    converters = {}
    for key, v in traces.items():
        model = key.split("|")[0]
        for method, phase in MODES:
            conv = converters.get((model, method, phase))
            if conv is None:
                conv = converters[(model, method, phase)] = Converter(
                    hm.calibration(model, phase=phase), _LOADING,
                    ConversionSettings(method=method))
            case = f"{key}|{method}|{'phase' if phase else 'magnitude'}"
            try:
                r = conv.process(v, hm.DT)
            except TanksideError as err:
                out[f"{case}|error"] = f"{type(err).__name__}: {err}"
                continue
            for name, value in r.flat().items():
                out[f"{case}|{name}"] = value
            p = r.parameters
            extra = {"voltage_awf_hz": r.voltage_awf_hz, "snr_db": r.snr_db,
                     "baseline_v": r.noise.baseline_v, "rms_v": r.noise.rms_v,
                     "quiet_samples": r.noise.quiet_samples, "segments": r.noise.segments,
                     "spread": math.nan if r.phase_p_r_spread is None else r.phase_p_r_spread,
                     "derated_p_r": p.derated_peak_rarefactional_pa,
                     "pulse_start_s": p.pulse_start_s, "pulse_end_s": p.pulse_end_s,
                     "passband": json.dumps(r.passband_hz), "noise_band": json.dumps(
                         r.noise_band_hz), "awf_method": r.awf_method,
                     "left_out": len(r.gate.left_out), "edge": r.gate.at_record_edge}
            for name, value in extra.items():
                out[f"{case}|{name}"] = value
            for name, arr in (("pressure", r.pressure_pa), ("spectrum", r.spectrum_pa),
                              ("weights", r.weights), ("psd", r.noise.psd_v2_per_hz),
                              ("sensitivity", r.sensitivity_v_per_pa)):
                out[f"{case}|{name}"] = np.asarray(arr)
    return out


def _difference(a, b) -> float:
    """Relative difference; inf when texts or NaN patterns differ."""
    if isinstance(a, np.ndarray) or isinstance(b, np.ndarray):
        a, b = np.asarray(a), np.asarray(b)
        if a.shape != b.shape or a.dtype.kind != b.dtype.kind:
            return math.inf
        if a.dtype.kind not in "fc":
            return 0.0 if np.array_equal(a, b) else math.inf
        fa, fb = np.isfinite(a), np.isfinite(b)
        if not np.array_equal(fa, fb) or not np.array_equal(a[~fa], b[~fb], equal_nan=True):
            return math.inf
        if not fa.any():
            return 0.0
        scale = float(np.abs(a[fa]).max())
        diff = float(np.abs(a[fa] - b[fb]).max())
        return diff / scale if scale > 0 else diff
    if isinstance(a, float) and isinstance(b, float):
        if math.isnan(a) or math.isnan(b) or math.isinf(a) or math.isinf(b):
            return 0.0 if (a == b or (math.isnan(a) and math.isnan(b))) else math.inf
        return abs(a - b) / abs(a) if a != 0 else abs(b)
    return 0.0 if a == b else math.inf


def main(argv: list[str]) -> int:
    if len(argv) != 2 or argv[0] not in ("save", "compare"):
        print(__doc__)
        return 2
    path = Path(argv[1])
    if argv[0] == "save":
        traces = _traces()
        results = _results(traces)
        arrays = {f"trace|{k}": v for k, v in traces.items()}
        meta = {k: v for k, v in results.items() if not isinstance(v, np.ndarray)}
        arrays.update({f"result|{k}": v for k, v in results.items()
                       if isinstance(v, np.ndarray)})
        np.savez(path, meta=json.dumps(meta), **arrays)
        print(f"saved {len(results)} fields of {len(traces) * len(MODES)} cases to {path}")
        return 0
    with np.load(path) as data:
        traces = {k[6:]: data[k] for k in data.files if k.startswith("trace|")}
        ref: dict[str, object] = json.loads(str(data["meta"]))
        ref.update({k[7:]: data[k] for k in data.files if k.startswith("result|")})
    new = _results(traces)
    if set(new) != set(ref):
        print("the fields differ:", sorted(set(new) ^ set(ref))[:10])
        return 1
    worst: dict[str, tuple[float, str]] = {}
    for key, value in ref.items():
        d = _difference(value, new[key])
        field = key.rsplit("|", 1)[1]
        if d >= worst.get(field, (-1.0, ""))[0]:
            worst[field] = (d, key)
    for field, (d, key) in sorted(worst.items(), key=lambda x: -x[1][0]):
        print(f"{field:>36} {d:10.3g}  {key}")
    overall = max(d for d, _ in worst.values())
    errors = sum(1 for k in ref if k.endswith("|error"))
    print(f"{len(ref)} fields ({errors} failed conversions); worst relative difference "
          f"{overall:.3g} (limit {LIMIT:g})")
    return 0 if overall < LIMIT else 1


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
