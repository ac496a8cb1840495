"""Messages the screen's parts send each other (all custom messages live here)."""

from __future__ import annotations

from textual.message import Message


class RunSealed(Message):
    """The pipeline has stopped and its parts are sealed; sent from the worker thread that waited for it."""

    def __init__(self, summary: str) -> None:
        super().__init__()
        self.summary = summary


class MarkNote(Message):
    """The user typed a note for a mark at this moment."""

    def __init__(self, note: str) -> None:
        super().__init__()
        self.note = note
