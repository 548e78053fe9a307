"""Invented conversion results and trace observations for the alert-rule tests."""

from __future__ import annotations

from tankside.monitor.live.rules import AlertConfig, RuleEngine, TraceObservation


def result(p_c=1.0e6, p_r=0.8e6, **extra):
    """A successful conversion result (invented values), with ``extra`` keys overriding."""
    out = {"method": "deconvolve", "peak_compressional_pa": p_c,
           "peak_rarefactional_pa": p_r, "narrowband_ok": True,
           "narrowband_band_low_hz": 0.8e6, "narrowband_band_high_hz": 1.2e6,
           "narrowband_max_deviation_db": 0.4}
    out.update(extra)
    return out


def obs(seq=0, **kw):
    """A healthy trace observation at 20 traces per second, with ``kw`` fields overriding."""
    values = {"seq": seq, "time_s": 0.05 * seq, "clipped_low": 0, "clipped_high": 0,
              "range_v": 1.0, "fraction_of_full_scale": 0.5, "result": result(),
              "error": None, "method_in_use": "auto", "position": None}
    values.update(kw)
    return TraceObservation(**values)


def engine(**tables):
    """A rule engine built from per-rule settings tables, as the settings file gives them."""
    return RuleEngine(AlertConfig.from_table(tables))
