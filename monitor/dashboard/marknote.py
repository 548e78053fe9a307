"""The operator-mark dialog: one line of note, recorded by the session as an event."""

from __future__ import annotations

from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Vertical
from textual.screen import ModalScreen
from textual.widgets import Input, Static


class MarkNoteScreen(ModalScreen[str | None]):
    """Asks for a short note; Enter records it, Escape cancels (returns None)."""

    BINDINGS = [Binding("escape", "cancel", "cancel")]

    def compose(self) -> ComposeResult:
        with Vertical(id="mark-box"):
            yield Static("[b]operator mark[/b]  (Enter records, Esc cancels)")
            yield Input(placeholder="short note, e.g. moved to focus", max_length=200,
                        id="mark-input")

    def on_mount(self) -> None:
        self.query_one(Input).focus()

    def on_input_submitted(self, event: Input.Submitted) -> None:
        event.stop()
        self.dismiss(event.value.strip())

    def action_cancel(self) -> None:
        self.dismiss(None)
