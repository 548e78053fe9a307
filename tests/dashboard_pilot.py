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


async def painted_with(pilot, app, text: str, timeout_s: float = 5.0) -> str:
    """The screen text once it shows ``text`` (the footer, say): on a loaded machine a
    first paint can come before every widget has drawn. The last screen if it never does,
    for the caller's assertion to show."""
    loop = asyncio.get_running_loop()
    deadline = loop.time() + timeout_s
    shown = screen_text(app)
    while text not in shown and loop.time() < deadline:
        await pilot.pause(0.05)
        shown = screen_text(app)
    return shown
