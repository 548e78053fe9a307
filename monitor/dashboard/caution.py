"""The first-run caution, shown before the live view; dismissed with a key."""

from __future__ import annotations

import textwrap

from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Vertical
from textual.markup import escape
from textual.screen import ModalScreen
from textual.widgets import Static

from ..caution import caution_points

CAUTION_TEXT = "[b]Before you watch the tank[/b]\n\n" + "\n".join(
    escape(textwrap.fill(point, 72, initial_indent="• ", subsequent_indent="  "))
    for point in caution_points("press d and confirm with y when you are ready"))


class CautionScreen(ModalScreen[None]):
    """A modal caution about high-power ultrasound, drive voltage and hydrophone damage."""

    BINDINGS = [Binding("enter", "dismiss_caution", "understood", priority=True)]

    def compose(self) -> ComposeResult:
        with Vertical(id="caution-box"):
            yield Static(CAUTION_TEXT, id="caution-text")
            yield Static("press [b]Enter[/b] to continue", id="caution-key")

    def action_dismiss_caution(self) -> None:
        self.dismiss(None)
