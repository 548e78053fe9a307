"""Textual still has the private part tankside uses (dashboard/textual_internals.py).

The dashboard tests read the painted screen through it; when Textual changes, this
test says which attribute went away and in which Textual version, before those tests
fail with an AttributeError deep in a helper.
"""

from __future__ import annotations

from dashboard_pilot import screen_text, sync
from textual.app import App, ComposeResult
from textual.widgets import Static

from tankside.monitor.dashboard import textual_internals as internals


class _WordApp(App[None]):
    def compose(self) -> ComposeResult:
        yield Static("painted words")


@sync
async def test_textual_has_what_tankside_uses():
    app = _WordApp()
    async with app.run_test(size=(40, 5)) as pilot:
        await pilot.pause()
        problems = internals.missing(app.screen)
        assert not problems, (
            f"Textual {internals.installed_version()} no longer has what "
            f"tankside.monitor.dashboard.textual_internals uses: " + "; ".join(problems))
        text = screen_text(app)
    lines = text.splitlines()
    assert len(lines) == 5 and lines[0].startswith("painted words")


def test_missing_names_the_attribute():
    class NoCompositor:
        pass

    assert internals.missing(NoCompositor()) == ["NoCompositor._compositor: not found"]
