"""The drive-on confirmation: the operator's explicit yes before the output goes on."""

from __future__ import annotations

from textual import events
from textual.app import ComposeResult
from textual.containers import Vertical
from textual.screen import ModalScreen
from textual.widgets import Static

CONFIRM_KEY = "y"

QUESTION = """\
[b]Switch the generator output ON?[/b]

The transducer will be driven at the generator's settings. Check that the
hydrophone is in place, hands are out of the tank and the amplifier is set
as intended.

press [b]y[/b] to switch on, any other key to cancel"""


class DriveConfirmScreen(ModalScreen[bool]):
    """Returns True only when the confirm key is pressed; any other key cancels."""

    def compose(self) -> ComposeResult:
        with Vertical(id="drive-box"):
            yield Static(QUESTION, id="drive-text")

    def on_key(self, event: events.Key) -> None:
        event.stop()
        self.dismiss(event.key == CONFIRM_KEY)
