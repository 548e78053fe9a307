"""Waiting in tests for something another thread or process does, with a time limit."""

from __future__ import annotations

import time
from pathlib import Path

from tankside.monitor.record.store import SessionReader


def wait_for(predicate, timeout_s: float = 20.0, what: str = "a condition", *,
             every_s: float = 0.05, give_up=None):
    """Call ``predicate`` until it returns a true value, and return that value.

    Raises AssertionError naming ``what`` after ``timeout_s``, or at once when
    ``give_up()`` says there is no point waiting (a process that has exited).
    """
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        value = predicate()
        if value:
            return value
        if give_up is not None and give_up():
            break
        time.sleep(every_s)
    raise AssertionError(f"timed out after {timeout_s} s waiting for {what}")


def committed_traces(db: str | Path) -> int:
    """Traces committed in a session file that may be in the middle of being created."""
    try:
        with SessionReader(db) as reader:
            return reader.trace_count()
    except Exception:  # noqa: BLE001 - missing, or mid-creation: nothing committed yet
        return 0
