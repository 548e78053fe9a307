"""Running figures of a live session (last, minimum, maximum, mean, recent trend)."""

from __future__ import annotations

import math
from collections import deque

import numpy as np

from .snapshot import FIGURES, RunningFigure

TREND_LENGTH = 300


class FigureTracker:
    """Accumulates one parameter; non-finite values (a failed trace) are not counted."""

    def __init__(self, trend_length: int = TREND_LENGTH):
        self._trend: deque[float] = deque(maxlen=trend_length)
        self.last = math.nan
        self.minimum = math.nan
        self.maximum = math.nan
        self._sum = 0.0
        self.count = 0

    def add(self, value) -> None:
        try:
            value = float(value)
        except (TypeError, ValueError):
            return
        if not math.isfinite(value):
            return
        self.last = value
        self.minimum = value if self.count == 0 else min(self.minimum, value)
        self.maximum = value if self.count == 0 else max(self.maximum, value)
        self._sum += value
        self.count += 1
        self._trend.append(value)

    def view(self) -> RunningFigure:
        mean = self._sum / self.count if self.count else math.nan
        return RunningFigure(last=self.last, minimum=self.minimum, maximum=self.maximum,
                             mean=mean, count=self.count,
                             trend=np.fromiter(self._trend, dtype=float, count=len(self._trend)))


class FigureSet:
    """One :class:`FigureTracker` per name in :data:`tankside.monitor.live.snapshot.FIGURES`."""

    def __init__(self, trend_length: int = TREND_LENGTH):
        self.trackers = {name: FigureTracker(trend_length) for name, _, _ in FIGURES}

    def add(self, flat_result: dict) -> None:
        for name, tracker in self.trackers.items():
            if name in flat_result:
                tracker.add(flat_result[name])

    def views(self) -> dict[str, RunningFigure]:
        return {name: t.view() for name, t in self.trackers.items()}


class RateMeter:
    """Traces per second over a sliding window of recent arrival times (s, monotonic)."""

    def __init__(self, window_s: float = 5.0):
        self.window_s = window_s
        self._times: deque[float] = deque()

    def add(self, t_s: float) -> None:
        self._times.append(t_s)
        while self._times and t_s - self._times[0] > self.window_s:
            self._times.popleft()

    def rate(self, now_s: float) -> float:
        while self._times and now_s - self._times[0] > self.window_s:
            self._times.popleft()
        if len(self._times) < 2:
            return 0.0
        span = max(now_s - self._times[0], self._times[-1] - self._times[0])
        return (len(self._times) - 1) / span if span > 0 else 0.0
