"""Choosing the digitiser's vertical range: one step up on clipping, down with hysteresis.

Pure functions; the pipeline applies the answer to the digitiser. Ranges are
full-scale spans, peak to peak, in V, and ``fraction_used`` is
the largest distance from mid-scale over half the full scale of the last trace
(``RawTrace.fraction_of_full_scale``; 1 means the signal reaches a rail).

Why it cannot oscillate on a steady signal: a step down is only taken when the
peak would use less than ``fit_below`` (< 1) of the lower range, so the lower range
does not clip; a step up is only taken on clipping, where the signal used the whole
of the smaller range, so on the larger range it would need ``fit_below`` of the
smaller one, which it exceeds, to come back down. A steady signal therefore moves
in one direction and settles. Signals that vary by less than ``1 / fit_below``
(1.25 with the default 0.8) between traces keep this property.
"""

from __future__ import annotations

import math

__all__ = ["next_range", "range_after"]


def next_range(ranges_v, current_v: float, *, clipped: bool, fraction_used: float,
               up_on_clip: bool = True, down_below: float = 0.3, fit_below: float = 0.8,
               under_used_traces: int | None = None, after_traces: int = 1) -> float | None:
    """The range to switch to after a trace, or None to stay.

    Parameters
    ----------
    ranges_v : sequence of float
        The digitiser's allowed ranges, V (any order; duplicates ignored).
    current_v : float
        The range of the trace judged, V. It need not be one of ``ranges_v``
        (the neighbours are the nearest allowed ranges above and below).
    clipped : bool
        Whether the trace had samples at the ADC rails.
    fraction_used : float
        ``max |volts| / (current_v / 2)`` of the trace, >= 0.
    up_on_clip : bool
        Step up one range on clipping; when False a clipped trace never changes
        the range (and never steps it down).
    down_below : float
        The trace is under-used when ``fraction_used <= down_below`` (0 < x <= 1).
    fit_below : float
        Step down only when ``fraction_used * current_v / lower_v < fit_below``
        (0 < x < 1): the margin that keeps the lower range from clipping.
    under_used_traces : int or None
        Consecutive under-used traces on this range, counting this one. None means
        the caller has already waited (e.g. the ``range_under_use`` alert only fires
        after its ``consecutive_traces``).
    after_traces : int
        Step down only when ``under_used_traces >= after_traces``.

    Returns
    -------
    float or None
        The next larger range on clipping (None when already at the largest); the
        next smaller range when the trace is under-used, the wait is over and the
        signal fits with margin; otherwise None.

    Raises
    ------
    ValueError
        Empty or non-positive ranges, or settings outside the bounds above.
    """
    ranges = sorted({float(r) for r in ranges_v})
    if not ranges or ranges[0] <= 0 or not all(math.isfinite(r) for r in ranges):
        raise ValueError(f"ranges_v must be positive finite spans in V, got {list(ranges_v)!r}")
    if not (current_v > 0 and math.isfinite(current_v)):
        raise ValueError(f"current_v must be a positive span in V, got {current_v!r}")
    if not (fraction_used >= 0 and math.isfinite(fraction_used)):
        raise ValueError(f"fraction_used must be a finite number >= 0, got {fraction_used!r}")
    if not 0 < down_below <= 1:
        raise ValueError(f"down_below must lie in (0, 1], got {down_below!r}")
    if not 0 < fit_below < 1:
        raise ValueError(f"fit_below must lie in (0, 1), got {fit_below!r}")
    if after_traces < 1:
        raise ValueError(f"after_traces must be >= 1, got {after_traces!r}")

    # Tolerance so that a range read back as 0.49999999 V counts as 0.5 V.
    tol = 1e-9 * current_v
    if clipped:
        if not up_on_clip:
            return None
        larger = [r for r in ranges if r > current_v + tol]
        return larger[0] if larger else None
    if fraction_used > down_below:
        return None
    if under_used_traces is not None and under_used_traces < after_traces:
        return None
    smaller = [r for r in ranges if r < current_v - tol]
    if not smaller:
        return None
    lower = smaller[-1]
    if fraction_used * current_v / lower < fit_below:
        return lower
    return None


def range_after(firing, ranges_v, *, current_v: float | None = None,
                fit_below: float = 0.8, up_on_clip: bool = True) -> float | None:
    """The range an ``auto-range`` action of a ``clipping`` or ``range_under_use``
    firing asks for, or None.

    Parameters
    ----------
    firing : tankside.monitor.live.rules.Firing
        Its ``detail`` carries the trace's range, fraction used and, for under-use,
        the count of under-used traces and the rule's thresholds.
    ranges_v : sequence of float
        The digitiser's allowed ranges, V.
    current_v : float, optional
        The digitiser's range now, V. When given and different from the range of
        the trace that raised the firing, the firing is stale (the range already
        moved) and None is returned.
    """
    detail = firing.detail
    if firing.rule not in ("clipping", "range_under_use"):
        return None
    trace_range_v = float(detail["range_v"])
    if current_v is not None and abs(current_v - trace_range_v) > 1e-9 * trace_range_v:
        return None
    fraction = float(detail["fraction_of_full_scale"])
    if not math.isfinite(fraction):
        return None
    if firing.rule == "clipping":
        return next_range(ranges_v, trace_range_v, clipped=True, fraction_used=fraction,
                          up_on_clip=up_on_clip, fit_below=fit_below)
    return next_range(ranges_v, trace_range_v, clipped=False, fraction_used=fraction,
                      down_below=float(detail["below_fraction"]),
                      fit_below=fit_below, under_used_traces=int(detail["under_used_traces"]),
                      after_traces=int(detail["consecutive_traces"]))
