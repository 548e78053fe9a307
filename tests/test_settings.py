"""Conversion settings: validation, and the stored form."""

import json

import pytest

from tankside.monitor.acoustics.settings import ConversionSettings, Weighting
from tankside.monitor.errors import ConfigError


def test_defaults_are_noise_weighted_with_an_automatic_gate():
    s = ConversionSettings()
    assert s.weighting is Weighting.NOISE
    assert s.gate_start_s is None and s.gate_end_s is None
    assert s.low_snr_db == 20.0


def test_stored_form_is_json_and_round_trips():
    s = ConversionSettings(weighting="none", gate_start_s=1e-6, gate_end_s=3e-6)
    table = json.loads(json.dumps(s.as_dict(), allow_nan=False))
    assert table["weighting"] == "none"
    back = ConversionSettings.from_table(table)
    assert back == s and back.weighting is Weighting.NONE


@pytest.mark.parametrize(("kw", "words"), [
    ({"weighting": "wiener"}, "weighting"),
    ({"gate_start_s": 1e-6}, "both"),
    ({"gate_start_s": 3e-6, "gate_end_s": 1e-6}, "empty"),
    ({"gate_threshold_sigma": 0.0}, "gate_threshold_sigma"),
    ({"noise_segment_samples": 8}, "noise_segment_samples"),
    ({"noise_segment_samples": 256.0}, "noise_segment_samples"),
    ({"low_snr_db": float("nan")}, "low_snr_db"),
    ({"beyond_calibration_share": -0.1}, "beyond_calibration_share"),
    ({"awf_blend_db": -1.0}, "awf_blend_db"),
])
def test_bad_settings_are_config_errors(kw, words):
    with pytest.raises(ConfigError, match=words):
        ConversionSettings(**kw)
