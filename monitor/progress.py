"""A small text progress bar on stderr for long replays and exports.

Drawn only when the stream is a terminal (or when forced), redrawn at most ten times
a second, and erased at the end, so logs and pipes stay clean.
"""

from __future__ import annotations

import signal
import sys
import time
from typing import Any


class Progress:
    """Progress of ``total`` steps, shown as ``label [#####.....]  512/1000  12 s``.

    Parameters
    ----------
    total : int
        Number of steps (0 or less: the count is shown without a bar).
    label : str
        Word shown before the bar.
    stream : file, optional
        Where to draw; ``sys.stderr`` by default.
    enabled : bool or None
        True forces drawing, False suppresses it, None draws only on a terminal.
    """

    WIDTH = 30
    _MIN_INTERVAL_S = 0.1

    def __init__(self, total: int, label: str = "", *, stream=None, enabled: bool | None = None,
                 clock=time.monotonic):
        self.total = int(total)
        self.label = label
        self.stream = sys.stderr if stream is None else stream
        if enabled is None:
            isatty = getattr(self.stream, "isatty", None)
            enabled = bool(isatty and isatty())
        self.enabled = enabled
        self.done = 0
        self._clock = clock
        self._t0 = clock()
        self._last_draw = -float("inf")
        self._drawn = False

    def line(self) -> str:
        """The text of the bar for the current count."""
        elapsed = self._clock() - self._t0
        if self.total > 0:
            frac = min(self.done / self.total, 1.0)
            filled = int(round(frac * self.WIDTH))
            bar = "[" + "#" * filled + "." * (self.WIDTH - filled) + "]"
            count = f"{self.done}/{self.total}"
        else:
            bar, count = "", str(self.done)
        return " ".join(p for p in (self.label, bar, count, f"{elapsed:.0f} s") if p)

    def update(self, steps: int = 1) -> None:
        self.done += steps
        if not self.enabled:
            return
        now = self._clock()
        if now - self._last_draw >= self._MIN_INTERVAL_S or self.done >= self.total > 0:
            self._last_draw = now
            self.stream.write("\r" + self.line())
            self.stream.flush()
            self._drawn = True

    def close(self) -> None:
        """Erase the bar (the caller prints its own summary)."""
        if self.enabled and self._drawn:
            self.stream.write("\r" + " " * len(self.line()) + "\r")
            self.stream.flush()
            self._drawn = False

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()


class _CheckedProgress(Progress):
    def __init__(self, *args, check, **kwargs):
        super().__init__(*args, **kwargs)
        self._check = check

    def update(self, steps: int = 1) -> None:
        self._check()
        super().update(steps)


def bar_factory(enabled: bool | None, check=None):
    """A steps factory for the record layer: ``(total, label) -> Progress`` on stderr.

    ``enabled`` as for :class:`Progress` (None: only on a terminal); ``check``, when
    given, is called before each step (:meth:`StopSignals.check`).
    """
    def make(total: int, label: str) -> Progress:
        if check is None:
            return Progress(total, label, enabled=enabled)
        return _CheckedProgress(total, label, enabled=enabled, check=check)
    return make


class Interrupted(KeyboardInterrupt):
    """A job stopped by Ctrl-C or SIGTERM; ``signal_name`` says which."""

    def __init__(self, signal_name: str = "Ctrl-C"):
        super().__init__(signal_name)
        self.signal_name = signal_name


class StopSignals:
    """Ctrl-C and SIGTERM taken between the steps of a job, not wherever the interpreter
    happens to be.

    Python raises KeyboardInterrupt at whatever bytecode runs when SIGINT arrives, also
    inside a callback run as an object is freed, where it is printed and dropped: an
    HDF5 export interrupted there went on to the end and exited 0. SIGTERM, by default,
    ends the process at once and leaves the job's hidden temporary file behind. While a
    StopSignals is entered, either signal only notes itself; :meth:`check` (called at each
    progress step) raises :class:`Interrupted` where the job stops cleanly, and leaving
    the block raises it if the job ended first. A second signal raises at once. Outside
    the main thread, where no handler can be installed, the signals behave as usual.
    """

    _SIGNALS = {signal.SIGINT: "Ctrl-C", signal.SIGTERM: "SIGTERM"}

    def __init__(self):
        self.asked: str | None = None           # the first signal's name, once one came
        self._previous: dict[int, Any] = {}   # what signal.signal returned

    def _on_signal(self, signum, frame) -> None:
        name = self._SIGNALS[signum]
        if self.asked is not None:
            raise Interrupted(name)
        self.asked = name

    def check(self) -> None:
        if self.asked is not None:
            raise Interrupted(self.asked)

    def __enter__(self) -> StopSignals:
        for signum in self._SIGNALS:
            try:
                self._previous[signum] = signal.signal(signum, self._on_signal)
            except ValueError:      # not the main thread
                break
        return self

    def __exit__(self, exc_type, exc, tb) -> None:
        for signum, previous in self._previous.items():
            signal.signal(signum, previous)
        self._previous.clear()
        if exc_type is None:
            self.check()
