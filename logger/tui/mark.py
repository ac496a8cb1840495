"""The mark line: a one-line input at the bottom of the screen for a mark's note ("load to 3 A").

It sits on the main screen (not a dialog over it) so the readouts and trend stay in view and keep moving
while the note is typed. Enter adds the mark, Escape cancels; either way the line hides again.
"""

from __future__ import annotations

from typing import ClassVar

from textual.binding import Binding, BindingType
from textual.widgets import Input

from logger.tui.messages import MarkNote


class MarkInput(Input):
    """Hidden until asked for; posts :class:`MarkNote` with the note typed."""

    DEFAULT_CSS = """
    MarkInput { display: none; dock: bottom; height: 3; border: round $accent; margin: 0 0 1 0; }
    MarkInput.-open { display: block; }
    """
    BINDINGS: ClassVar[list[BindingType]] = [Binding("escape", "close", "cancel")]

    def __init__(self, *, id: str | None = None) -> None:
        super().__init__(placeholder="note for this moment, e.g. load to 3 A (Enter adds, Escape cancels)", id=id)
        self.border_title = "mark"
        self.disabled = True  # not focusable while hidden, so keys go to the screen

    def open(self) -> None:
        self.value = ""
        self.disabled = False
        self.add_class("-open")
        self.focus()

    def action_close(self) -> None:
        self.remove_class("-open")
        self.disabled = True
        self.app.set_focus(self.app.query_one("#events"))  # the arrow keys move through the events again

    def _on_input_submitted(self, event: Input.Submitted) -> None:
        event.stop()
        self.post_message(MarkNote(event.value.strip() or "mark"))
        self.action_close()
