"""The first-run caution, shown before the live view; dismissed with a key."""

from __future__ import annotations

from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Vertical
from textual.screen import ModalScreen
from textual.widgets import Static

CAUTION_TEXT = """\
[b]Before you watch the tank[/b]

• High-power ultrasound can heat and damage tissue. Keep hands out of the
  tank while the source is driven.
• Drive voltages from the power amplifier can be lethal. Switch the drive
  off before touching the transducer, cables or connectors.
• Cavitation and high peak pressures destroy hydrophones. Start at low
  drive, watch p_r and the clipping count, and respect the hydrophone's
  rated maximum.
• tankside never switches the generator output on by itself: press d
  (and confirm with y) when you are ready; it is switched off when the
  session ends. Alert actions such as safe-off are a convenience, never
  the only interlock.
• tankside does not replace calibrated compliance measurements, your local
  rules or licensed practice; follow them first.
"""


class CautionScreen(ModalScreen[None]):
    """A modal caution about high-power ultrasound, drive voltage and hydrophone damage."""

    BINDINGS = [Binding("enter", "dismiss_caution", "understood", priority=True)]

    def compose(self) -> ComposeResult:
        with Vertical(id="caution-box"):
            yield Static(CAUTION_TEXT, id="caution-text")
            yield Static("press [b]Enter[/b] to continue", id="caution-key")

    def action_dismiss_caution(self) -> None:
        self.dismiss(None)
