"""Auto-range: one step up on clipping, down with margin and a wait, never oscillating."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from tankside.monitor.live.autorange import next_range, range_after
from tankside.monitor.live.rules import Firing

# A 1-2-5 sequence of full-scale spans (common practice for digitiser front ends).
RANGES_V = [0.02, 0.05, 0.1, 0.2, 0.5, 1.0, 2.0, 5.0]


class TestNextRange:
    def test_clipping_steps_up_one_range(self):
        assert next_range(RANGES_V, 0.2, clipped=True, fraction_used=1.0) == 0.5

    def test_clipping_at_the_largest_range_stays(self):
        assert next_range(RANGES_V, 5.0, clipped=True, fraction_used=1.0) is None

    def test_clipping_without_up_on_clip_never_changes(self):
        assert next_range(RANGES_V, 0.2, clipped=True, fraction_used=0.01,
                          up_on_clip=False) is None

    def test_down_needs_the_fit_margin(self):
        # 0.1875 * 1 V / 0.25 V = 0.75 exactly: not below fit_below = 0.75.
        ranges = [0.25, 1.0]
        kw = {"clipped": False, "down_below": 0.3, "fit_below": 0.75}
        assert next_range(ranges, 1.0, fraction_used=0.1875, **kw) is None
        assert next_range(ranges, 1.0, fraction_used=float(np.nextafter(0.1875, 0)),
                          **kw) == 0.25

    def test_down_needs_under_use(self):
        kw = {"clipped": False, "down_below": 0.25, "fit_below": 0.9}
        assert next_range(RANGES_V, 1.0, fraction_used=0.25, **kw) == 0.5
        assert next_range(RANGES_V, 1.0, fraction_used=float(np.nextafter(0.25, 1)),
                          **kw) is None

    def test_down_waits_for_consecutive_traces(self):
        kw = {"clipped": False, "fraction_used": 0.1, "after_traces": 3}
        assert next_range(RANGES_V, 1.0, under_used_traces=2, **kw) is None
        assert next_range(RANGES_V, 1.0, under_used_traces=3, **kw) == 0.5

    def test_smallest_range_stays(self):
        assert next_range(RANGES_V, 0.02, clipped=False, fraction_used=0.0) is None

    def test_mid_signal_stays(self):
        assert next_range(RANGES_V, 1.0, clipped=False, fraction_used=0.5) is None

    def test_range_read_back_with_rounding_counts_as_the_allowed_one(self):
        assert next_range(RANGES_V, 0.49999999999, clipped=True, fraction_used=1.0) == 1.0
        assert next_range(RANGES_V, 0.50000000001, clipped=False, fraction_used=0.1) == 0.2

    def test_order_of_ranges_does_not_matter(self):
        assert next_range(RANGES_V[::-1], 0.2, clipped=True, fraction_used=1.0) == 0.5

    @pytest.mark.parametrize("kw", [
        {"ranges_v": []},
        {"ranges_v": [0.0, 1.0]},
        {"current_v": -1.0},
        {"fraction_used": float("nan")},
        {"fraction_used": -0.1},
        {"down_below": 0.0},
        {"fit_below": 1.0},
        {"after_traces": 0},
    ])
    def test_bad_arguments(self, kw):
        args = {"ranges_v": RANGES_V, "current_v": 1.0, "clipped": False,
                "fraction_used": 0.1, **kw}
        with pytest.raises(ValueError):
            next_range(args.pop("ranges_v"), args.pop("current_v"), **args)


ranges_strategy = st.lists(st.floats(1e-3, 1e2), min_size=1, max_size=10, unique=True).map(
    sorted).filter(lambda r: all(b > 1.01 * a for a, b in zip(r, r[1:], strict=False)))


@settings(max_examples=200, deadline=None)
@given(ranges=ranges_strategy, index=st.integers(0, 9), fraction=st.floats(0, 1e3))
def test_clipping_always_steps_up_when_a_larger_range_exists(ranges, index, fraction):
    current = ranges[index % len(ranges)]
    new = next_range(ranges, current, clipped=True, fraction_used=fraction)
    larger = [r for r in ranges if r > current]
    if larger:
        assert new == larger[0]
    else:
        assert new is None


def simulate(ranges, start, peaks_v, *, after_traces, fit_below=0.8, down_below=0.3):
    """A digitiser measuring ``peaks_v`` (one peak |V| per trace) under auto-range.

    A trace clips when its peak reaches half the span (the rail), and then uses the
    whole range; the count of under-used traces restarts on each range change.
    """
    range_v, count, history = start, 0, [start]
    for peak in peaks_v:
        half = range_v / 2
        clipped = peak >= half
        fraction = min(peak / half, 1.0)
        count = count + 1 if (not clipped and fraction <= down_below) else 0
        new = next_range(ranges, range_v, clipped=clipped, fraction_used=fraction,
                         down_below=down_below, fit_below=fit_below,
                         under_used_traces=count, after_traces=after_traces)
        if new is not None:
            range_v, count = new, 0
        history.append(range_v)
    return history


def directions(history):
    return [np.sign(b - a) for a, b in zip(history, history[1:], strict=False) if b != a]


@settings(max_examples=200, deadline=None)
@given(ranges=ranges_strategy, index=st.integers(0, 9), peak_v=st.floats(1e-5, 2e2),
       after=st.integers(1, 4))
def test_steady_signal_never_oscillates_and_settles(ranges, index, peak_v, after):
    start = ranges[index % len(ranges)]
    history = simulate(ranges, start, [peak_v] * (len(ranges) * (after + 1) + 5),
                       after_traces=after)
    steps = directions(history)
    assert len(set(steps)) <= 1, history
    assert len(steps) <= len(ranges) - 1
    final = history[-1]
    assert history[-(after + 2):] == [final] * (after + 2)


@settings(max_examples=200, deadline=None)
@given(ranges=ranges_strategy, index=st.integers(0, 9), peak_v=st.floats(1e-5, 2e2),
       jitter=st.lists(st.floats(1.0, 1.2), min_size=10, max_size=80),
       after=st.integers(1, 4))
def test_signal_varying_less_than_the_margin_never_reverses(ranges, index, peak_v, jitter,
                                                            after):
    # 1.2 < 1 / fit_below = 1.25: the variation the module docstring promises to tolerate.
    start = ranges[index % len(ranges)]
    history = simulate(ranges, start, [peak_v * j for j in jitter], after_traces=after)
    assert len(set(directions(history))) <= 1, history


def test_variation_beyond_the_margin_can_reverse():
    # The bound of the previous property is sharp: a 1.3x swing at the edge reverses.
    history = simulate([0.5, 1.0], 1.0, [0.19, 0.19, 0.25, 0.25], after_traces=1,
                       fit_below=0.8, down_below=0.4)
    assert history == [1.0, 0.5, 0.5, 1.0, 1.0]


class TestRangeAfter:
    def firing(self, rule, **detail):
        return Firing(rule=rule, severity="info", message="", actions=("auto-range",), seq=1,
                      detail=detail)

    def test_clipping_firing_steps_up(self):
        f = self.firing("clipping", range_v=0.2, fraction_of_full_scale=1.0)
        assert range_after(f, RANGES_V) == 0.5
        assert range_after(f, RANGES_V, current_v=0.5) is None  # already moved

    def test_under_use_firing_uses_its_own_thresholds(self):
        detail = {"range_v": 1.0, "fraction_of_full_scale": 0.1, "below_fraction": 0.3,
                  "under_used_traces": 5, "consecutive_traces": 5}
        assert range_after(self.firing("range_under_use", **detail), RANGES_V) == 0.5
        detail["under_used_traces"] = 4
        assert range_after(self.firing("range_under_use", **detail), RANGES_V) is None

    def test_other_rules_never_move_the_range(self):
        f = self.firing("over_pressure", range_v=0.2, fraction_of_full_scale=1.0)
        assert range_after(f, RANGES_V) is None
