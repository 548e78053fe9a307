"""A simulated water thermometer on a pty, in a dialect of our own (invented).

Queried (the default): ``TEMP?`` -> ``T=20.013 C``; ``WHO?`` -> the identity; anything
else -> ``?``. Streaming (``streaming=True``): it prints ``T=20.013 C`` every
``interval_s`` unprompted and answers only ``WHO?``. Lines end with CR LF. Profiles:
``simulators/profiles/sim-thermometer.toml`` and ``sim-thermometer-streaming.toml``.

The water warms slowly and the reading is noisy (invented figures: by default 0.1 degC
per minute and 5 mK rms). Faults come from :class:`PtyLineDevice` (silent, garbled,
disconnected).
"""

from __future__ import annotations

import time

import numpy as np

from .pty_device import PtyLineDevice

__all__ = ["SimulatedThermometer"]


class SimulatedThermometer(PtyLineDevice):
    """Parameters: ``start_c`` (degC), ``drift_c_per_min``, ``noise_c`` (rms),
    ``streaming`` and ``interval_s``, ``seed``, ``clock``."""

    def __init__(self, *, start_c: float = 20.0, drift_c_per_min: float = 0.1,
                 noise_c: float = 0.005, streaming: bool = False, interval_s: float = 0.2,
                 seed: int = 0, clock=time.monotonic):
        self.start_c = start_c
        self.drift_c_per_min = drift_c_per_min
        self.noise_c = noise_c
        self.streaming = streaming
        self.interval_s = interval_s
        self.clock = clock
        self._t0 = clock()
        self._rng = np.random.default_rng(seed)
        self._next_print = self._t0 + interval_s
        super().__init__(terminator="\r\n", name="thermometer")

    def true_celsius(self) -> float:
        """The simulated water temperature now (without the reading noise)."""
        return self.start_c + self.drift_c_per_min * (self.clock() - self._t0) / 60.0

    def _reading(self) -> str:
        value = self.true_celsius() + float(self._rng.normal(0.0, self.noise_c))
        return f"T={value:.3f} C"

    def handle(self, line: str) -> str | None:
        if line == "WHO?":
            return "SIMTHERM-1 tankside simulated thermometer"
        if self.streaming:
            return None
        if line == "TEMP?":
            return self._reading()
        return "?"

    def tick(self) -> None:
        if self.streaming and self.clock() >= self._next_print:
            self._next_print += self.interval_s
            if not self._silent:
                self.send_line(self._reading())
