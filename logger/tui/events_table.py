"""The event list: newest first, one row per event as the pipeline numbers it, appended and never rebuilt."""

from __future__ import annotations

from collections import deque

from rich.text import Text
from textual.widgets import DataTable

from logger.events.model import Event
from logger.tui.fmt import duration_text, local_time

ALERT_KINDS = ("brownout", "dropout", "overvoltage", "overcurrent", "flicker")
LINK_KINDS = ("frame_gap", "crc_burst", "link_lost", "device_reset")


class EventTable(DataTable):
    """Events as rows: kind, channel, start (local time), how long, residual or detail, number.

    Rows are added only for events not shown yet (by id) and the oldest are removed past ``keep``; the
    run's ``_events.parquet`` has every one.
    """

    DEFAULT_CSS = """
    EventTable {
        height: 1fr;
        border: round $primary 60%;
        border-title-color: $text;
    }
    """

    def __init__(self, keep: int = 500, *, id: str | None = None) -> None:
        super().__init__(id=id, cursor_type="row", zebra_stripes=True)
        self.keep = keep
        self.last_id = 0
        self._keys: deque[str] = deque()
        self.border_title = "events (newest first)"

    def on_mount(self) -> None:
        # The event number goes last: it orders the rows, and on a narrow screen the columns that say what
        # happened and when come first.
        self.add_column("kind", key="kind")
        self.add_column("channel", key="channel")
        self.add_column("start", key="start")
        self.add_column("lasted", key="lasted")
        self.add_column("residual / detail", key="detail")
        self.add_column("#", key="id")

    def add_events(self, newest_first: tuple[Event, ...]) -> list[Event]:
        """Add the events not shown yet; returns them, oldest first."""
        fresh = [e for e in newest_first if e.id is not None and e.id > self.last_id][::-1]
        for event in fresh:
            key = str(event.id)
            self.add_row(_kind(event.kind), event.channel or "-", local_time(event.start_us),
                         duration_text(event.duration_s), event.detail, event.id, key=key)
            self._keys.append(key)
            self.last_id = event.id
        while len(self._keys) > self.keep:
            self.remove_row(self._keys.popleft())
        if fresh:
            self.sort("id", reverse=True)
            self.border_title = f"events (newest first): {self.last_id} so far"
        return fresh


def _kind(kind: str) -> Text:
    if kind in ALERT_KINDS:
        return Text(kind, style="bold red")
    if kind in LINK_KINDS:
        return Text(kind, style="yellow")
    return Text(kind, style="cyan" if kind == "mark" else "")
