"""Speed of the signal chain against a bare scipy.fft round trip of the same length.

Prints, for 10,000 and 100,000 samples: the bare ``irfft(rfft(v) * H)`` time, the
deconvolution stage through a cached plan, and the full per-trace numerics (baseline,
noise level and spectrum, pulse gate, noise weights, conversion, all pulse parameters,
narrowband check, warnings, and for this magnitude-only calibration the p_r spread
between low-frequency assumptions), with ratios (bare time / our time; higher is better;
targets 0.8 for the stage and 0.35 for the full numerics).
"""

from __future__ import annotations

import time

import numpy as np
import scipy.fft

from tankside.monitor.acoustics.calibration import parse_calibration
from tankside.monitor.acoustics.converter import Converter
from tankside.monitor.acoustics.deconvolve import deconvolve
from tankside.monitor.acoustics.loading import Loading
from tankside.monitor.acoustics.settings import ConversionSettings

DT_S = 4e-9


def _calibration(phase=False):
    # invented bench-test hydrophone: resonance near 30 MHz on a falling low end; with
    # phase=True the same magnitude with a measured phase (a 20 ns delay)
    f = np.linspace(0.5e6, 40e6, 80)
    level = -265.0 + 3.0 * np.exp(-(((f - 30e6) / 6e6) ** 2)) - 2.0 * (0.5e6 / f)
    if phase:
        rows = "\n".join(f"{a:.6g},{b:.4f},{-360 * a * 20e-9:.4f}"
                         for a, b in zip(f, level, strict=True))
        return parse_calibration("frequency_hz,sensitivity_db_re_1v_per_upa,phase_deg\n"
                                 + rows, "bench, measured phase")
    rows = "\n".join(f"{a:.6g},{b:.4f}" for a, b in zip(f, level, strict=True))
    return parse_calibration("frequency_hz,sensitivity_db_re_1v_per_upa\n" + rows, "bench")


def _trace(n):
    t = np.arange(n) * DT_S
    centre = 0.3 * n * DT_S
    burst = np.exp(-(((t - centre) / 0.4e-6) ** 2)) * np.sin(2 * np.pi * 5e6 * (t - centre))
    rng = np.random.default_rng(0)
    return 5e-2 * burst + 1e-4 * rng.standard_normal(n)


def _interleaved(fns, repeat, rounds=25):
    """Best time per call of each function, measured in alternating rounds (s)."""
    best = [float("inf")] * len(fns)
    for _ in range(rounds):
        for i, fn in enumerate(fns):
            t0 = time.perf_counter()
            for _ in range(repeat):
                fn()
            best[i] = min(best[i], (time.perf_counter() - t0) / repeat)
    return best


def main():
    cals = {False: _calibration(), True: _calibration(phase=True)}
    loading = Loading(hydrophone_capacitance_f=100e-12, cable_capacitance_f=50e-12)
    print(f"{'n':>8} {'bare us':>9} {'stage us':>9} {'ratio':>6} {'full us':>9} "
          f"{'ratio':>6} {'method':>25}")
    for n in (10_000, 100_000):
        v = _trace(n)
        repeat = 50 if n <= 10_000 else 5
        for method, phase in (("deconvolve", False), ("narrowband", False), ("auto", False),
                              ("auto", True)):
            conv = Converter(cals[phase], loading, ConversionSettings(method=method))
            plan = conv.plan(n, DT_S)
            h = plan.inverse_pa_per_v.copy()

            def bare(v=v, h=h, n=n):
                return scipy.fft.irfft(scipy.fft.rfft(v, workers=1) * h, n, workers=1)

            t_bare, t_stage, t_full = _interleaved(
                [bare, lambda v=v, plan=plan: deconvolve(v, plan),
                 lambda v=v, conv=conv: conv.process(v, DT_S)], repeat)
            used = conv.process(v, DT_S).method
            label = used if method == used else f"{method}->{used}"
            label += ", phase" if phase else ""
            print(f"{n:>8} {t_bare * 1e6:>9.1f} {t_stage * 1e6:>9.1f} "
                  f"{t_bare / t_stage:>6.2f} {t_full * 1e6:>9.1f} {t_bare / t_full:>6.2f} "
                  f"{label:>25}")
    print("ratio = bare round trip time / our time (targets: stage >= 0.8, full >= 0.35); "
          "'phase': the calibration has a measured phase (no minimum-phase spread to work out)")


if __name__ == "__main__":
    main()
