"""The one-line banner: session state, elapsed time, sequence number, method, hold."""

from __future__ import annotations

from textual.widget import Widget


class Banner(Widget):
    """A single line of markup; redrawn only when its text changes (never a re-layout)."""

    DEFAULT_CSS = "Banner { height: 1; }"

    def __init__(self, **kwargs):
        super().__init__(**kwargs)
        self.markup_text = ""

    def set_markup(self, text: str) -> None:
        if text != self.markup_text:
            self.markup_text = text
            self.refresh()

    def render(self) -> str:
        return self.markup_text
