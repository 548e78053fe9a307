"""``tankside convert``: one voltage trace file to pressure and its pulse parameters."""

from __future__ import annotations

import argparse
import json

from ..acoustics.calibration import load_calibration
from ..acoustics.converter import Converter, TraceResult
from ..acoustics.loading import Loading
from ..acoustics.settings import AwfMethod, ConversionSettings, Method, Weighting
from ..record.tracefile import read_trace, write_pressure
from .options import (
    add_calibration_check_options,
    add_loading_options,
    calibration_checks,
    loading_overrides,
    number,
)


def add_parser(subparsers) -> None:
    p = subparsers.add_parser(
        "convert",
        help="convert a hydrophone voltage trace (CSV) to pressure and pulse parameters",
        description=(
            "Convert one hydrophone voltage trace to acoustic pressure with the hydrophone's "
            "calibration, and print the pulse parameters (IEC 62127-1, MI of IEC 62359). "
            "TRACE is CSV with the header 'time_s,voltage_v' and a uniform time step."),
    )
    p.add_argument("trace", metavar="TRACE", help="voltage trace, CSV 'time_s,voltage_v'")
    p.add_argument("--calibration", "-c", metavar="CAL", required=True,
                   help="hydrophone calibration CSV (frequency_hz, sensitivity_v_per_pa or "
                        "sensitivity_db_re_1v_per_upa, optional phase_deg or phase_rad)")
    add_calibration_check_options(p)
    p.add_argument("--method", choices=[m.value for m in Method], default=Method.AUTO.value,
                   help="deconvolve, narrowband, or auto: deconvolve whenever the calibration "
                        "has a measured phase, else narrowband only when the narrowband check "
                        "passes (default: auto)")
    p.add_argument("--json", action="store_true",
                   help="print one JSON object (SI units) instead of a table")
    p.add_argument("--out", metavar="PRESSURE.csv",
                   help="also write the pressure waveform as CSV 'time_s,pressure_pa'")
    add_loading_options(p, title="electrical loading (for an open-circuit calibration) and water")
    d = ConversionSettings()
    r = p.add_argument_group("deconvolution and parameters")
    r.add_argument("--band-low", metavar="HZ", type=number(low=0.0, high=1e11),
                   help="lower edge of the deconvolution band, Hz (default: calibration's lowest)")
    r.add_argument("--band-high", metavar="HZ", type=number(low=0.0, low_open=True, high=1e11),
                   help="upper edge of the deconvolution band, Hz (default: calibration's highest)")
    r.add_argument("--taper-octaves", metavar="OCT", type=number(low=0.0, high=10.0),
                   default=d.taper_octaves,
                   help=f"raised-cosine taper inside each band edge, octaves "
                        f"(default {d.taper_octaves:g})")
    r.add_argument("--regularisation", metavar="EPS", type=number(low=0.0, high=1e3),
                   default=d.regularisation,
                   help="Tikhonov weight relative to the median sensitivity in the band "
                        f"(default {d.regularisation:g}; 0: plain division)")
    r.add_argument("--weighting", choices=[w.value for w in Weighting], default=d.weighting,
                   help="noise: per-trace weights from the trace's own signal-to-noise "
                        "spectrum, nothing passed where there is only noise; none: the fixed "
                        "band alone (default noise)")
    r.add_argument("--band-snr", metavar="DB", type=number(low=0.0, high=100.0),
                   default=d.band_snr_db,
                   help="the noise band spans where the gated spectrum stands this far above "
                        f"the noise, dB (default {d.band_snr_db:g})")
    r.add_argument("--gate", metavar=("START", "END"), type=number(low=-1e3, high=1e3), nargs=2,
                   help="pulse gate, s from the first sample of the trace (default: found "
                        "around the strongest arrival)")
    r.add_argument("--low-snr", metavar="DB", type=number(low=-100.0, high=1000.0),
                   default=d.low_snr_db,
                   help="warn (low_snr) below this peak-to-noise ratio, dB "
                        f"(default {d.low_snr_db:g})")
    r.add_argument("--awf-method", choices=[m.value for m in AwfMethod],
                   default=d.awf_method.value,
                   help="acoustic working frequency from the -3 dB points of the spectrum, or "
                        "by zero crossings (default spectrum)")
    r.add_argument("--depth", metavar="M", type=number(low=0.0, high=10.0), default=0.0,
                   help="depth for derating p_r in the mechanical index, m (default 0: none)")
    p.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    calibration = load_calibration(args.calibration, **calibration_checks(args))
    loading = Loading(**loading_overrides(args))
    temperature_c = 20.0 if args.water_temperature is None else args.water_temperature
    gate = (None, None) if args.gate is None else tuple(args.gate)
    settings = ConversionSettings(method=args.method, band_low_hz=args.band_low,
                                  band_high_hz=args.band_high, taper_octaves=args.taper_octaves,
                                  regularisation=args.regularisation, awf_method=args.awf_method,
                                  derating_depth_m=args.depth, weighting=args.weighting,
                                  band_snr_db=args.band_snr, gate_start_s=gate[0],
                                  gate_end_s=gate[1], low_snr_db=args.low_snr)
    voltage, dt_s, t0_s = read_trace(args.trace)
    result = Converter(calibration, loading, settings, temperature_c).process(voltage, dt_s)
    if args.out:
        write_pressure(args.out, result.pressure_pa, dt_s, t0_s=t0_s,
                       comments=[f"pressure from {args.trace} with {calibration.source} "
                                 f"(sha256 {calibration.sha256}), method {result.method}"])
    if args.json:
        print(json.dumps(result.to_json_dict(), indent=2))
    else:
        print(format_table(result))
    return 0


def format_table(result: TraceResult) -> str:
    """The readable form of a result, with units."""
    p, nb, w = result.parameters, result.narrowband, result.water
    gate = result.gate
    band = result.passband_hz
    rows = [
        ("method", result.method, ""),
        ("peak-compressional pressure", f"{p.peak_compressional_pa / 1e6:.4g}", "MPa"),
        ("peak-rarefactional pressure", f"{p.peak_rarefactional_pa / 1e6:.4g}", "MPa"),
        ("acoustic working frequency", f"{p.acoustic_working_frequency_hz / 1e6:.4g}", "MHz"),
        ("pulse-intensity integral", f"{p.pulse_intensity_integral_j_per_m2:.4g}", "J/m^2"),
        ("pulse duration", f"{p.pulse_duration_s * 1e6:.4g}", "us"),
        ("pulse-average intensity", f"{p.pulse_average_intensity_w_per_m2 / 1e4:.4g}", "W/cm^2"),
        ("mechanical index", f"{p.mechanical_index:.3g}",
         "(not derated)" if result.derating_depth_m is None
         else f"(derated for {result.derating_depth_m:g} m)"),
        ("peak voltage over noise", f"{result.snr_db:.1f}", "dB"),
        ("pulse gate", "" if gate is None else
         f"{gate.start_s * 1e6:.4g}-{gate.end_s * 1e6:.4g}"
         f"{'' if gate.automatic else ' (as set)'}", "us"),
        ("passband", "none" if band is None else f"{band[0] / 1e6:.4g}-{band[1] / 1e6:.4g}",
         "" if band is None else "MHz"),
        ("water", f"{w.temperature_c:g} degC, {w.density_kg_per_m3:.2f} kg/m^3, "
                  f"{w.sound_speed_m_per_s:.1f} m/s", ""),
        ("narrowband check", f"{'pass' if nb.ok else 'fail'}: {nb.reason}", ""),
        ("  check band", f"{nb.band_hz[0] / 1e6:.4g}-{nb.band_hz[1] / 1e6:.4g}", "MHz"),
        ("  worst deviation", f"{nb.max_deviation_db:.2f}", "dB"),
        ("phase", result.phase_source, ""),
    ]
    for warning in result.warnings:
        rows.append(("warning", f"{warning.code}: {warning.message}", ""))
    width = max(len(r[0]) for r in rows)
    return "\n".join(f"{name:<{width}}  {value} {unit}".rstrip() for name, value, unit in rows)
