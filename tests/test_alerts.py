"""Alert rules: thresholds at their boundaries, latching, the drift window, settings.

Thresholds are inclusive by the rules' own definition (a value that reaches the
threshold fires); each boundary test checks the threshold itself and the nearest
float on the safe side (numpy.nextafter).
"""

from __future__ import annotations

import tomllib
from pathlib import Path

import numpy as np
import pytest
from alert_samples import engine, obs, result

from tankside.drivers.trace import RawTrace, count_at_rails
from tankside.monitor.errors import ConfigError, TanksideError
from tankside.monitor.live.autorange import range_after
from tankside.monitor.live.rule_specs import protection_warnings
from tankside.monitor.live.rules import (
    RULES,
    AlertConfig,
    TickObservation,
    observation_from_trace,
)


def fired(firings, rule):
    return [f for f in firings if f.rule == rule]


def below(x):
    return float(np.nextafter(x, -np.inf))


def above(x):
    return float(np.nextafter(x, np.inf))


README = Path(__file__).resolve().parents[1] / "README.md"


def _readme_alerts_section() -> str:
    text = README.read_text(encoding="utf-8")
    return text.split("### Alerts", 1)[1].split("\n### ", 1)[0]


def _markdown_tables(text: str) -> list[list[list[str]]]:
    """Every pipe table in ``text`` as rows of cells (header first, rule line dropped)."""
    tables: list[list[list[str]]] = []
    current: list[list[str]] = []
    for line in text.splitlines():
        if line.startswith("|"):
            cells = [c.strip().strip("`") for c in line.strip().strip("|").split("|")]
            if not all(set(c) <= {"-", " ", ":"} for c in cells):
                current.append(cells)
        elif current:
            tables.append(current)
            current = []
    if current:
        tables.append(current)
    return tables


def test_readme_rule_tables_match_code():
    rules_table, thresholds_table = _markdown_tables(_readme_alerts_section())[:2]
    header, *rows = rules_table
    assert header == ["rule", "fires when", "severity", "default actions"]
    assert [r[0] for r in rows] == list(RULES)
    for name, fires_when, severity, actions in rows:
        spec = RULES[name]
        assert severity == spec.severity, name
        assert tuple(a.strip() for a in actions.split(",")) == spec.actions, name
        for param in spec.params:
            assert param.key in fires_when, (name, param.key)
    header, *rows = thresholds_table
    assert header == ["rule", "key", "units", "default", "meaning"]
    documented = {(r[0], r[1]): r for r in rows}
    in_code = {(name, p.key): p for name, spec in RULES.items() for p in spec.params}
    assert documented.keys() == in_code.keys()
    for key, (_, _, units, default, meaning) in documented.items():
        param = in_code[key]
        assert units == param.unit, key
        assert meaning == param.meaning, key
        if param.default is None:
            assert default == "unset", key
        elif isinstance(param.default, tuple):
            assert default == ", ".join(param.default), key
        else:
            assert float(default) == param.default, key


def test_readme_bench_example_parses():
    block = _readme_alerts_section().split("```toml\n", 1)[1].split("```", 1)[0]
    config = AlertConfig.from_table(tomllib.loads(block)["alerts"])
    assert config["over_pressure"].params["limit_pa"] == 2.0e6
    assert config["over_pressure"].actions == ("record", "bell", "safe-off", "stop")
    assert config["range_under_use"].params["consecutive_traces"] == 20
    assert config["store_lag"].enabled is False
    assert config["clipping"] == AlertConfig.defaults()["clipping"]


def test_as_dict_round_trips():
    config = AlertConfig.from_table({"over_pressure": {"limit_pa": 3e6, "repeat_after_s": 30},
                                     "clipping": {"enabled": False, "min_samples": 4}})
    assert AlertConfig.from_table(config.as_dict()) == config
    assert AlertConfig.from_table(None) == AlertConfig.defaults()


# -- settings errors name the key ------------------------------------------------------

@pytest.mark.parametrize("table, key", [
    ({"clip": {}}, "clip"),
    ({"clipping": 3}, "clipping"),
    ({"clipping": {"min_sample": 1}}, "clipping.min_sample"),
    ({"clipping": {"min_samples": 0}}, "clipping.min_samples"),
    ({"clipping": {"min_samples": 1.5}}, "clipping.min_samples"),
    ({"clipping": {"min_samples": True}}, "clipping.min_samples"),
    ({"over_pressure": {"limit_pa": -1.0}}, "over_pressure.limit_pa"),
    ({"over_pressure": {"rated_max_pa": "10 MPa"}}, "over_pressure.rated_max_pa"),
    ({"over_pressure": {"rated_max_pa": float("inf")}}, "over_pressure.rated_max_pa"),
    ({"range_under_use": {"below_fraction": 1.5}}, "range_under_use.below_fraction"),
    ({"range_under_use": {"below_fraction": 0}}, "range_under_use.below_fraction"),
    ({"pr_drift": {"window_traces": 1}}, "pr_drift.window_traces"),
    ({"falling_behind": {"queue_fraction": float("nan")}}, "falling_behind.queue_fraction"),
    ({"no_trigger": {"actions": ["beep"]}}, "no_trigger.actions"),
    ({"no_trigger": {"actions": ["auto-range"]}}, "no_trigger.actions"),
    ({"no_trigger": {"actions": "bell"}}, "no_trigger.actions"),
    ({"no_trigger": {"actions": ["bell", "bell"]}}, "no_trigger.actions"),
    ({"store_lag": {"enabled": "yes"}}, "store_lag.enabled"),
    ({"store_lag": {"severity": "fatal"}}, "store_lag.severity"),
    ({"store_lag": {"repeat_after_s": -1}}, "store_lag.repeat_after_s"),
])
def test_bad_settings_name_the_key(table, key):
    with pytest.raises(ConfigError) as info:
        AlertConfig.from_table(table)
    assert str(info.value).startswith(f"{key}: ")
    assert info.value.key == key
    assert isinstance(info.value, TanksideError)


def test_whole_number_written_as_float_is_accepted():
    config = AlertConfig.from_table({"clipping": {"min_samples": 2.0}})
    assert config["clipping"].params["min_samples"] == 2
    assert isinstance(config["clipping"].params["min_samples"], int)


# -- each rule at its threshold and just on the safe side ---------------------------------

class TestClipping:
    def test_threshold(self):
        assert not fired(engine(clipping={"min_samples": 5}).on_trace(
            obs(clipped_low=2, clipped_high=2)), "clipping")
        firings = fired(engine(clipping={"min_samples": 5}).on_trace(
            obs(clipped_low=2, clipped_high=3, range_v=0.5)), "clipping")
        assert len(firings) == 1
        firing = firings[0]
        assert firing.severity == "warning"
        assert firing.actions == ("record", "bell", "auto-range")
        assert "5 samples" in firing.message and "0.5 V" in firing.message
        assert firing.detail["clipped_high"] == 3 and firing.seq == 0

    def test_disabled_rule_never_fires(self):
        eng = engine(clipping={"enabled": False})
        assert not fired(eng.on_trace(obs(clipped_high=1000)), "clipping")


class TestOverPressure:
    def test_rated_maximum(self):
        rated = 2.0e6
        tables = {"over_pressure": {"rated_max_pa": rated}}
        assert not fired(engine(**tables).on_trace(obs(result=result(p_c=below(rated)))),
                         "over_pressure")
        firing, = fired(engine(**tables).on_trace(obs(result=result(p_c=rated))),
                        "over_pressure")
        assert firing.severity == "critical"
        assert "safe-off" in firing.actions
        assert "2 MPa" in firing.message and "rated maximum" in firing.message

    def test_rarefactional_magnitude_counts_whatever_its_sign(self):
        tables = {"over_pressure": {"rated_max_pa": 2.0e6}}
        for p_r in (-2.0e6, 2.0e6):
            firing, = fired(engine(**tables).on_trace(obs(result=result(p_c=1e5, p_r=p_r))),
                            "over_pressure")
            assert firing.message.startswith("Over-pressure: p_r = 2 MPa")

    def test_lower_of_user_limit_and_rating_applies(self):
        low = {"over_pressure": {"rated_max_pa": 5e6, "limit_pa": 1e6}}
        assert fired(engine(**low).on_trace(obs(result=result(p_c=1e6))), "over_pressure")
        assert not fired(engine(**low).on_trace(obs(result=result(p_c=below(1e6)))),
                         "over_pressure")
        high = {"over_pressure": {"rated_max_pa": 5e6, "limit_pa": 8e6}}
        firing, = fired(engine(**high).on_trace(obs(result=result(p_c=5e6))), "over_pressure")
        assert firing.detail["limit_pa"] == 5e6
        assert firing.detail["limit_source"] == "hydrophone rated maximum"

    def test_not_judged_without_a_result(self):
        eng = engine(over_pressure={"rated_max_pa": 1.0})
        assert not fired(eng.on_trace(obs(result=None, error="all zero")), "over_pressure")
        nan = float("nan")
        assert not fired(eng.on_trace(obs(result=result(p_c=nan, p_r=nan))), "over_pressure")

    def test_clipped_trace_counts_within_the_margin(self):
        # 124 kPa measured on a clipped trace against a 150 kPa limit (the case of a
        # 185 kPa field cut by the rails): the floor is within 50 % of the limit.
        tables = {"over_pressure": {"limit_pa": 1.5e5}}
        firing, = fired(engine(**tables).on_trace(
            obs(clipped_high=40, result=result(p_c=1.24e5, p_r=-0.9e5))), "over_pressure")
        assert "at least 124 kPa (clipped)" in firing.message
        assert "user limit of 150 kPa" in firing.message
        assert firing.detail["clipped"] is True
        assert firing.detail["counts_from_pa"] == pytest.approx(0.75e5)
        assert "safe-off" in firing.actions
        # the same pressure on a trace that is not clipped is a measurement, under the limit
        assert not fired(engine(**tables).on_trace(obs(result=result(p_c=1.24e5, p_r=-0.9e5))),
                         "over_pressure")

    def test_clipped_margin_boundary(self):
        limit = 2.0e5
        for margin in (0.0, 0.2, 0.5):
            tables = {"over_pressure": {"limit_pa": limit, "clipped_margin": margin}}
            edge = limit * (1.0 - margin)
            assert fired(engine(**tables).on_trace(
                obs(clipped_low=1, result=result(p_c=edge, p_r=0.0))), "over_pressure"), margin
            assert not fired(engine(**tables).on_trace(
                obs(clipped_low=1, result=result(p_c=below(edge), p_r=0.0))),
                "over_pressure"), margin

    def test_margin_of_one_counts_every_clipped_trace(self):
        tables = {"over_pressure": {"limit_pa": 1e6, "clipped_margin": 1.0}}
        assert fired(engine(**tables).on_trace(
            obs(clipped_low=1, result=result(p_c=10.0, p_r=-5.0))), "over_pressure")

    def test_clipped_margin_setting_is_checked(self):
        for bad in (-0.1, 1.5, "half"):
            with pytest.raises(ConfigError, match="over_pressure.clipped_margin"):
                AlertConfig.from_table({"over_pressure": {"clipped_margin": bad}})

    def test_critical_firings_come_first(self):
        eng = engine(over_pressure={"rated_max_pa": 1e6})
        firings = eng.on_trace(obs(clipped_high=9, result=result(p_c=3e6)))
        assert [f.rule for f in firings] == ["over_pressure", "clipping"]


class TestRangeUnderUse:
    tables = {"range_under_use": {"below_fraction": 0.3, "consecutive_traces": 3}}

    def test_after_consecutive_traces_at_the_fraction(self):
        eng = engine(**self.tables)
        out = [fired(eng.on_trace(obs(i, fraction_of_full_scale=0.3)), "range_under_use")
               for i in range(3)]
        assert out[0] == [] and out[1] == []
        firing, = out[2]
        assert firing.severity == "info"
        assert firing.detail["under_used_traces"] == 3
        assert "30 %" in firing.message and "3 traces in a row" in firing.message

    def test_just_above_the_fraction_never(self):
        eng = engine(**self.tables)
        for i in range(20):
            assert not fired(eng.on_trace(obs(i, fraction_of_full_scale=above(0.3))),
                             "range_under_use")

    def test_an_interruption_restarts_the_count(self):
        eng = engine(**self.tables)
        fractions = [0.1, 0.1, 0.9, 0.1, 0.1, 0.1]
        hits = [bool(fired(eng.on_trace(obs(i, fraction_of_full_scale=f)), "range_under_use"))
                for i, f in enumerate(fractions)]
        assert hits == [False, False, False, False, False, True]


class TestPrDrift:
    tables = {"pr_drift": {"window_traces": 4, "max_change_percent": 10.0}}

    def run(self, values, positions=None, eng=None):
        eng = eng or engine(**self.tables)
        positions = positions or [(0.0, 0.0, 0.0)] * len(values)
        return eng, [fired(eng.on_trace(obs(i, result=result(p_r=v), position=pos)), "pr_drift")
                     for i, (v, pos) in enumerate(zip(values, positions, strict=True))]

    def test_threshold(self):
        _, out = self.run([1.0e6, 1.0e6, 1.1e6, 1.1e6])
        assert out[:3] == [[], [], []]
        firing, = out[3]
        assert firing.detail["change_percent"] == pytest.approx(10.0)
        assert "10 %" in firing.message and "1 MPa -> 1.1 MPa" in firing.message
        _, out = self.run([1.0e6, 1.0e6, 1.0999e6, 1.0999e6])
        assert not any(out)

    def test_fall_counts_as_drift(self):
        _, out = self.run([-1.0e6, -1.0e6, -0.9e6, -0.9e6])
        assert out[3]

    def test_position_change_restarts_the_window(self):
        a, b = (0.0, 0.0, 0.0), (0.0, 0.0, 1.0e-3)
        values = [1.0e6, 1.0e6, 1.0e6, 1.5e6, 1.5e6, 1.5e6, 1.5e6]
        positions = [a, a, a, b, b, b, b]
        _, out = self.run(values, positions)
        assert not any(out)

    def test_position_change_re_arms_and_drift_at_the_new_position_fires(self):
        a, b = (1.0,), (2.0,)
        eng, out = self.run([1.0e6, 1.0e6, 2.0e6, 2.0e6], [a] * 4)
        assert out[3]
        _, out = self.run([3.0e6, 3.0e6, 2.0e6, 2.0e6], [b] * 4, eng=eng)
        assert out[3] and out[3][0].detail["position"] == [2.0]

    def test_failed_conversions_are_skipped(self):
        eng = engine(**self.tables)
        eng.on_trace(obs(0, result=result(p_r=1.0e6)))
        eng.on_trace(obs(1, result=None, error="no pulse"))
        eng.on_trace(obs(2, result=result(p_r=1.0e6)))
        eng.on_trace(obs(3, result=result(p_r=1.2e6)))
        assert fired(eng.on_trace(obs(4, result=result(p_r=1.2e6))), "pr_drift")

    def test_clipped_traces_and_range_steps_do_not_count_as_drift(self):
        # Auto-range in action: two clipped traces (p_r a floor) on 0.02 V, then steady
        # traces on the next range. Neither the clipped p_r nor the old range is a baseline.
        eng = engine(**self.tables)
        out = []
        for i, (pr, clipped, rng) in enumerate([(0.6e6, 40, 0.02), (0.8e6, 30, 0.05)]
                                               + [(1.0e6, 0, 0.1)] * 6):
            out += fired(eng.on_trace(obs(i, result=result(p_r=pr), range_v=rng,
                                          clipped_low=clipped, clipped_high=clipped)),
                         "pr_drift")
        assert out == []
        # a real drift on the new range still fires
        for i, pr in enumerate([1.0e6, 1.0e6, 1.2e6, 1.2e6], start=8):
            out += fired(eng.on_trace(obs(i, result=result(p_r=pr), range_v=0.1)), "pr_drift")
        assert len(out) == 1


class TestNarrowbandFail:
    def test_fires_only_while_the_narrowband_method_is_in_use(self):
        failing = result(method="narrowband", narrowband_ok=False,
                         narrowband_max_deviation_db=1.7)
        firing, = fired(engine().on_trace(obs(result=failing, method_in_use="narrowband")),
                        "narrowband_fail")
        assert "1.7 dB" in firing.message and "0.8 to 1.2 MHz" in firing.message
        deconvolved = result(method="deconvolve", narrowband_ok=False)
        assert not fired(engine().on_trace(obs(result=deconvolved, method_in_use="auto")),
                         "narrowband_fail")
        passing = result(method="narrowband", narrowband_ok=True)
        assert not fired(engine().on_trace(obs(result=passing, method_in_use="narrowband")),
                         "narrowband_fail")


def test_conversion_failed_carries_the_error_text():
    eng = engine()
    firing, = fired(eng.on_trace(obs(7, result=None, error="f_awf 40 MHz outside band")),
                    "conversion_failed")
    assert firing.message == "Conversion to pressure failed on trace 7: f_awf 40 MHz outside band"
    assert firing.seq == 7
    assert not fired(eng.on_trace(obs(8)), "conversion_failed")


class TestTickRules:
    def one(self, rule, tables, **tick):
        return fired(engine(**tables).on_tick(TickObservation(now_s=100.0, **tick)), rule)

    def test_no_trigger(self):
        tables = {"no_trigger": {"after_s": 5.0}}
        assert not self.one("no_trigger", tables, since_trigger_s=below(5.0))
        firing, = self.one("no_trigger", tables, since_trigger_s=5.0)
        assert firing.seq is None and firing.time_s == 100.0
        assert "5.0 s" in firing.message
        assert not self.one("no_trigger", tables, since_trigger_s=None)

    def test_disk_space_low(self):
        tables = {"disk_space_low": {"min_free_bytes": 2_000_000_000}}
        assert not self.one("disk_space_low", tables, disk_free_bytes=2_000_000_001)
        firing, = self.one("disk_space_low", tables, disk_free_bytes=2_000_000_000)
        assert "2 GB free" in firing.message

    def test_falling_behind(self):
        tables = {"falling_behind": {"queue_fraction": 0.8}}
        assert not self.one("falling_behind", tables, queue_depth=79, queue_capacity=100)
        firing, = self.one("falling_behind", tables, queue_depth=80, queue_capacity=100)
        assert "80 of 100" in firing.message
        assert not self.one("falling_behind", tables, queue_depth=80, queue_capacity=0)

    def test_store_lag(self):
        tables = {"store_lag": {"max_lag_s": 3.0}}
        assert not self.one("store_lag", tables, store_lag_s=below(3.0))
        assert self.one("store_lag", tables, store_lag_s=3.0)


# -- latching ------------------------------------------------------------------------------

def test_standing_condition_fires_once_and_re_arms_when_cleared():
    eng = engine(clipping={"clear_after_traces": 1})
    clipped = [1, 1, 1, 0, 1, 1]
    hits = [bool(fired(eng.on_trace(obs(i, clipped_high=c)), "clipping"))
            for i, c in enumerate(clipped)]
    assert hits == [True, False, False, False, True, False]
    assert "clipping" in eng.active


def test_flickering_condition_fires_once_within_the_clear_hold():
    # Default hold of 3: two clear traces between episodes are not enough to re-arm.
    eng = engine()
    clipped = [1, 0, 1, 0, 0, 1, 0, 0, 0, 1]
    hits = [bool(fired(eng.on_trace(obs(i, clipped_high=c)), "clipping"))
            for i, c in enumerate(clipped)]
    assert hits == [True, False, False, False, False, False, False, False, False, True]


@pytest.mark.parametrize("hold", [1, 2, 5])
def test_clear_hold_is_the_configured_number_of_clear_traces(hold):
    eng = engine(clipping={"clear_after_traces": hold})
    eng.on_trace(obs(0, clipped_high=1))
    for i in range(1, hold):
        eng.on_trace(obs(i))
        assert "clipping" in eng.active, i
    eng.on_trace(obs(hold))
    assert "clipping" not in eng.active
    assert fired(eng.on_trace(obs(hold + 1, clipped_high=1)), "clipping")


def test_traces_that_cannot_be_judged_do_not_count_towards_the_hold():
    eng = engine(conversion_failed={"clear_after_traces": 2})
    assert fired(eng.on_trace(obs(0, result=None, error="bad")), "conversion_failed")
    eng.on_trace(obs(1))                                      # clear: 1 of 2
    eng.on_trace(obs(2, result=None, error="bad", pulse_present=False))  # not judged
    assert "conversion_failed" in eng.active
    eng.on_trace(obs(3))                                      # clear: 2 of 2
    assert "conversion_failed" not in eng.active


def test_clear_hold_setting_is_checked():
    with pytest.raises(ConfigError, match=r"^clipping.clear_after_traces: must be >= 1"):
        AlertConfig.from_table({"clipping": {"clear_after_traces": 0}})
    config = AlertConfig.from_table({"pr_drift": {"clear_after_traces": 7}})
    assert config["pr_drift"].clear_after_traces == 7
    assert config["clipping"].clear_after_traces == 3
    assert AlertConfig.from_table(config.as_dict()) == config


def test_repeat_interval_while_condition_stands():
    eng = engine(no_trigger={"after_s": 1.0, "repeat_after_s": 2.0})
    hits = [bool(eng.on_tick(TickObservation(now_s=t, since_trigger_s=10.0 + t)))
            for t in (0.0, 1.0, 2.0, 3.0, 4.0)]
    assert hits == [True, False, True, False, True]


def test_tick_rule_re_arms_after_a_trigger():
    eng = engine(no_trigger={"clear_after_traces": 1})
    seen = [bool(eng.on_tick(TickObservation(now_s=t, since_trigger_s=s)))
            for t, s in ((0, 6.0), (1, 7.0), (2, 0.1), (3, 6.0))]
    assert seen == [True, False, False, True]
    eng.reset("no_trigger")
    assert eng.on_tick(TickObservation(now_s=4, since_trigger_s=7.0))


def test_range_change_re_arms_clipping():
    eng = engine()
    ranges = [0.5, 0.5, 1.0, 1.0]
    hits = [bool(fired(eng.on_trace(obs(i, clipped_high=4, range_v=r)), "clipping"))
            for i, r in enumerate(ranges)]
    assert hits == [True, False, True, False]


# -- observations from a raw trace, and the closed loop with auto-range ----------------------

def test_observation_from_trace_fraction_matches_numpy():
    codes = np.array([0, 1000, -16000, 32767, 20], dtype=np.int16)
    scale, offset = 0.5 / 32768, 0.001
    low, high = count_at_rails(codes, -32768, 32767)
    raw = RawTrace(codes=codes, volts_per_code=scale, offset_v=offset, dt_s=4e-9, t0_s=0.0,
                   seq=3, time_s=12.5, range_v=1.0, code_min=-32768, code_max=32767,
                   clipped_low=low, clipped_high=high, data_format="int16")
    o = observation_from_trace(raw, None, "bad", method_in_use="narrowband", position=(1.0,))
    # The share is the distance from mid-scale (halfway between the rails, code -0.5,
    # at offset - 0.5 * scale volts) over half the full scale (65536 codes of `scale`).
    volts = codes.astype(float) * scale + offset
    expected = np.max(np.abs(volts - (offset - 0.5 * scale))) / (65536 * scale / 2)
    assert o.fraction_of_full_scale == pytest.approx(expected, rel=1e-12)
    assert (o.clipped_low, o.clipped_high, o.seq, o.time_s) == (0, 1, 3, 12.5)
    assert o.error == "bad" and o.position == (1.0,)


@pytest.mark.parametrize("start_v", [0.05, 5.0])
def test_closed_loop_settles_on_one_range(start_v):
    ranges_v = [0.05, 0.1, 0.2, 0.5, 1.0, 2.0, 5.0]
    peak_v = 0.3  # steady signal
    eng = engine(range_under_use={"consecutive_traces": 3})
    range_v, history = start_v, []
    for seq in range(60):
        half = range_v / 2
        clipped = peak_v >= half
        fraction = min(peak_v / half, 1.0)
        firings = eng.on_trace(obs(seq, clipped_high=int(clipped), range_v=range_v,
                                   fraction_of_full_scale=fraction))
        for firing in firings:
            if "auto-range" in firing.actions:
                new = range_after(firing, ranges_v, current_v=range_v)
                if new is not None:
                    range_v = new
        history.append(range_v)
    assert history[-1] == 1.0
    assert history[-30:] == [1.0] * 30


class TestProtectionWarnings:
    def test_defaults_and_extra_actions_warn_of_nothing(self):
        assert protection_warnings(AlertConfig.defaults()) == ()
        config = AlertConfig.from_table(
            {"over_pressure": {"actions": ["record", "safe-off", "stop"]}})
        assert protection_warnings(config) == ()

    @pytest.mark.parametrize(("table", "words"), [
        ({"enabled": False}, "over_pressure is disabled"),
        ({"actions": []}, "over_pressure has no actions"),
        ({"actions": ["record", "bell"]}, 'actions = ["record", "bell"], without "safe-off"'),
        ({"actions": ["stop"]}, "does not switch the drive off"),
    ])
    def test_disabled_protection_is_named(self, table, words):
        warning, = protection_warnings(AlertConfig.from_table({"over_pressure": table}))
        assert words in warning
