"""How long record-layer jobs (replay, export) report their progress, without drawing it.

A job is handed a :data:`StepsFactory`; it calls it once with its total and a label
and then ``update()`` after each step. The user-facing side passes one that draws a
bar (:func:`tankside.monitor.progress.bar_factory`); the default reports nowhere.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Protocol


class Steps(Protocol):
    """Progress of one job: a context manager with ``update(steps)``."""

    def update(self, steps: int = 1) -> None: ...

    def __enter__(self) -> Steps: ...

    def __exit__(self, *exc: object) -> None: ...


StepsFactory = Callable[[int, str], Steps]   # (total steps, label) -> Steps


class _Silent:
    def update(self, steps: int = 1) -> None:
        pass

    def __enter__(self) -> _Silent:
        return self

    def __exit__(self, *exc: object) -> None:
        pass


def silent(total: int, label: str) -> Steps:
    """A :data:`StepsFactory` that reports nowhere."""
    return _Silent()
