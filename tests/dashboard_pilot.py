"""Helpers for driving the dashboard through Textual's Pilot in the tests."""

from __future__ import annotations

import asyncio
import functools
import io

from rich.console import Console

from tankside.monitor.dashboard.textual_internals import painted_screen


def sync(test):
    """Run an async Pilot test in its own event loop (no asyncio plugin needed)."""
    @functools.wraps(test)
    def run(*args, **kwargs):
        return asyncio.run(test(*args, **kwargs))
    return run


def screen_text(app) -> str:
    """The screen as plain text, one line per terminal row."""
    console = Console(file=io.StringIO(), width=app.size.width, height=app.size.height,
                      color_system=None, legacy_windows=False)
    console.print(painted_screen(app.screen))
    return console.file.getvalue()
