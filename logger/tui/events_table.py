"""The event list: newest first, one row per event as the pipeline numbers it, appended and never rebuilt;
and the line under it that spells out the event the cursor is on."""

from __future__ import annotations

from collections import deque
from typing import ClassVar

from rich.text import Text
from textual.binding import Binding, BindingType
from textual.widgets import DataTable, Static

from logger.events.model import Event
from logger.tui.banner import FAULT_KINDS
from logger.tui.fmt import duration_text, event_details, local_time

ALERT_KINDS = FAULT_KINDS
"""The faults: drawn in the alarm style, and what the first press of f keeps."""
LINK_KINDS = ("frame_gap", "crc_burst", "link_lost", "device_reset")
QUALITY_KINDS = ("outside_cal",)
DIPS = ("brownout", "dropout")
KIND_ORDER = (*FAULT_KINDS, *LINK_KINDS, *QUALITY_KINDS, "mark")
"""The order the kind filter steps through the kinds it has seen: worst first, as the banner ranks them
(others follow by name)."""


class EventTable(DataTable):
    """Events as rows: kind, channel, start (local time), how long, residual or detail, number.

    Rows are added only for events not shown yet (by id) and the oldest are removed past ``keep``; the
    run's ``_events.parquet`` has every one.
    """

    BINDINGS: ClassVar[list[BindingType]] = [
        Binding("home", "scroll_top", "newest", show=False),  # the list is newest first
        Binding("end", "scroll_bottom", "oldest", show=False),
    ]
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
        self._events: dict[str, Event] = {}
        self.folded = 0
        """Dips counted in a flicker episode's row instead of a row of their own."""
        self.kinds: tuple[str, ...] | None = None
        self.channel: str | None = None
        """The filter: only these kinds, only this channel (None: all)."""
        self._shown: set[str] = set()
        self.border_title = "events (newest first)"

    def on_mount(self) -> None:
        # The event number goes last: it orders the rows, and on a narrow screen the columns that say what
        # happened and when come first.
        self.add_column("kind", key="kind")
        self.add_column("channel", key="channel")
        self.add_column("start", key="start")
        self.add_column("lasted", key="lasted")
        self.add_column("residual / detail", key="detail")
        self.add_column("seen", key="id")  # the order events ended in, not the run's numbers (by start)

    def add_events(self, newest_first: tuple[Event, ...], active: tuple[Event, ...] = ()) -> list[Event]:
        """Add the events not shown yet; returns them, oldest first. A flicker episode is one row: dips on a
        channel whose episode is going on (in ``active``) get none, and an episode that ends takes the rows of
        the dips it counts."""
        fresh = [e for e in newest_first if e.id is not None and e.id > self.last_id][::-1]
        if not fresh:
            return fresh
        held = self.selected() if self.cursor_row > 0 else None  # a row picked by the user stays picked
        going = {e.channel: e.start_us for e in active if e.kind == "flicker"}
        for event in fresh:
            self.last_id = event.id
            if event.kind == "flicker":
                self._fold(event)
            elif event.kind in DIPS and event.channel in going and event.start_us >= going[event.channel]:
                self.folded += 1
                continue
            key = str(event.id)
            self._keys.append(key)
            self._events[key] = event
            self._show(key, event)
        while len(self._keys) > self.keep:
            key = self._keys.popleft()
            self._hide(key)
            self._events.pop(key, None)
        self._settle(held)
        return fresh

    def set_filter(self, kinds: tuple[str, ...] | None, channel: str | None) -> None:
        """Show only events of ``kinds`` (None: every kind) on ``channel`` (None: every channel), from the
        events the list keeps; the rest stay kept and come back when the filter is lifted."""
        held = self.selected() if self.cursor_row > 0 else None
        self.kinds, self.channel = kinds, channel
        self.clear()
        self._shown.clear()
        for key in self._keys:
            self._show(key, self._events[key])
        self._settle(held)

    def next_kinds(self) -> tuple[str, ...] | None:
        """The kind filter after this one: every kind, then faults, then each kind among the events kept."""
        seen = sorted({e.kind for e in self._events.values()},
                      key=lambda k: (KIND_ORDER.index(k) if k in KIND_ORDER else len(KIND_ORDER), k))
        steps: list[tuple[str, ...] | None] = [None, ALERT_KINDS, *((kind,) for kind in seen)]
        at = steps.index(self.kinds) if self.kinds in steps else -1
        return steps[(at + 1) % len(steps)]

    def _wanted(self, event: Event) -> bool:
        return (self.kinds is None or event.kind in self.kinds) and (self.channel is None
                                                                      or event.channel == self.channel)

    def _show(self, key: str, event: Event) -> None:
        if self._wanted(event):
            self.add_row(_kind(event.kind), event.channel or "-", local_time(event.start_us),
                         duration_text(event.duration_s), event.detail, event.id, key=key)
            self._shown.add(key)

    def _hide(self, key: str) -> None:
        if key in self._shown:
            self.remove_row(key)
            self._shown.discard(key)

    def _settle(self, held: Event | None) -> None:
        """Newest first, the user's row still picked, and the title saying what is shown."""
        self.sort("id", reverse=True)
        if held is not None and str(held.id) in self._shown:
            self.move_cursor(row=self.get_row_index(str(held.id)), animate=False)
        folded = f", {self.folded:,} dips inside flicker episodes" if self.folded else ""
        only = ""
        if self.kinds is not None or self.channel is not None:
            what = "all" if self.kinds is None else "faults" if self.kinds == ALERT_KINDS else self.kinds[0]
            only = f"; showing {what}" + (f" on {self.channel}" if self.channel else "") + " (f kind, F channel)"
        self.border_title = f"events (newest first): {self.last_id} so far{folded}{only}"

    def _fold(self, episode: Event) -> None:
        """Take out the rows of the dips an episode counts (on its channel, within its span)."""
        end = episode.end_us if episode.end_us is not None else episode.start_us
        inside = [key for key, e in self._events.items() if e.kind in DIPS and e.channel == episode.channel
                  and episode.start_us <= e.start_us <= end]
        for key in inside:
            self._hide(key)
            self._events.pop(key)
            self._keys.remove(key)
        self.folded += len(inside)

    def selected(self) -> Event | None:
        """The event under the cursor (the newest while the cursor stays on the top row)."""
        if not self.row_count:
            return None
        key = self.coordinate_to_cell_key((self.cursor_row, 0)).row_key.value
        return self._events.get(key)


class EventDetail(Static):
    """Every field of the event under the list's cursor, wrapped to the width (the list's own detail
    column is cut short on a narrow terminal)."""

    DEFAULT_CSS = """
    EventDetail { height: auto; max-height: 4; padding: 0 1; background: $boost; color: $text; }
    """

    def show(self, event: Event | None) -> None:
        self.update("" if event is None else event_details(event))


def _kind(kind: str) -> Text:
    if kind in ALERT_KINDS:
        return Text(kind, style="bold red")
    if kind in LINK_KINDS or kind in QUALITY_KINDS:
        return Text(kind, style="yellow")
    return Text(kind, style="cyan" if kind == "mark" else "")
