"""Rules on traces with no pulse, or with the generator output known to be off.

Such traces are noise: drift, conversion, narrowband and range-use rules keep their
state and stay quiet; clipping, over-pressure and the tick rules stay live; no_pulse
says so once.
"""

from __future__ import annotations

import numpy as np
import pytest
from alert_samples import engine, obs, result

from tankside.drivers.trace import RawTrace, count_at_rails
from tankside.monitor.live.rules import TickObservation, observation_from_trace

SUPPRESSED = ("pr_drift", "conversion_failed", "narrowband_fail", "range_under_use")


def noise_obs(seq, rng, **kw):
    """What the rules see of a noise trace: random p_r of a few kPa, or a failed
    conversion (f_awf outside the calibrated band), and a small fraction of the range."""
    if rng.random() < 0.5:
        res, err = None, "OutOfBandError: acoustic working frequency 55 MHz"
    else:
        res, err = result(p_c=rng.uniform(2e3, 6e3), p_r=rng.uniform(2e3, 6e3),
                          narrowband_ok=False), None
    values = {"pulse_present": False, "result": res, "error": err,
              "fraction_of_full_scale": 0.02, "method_in_use": "narrowband"}
    values.update(kw)
    return obs(seq, **values)


def rules_fired(eng, observations):
    return [f.rule for o in observations for f in eng.on_trace(o)]


class TestSuppression:
    @pytest.mark.parametrize("quiet", [{"pulse_present": False},
                                       {"pulse_present": True, "drive_on": False}])
    def test_noise_raises_no_drift_conversion_narrowband_or_under_use(self, quiet):
        eng = engine(range_under_use={"consecutive_traces": 3},
                     pr_drift={"window_traces": 4})
        rng = np.random.default_rng(0)
        fired = rules_fired(eng, [noise_obs(i, rng, **quiet) for i in range(200)])
        assert not set(fired) & set(SUPPRESSED)
        assert eng.under_used_traces == 0
        assert fired.count("no_pulse") == (0 if quiet["pulse_present"] else 1)

    def test_the_same_noise_with_a_pulse_flag_floods(self):
        # The contrast: judged as if a pulse were there, the flapping noise re-fires.
        eng = engine(conversion_failed={"clear_after_traces": 1})
        rng = np.random.default_rng(0)
        fired = rules_fired(eng, [noise_obs(i, rng, pulse_present=True) for i in range(200)])
        assert fired.count("conversion_failed") > 20

    def test_over_pressure_and_clipping_stay_live(self):
        eng = engine(over_pressure={"limit_pa": 1e6})
        fired = rules_fired(eng, [obs(0, pulse_present=False, drive_on=False,
                                      result=result(p_c=2e6), clipped_high=5)])
        assert "over_pressure" in fired and "clipping" in fired

    def test_tick_rules_stay_live(self):
        eng = engine()
        eng.on_trace(obs(0, pulse_present=False, drive_on=False))
        ticks = eng.on_tick(TickObservation(now_s=10.0, since_trigger_s=9.0))
        assert [f.rule for f in ticks] == ["no_trigger"]

    def test_state_is_kept_across_a_quiet_stretch(self):
        # Two under-used traces, a quiet stretch, then the third fires the rule.
        eng = engine(range_under_use={"consecutive_traces": 3})
        under = {"fraction_of_full_scale": 0.1}
        assert rules_fired(eng, [obs(0, **under), obs(1, **under)]) == []
        rules_fired(eng, [obs(i, pulse_present=False, **under) for i in range(2, 30)])
        assert eng.under_used_traces == 2
        assert "range_under_use" in rules_fired(eng, [obs(30, **under)])

    def test_a_standing_conversion_failure_stays_latched_through_noise(self):
        eng = engine()
        assert "conversion_failed" in rules_fired(eng, [obs(0, result=None, error="bad")])
        rules_fired(eng, [obs(i, pulse_present=False) for i in range(1, 10)])
        assert "conversion_failed" in eng.active

    def test_drift_window_takes_no_noise_and_restarts_when_the_pulse_is_back(self):
        eng = engine(pr_drift={"window_traces": 4, "max_change_percent": 10.0})
        rules_fired(eng, [obs(i, result=result(p_r=1.0e6)) for i in range(3)])
        rules_fired(eng, [obs(i, pulse_present=False, result=result(p_r=5e3))
                          for i in range(3, 50)])
        # Back at a lower drive: without the restart the window would hold 1.0 MPa
        # beside 0.6 MPa and call it a 40 % drift.
        fired = rules_fired(eng, [obs(i, result=result(p_r=0.6e6)) for i in range(50, 60)])
        assert "pr_drift" not in fired
        fired = rules_fired(eng, [obs(i, result=result(p_r=0.3e6)) for i in range(60, 64)])
        assert "pr_drift" in fired                      # and it is live again


class TestNoPulseRule:
    def test_fires_once_and_re_arms_after_the_clear_hold(self):
        eng = engine()
        pattern = [False] * 10 + [True] * 2 + [False] * 5 + [True] * 3 + [False] * 2
        fired = [bool([f for f in eng.on_trace(obs(i, pulse_present=p)) if f.rule == "no_pulse"])
                 for i, p in enumerate(pattern)]
        assert [i for i, f in enumerate(fired) if f] == [0, 20]

    def test_message_and_defaults(self):
        eng = engine()
        (firing,) = [f for f in eng.on_trace(obs(0, pulse_present=False, drive_on=False,
                                                  peak_to_noise=4.2))
                     if f.rule == "no_pulse"]
        assert firing.severity == "info" and firing.actions == ("record",)
        assert "No pulse" in firing.message and "generator output off" in firing.message
        assert firing.detail["peak_to_noise"] == 4.2 and firing.detail["drive_on"] is False

    def test_disabled_no_pulse_keeps_the_suppression(self):
        eng = engine(no_pulse={"enabled": False})
        fired = rules_fired(eng, [obs(i, pulse_present=False, result=None, error="x")
                                  for i in range(5)])
        assert fired == []

    def test_presence_options_come_from_the_config(self):
        eng = engine(no_pulse={"noise_factor": 5.0, "edge_fraction": 0.2})
        assert eng.presence_options() == {"noise_factor": 5.0, "edge_fraction": 0.2}


def raw_trace(volts, seq=0, range_v=0.1):
    vpc = range_v / 65536
    codes = np.clip(np.rint(volts / vpc), -32768, 32767).astype(np.int16)
    low, high = count_at_rails(codes, -32768, 32767)
    return RawTrace(codes=codes, volts_per_code=vpc, offset_v=0.0, dt_s=4e-9, t0_s=0.0,
                    seq=seq, time_s=0.0, range_v=range_v, code_min=-32768, code_max=32767,
                    clipped_low=low, clipped_high=high, data_format="int16")


class TestObservationFromTrace:
    def test_noise_and_pulse_on_raw_codes(self):
        rng = np.random.default_rng(4)
        noise_v = rng.normal(0.0, 0.3e-3, 2000)
        burst = np.zeros(2000)
        burst[800:1000] = 0.03 * np.sin(2 * np.pi * np.arange(200) / 70) * np.hanning(200)
        quiet = observation_from_trace(raw_trace(noise_v), drive_on=False)
        loud = observation_from_trace(raw_trace(noise_v + burst), drive_on=True)
        assert not quiet.pulse_present and quiet.quiet and quiet.drive_on is False
        assert loud.pulse_present and not loud.quiet
        assert loud.peak_to_noise > 50 > 8 > quiet.peak_to_noise
        # a factor below the noise's own peak calls the noise a pulse
        assert observation_from_trace(raw_trace(noise_v), noise_factor=1.0).pulse_present

    def test_unknown_drive_is_judged_by_the_trace_alone(self):
        o = observation_from_trace(raw_trace(np.zeros(100)))
        assert o.drive_on is None and not o.pulse_present and o.quiet
