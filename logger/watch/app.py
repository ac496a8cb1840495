"""The lab's screen: one row per bench heard under a prefix, those needing attention first.

Keys: ``enter`` opens a bench (its trend and events), ``s`` cycles the state filter, ``k`` the event-kind
filter, ``b`` the bell on a new brownout or dropout, ``q`` leaves. The screen's thread is the only writer of
the :class:`~logger.watch.model.Lab`: it drains the feed five times a second.
"""

from __future__ import annotations

import time
from typing import Any, ClassVar, Protocol

from rich.text import Text
from textual.app import App, ComposeResult
from textual.binding import Binding, BindingType
from textual.widgets import DataTable, Footer, Static

from logger.act.runner import CommandRunner
from logger.publish.topics import read_message
from logger.watch.detail import BenchScreen
from logger.watch.model import ALERT_KINDS, Bench, Lab, Row
from logger.watch.text import STATE_STYLES, channels_text, elapsed, event_text

POLL_S = 0.2
DRAW_S = 1.0
"""The table is drawn again this often (figures come once a second), and sooner, after ``URGENT_S``, when an
event begins or a bench's state changes: redrawing fifty rows five times a second was most of a watcher's CPU."""
URGENT_S = 0.5
STATE_FILTERS = ("all", "attention", "recording", "offline")
KIND_FILTERS = ("all", "brownout", "dropout", "overvoltage", "overcurrent", "flicker")
COLUMNS = (("bench", 14), ("state", 12), ("now [last minute]", 32), ("last event", 28), ("today", 7),
           ("elapsed", 9))


class Heard(Protocol):
    topic: str | None
    payload: bytes
    at: float
    text: str


class FeedLike(Protocol):
    def start(self) -> None: ...
    def stop(self) -> None: ...
    def take(self) -> list[Heard]: ...


class WatchApp(App[None]):
    """Every bench publishing under ``prefix``, from ``feed``; ``runner`` (``--on-event``) is offered each
    event that ends, with the bench it came from."""

    TITLE = "railtap watch"
    ENABLE_COMMAND_PALETTE = False
    CSS = """
    #lab-head { height: 1; padding: 0 1; background: $boost; }
    #benches { height: 1fr; }
    #lab-foot { height: 1; padding: 0 1; color: $text-muted; }
    """
    BINDINGS: ClassVar[list[BindingType]] = [
        Binding("enter", "open", "open bench"),
        Binding("s", "state_filter", "state filter"),
        Binding("k", "kind_filter", "kind filter"),
        Binding("b", "bell", "bell"),
        Binding("q", "quit", "quit"),
    ]

    def __init__(self, feed: FeedLike, prefix: str, where: str, runner: CommandRunner | None = None) -> None:
        super().__init__()
        self.feed, self.prefix, self.where, self.runner = feed, prefix, where, runner
        self.lab = Lab()
        self.bell_on = True
        self.state_filter = STATE_FILTERS[0]
        self.kind_filter = KIND_FILTERS[0]
        self.link_text = f"connecting to {where}"
        self._order: list[str] = []
        self._drawn_at = -DRAW_S
        self._urgent = False
        self._words: dict[str, str] = {}
        self._shown: dict[str, tuple[Any, ...]] = {}

    def compose(self) -> ComposeResult:
        yield Static(id="lab-head")
        table = DataTable(id="benches", cursor_type="row", zebra_stripes=True)
        for label, width in COLUMNS:
            table.add_column(Text(label), width=width, key=label)
        yield table
        yield Static(id="lab-foot")
        yield Footer()

    def on_mount(self) -> None:
        self.feed.start()
        self.set_interval(POLL_S, self.poll)
        self.poll()

    def on_unmount(self) -> None:
        self.feed.stop()

    # -- taking messages -------------------------------------------------------------------------------

    def poll(self) -> None:
        """Apply what has arrived, ring for new dips, and redraw what changed (see ``DRAW_S``)."""
        for heard in self.feed.take():
            if heard.topic is None:
                self.link_text = heard.text
                continue
            message = read_message(self.prefix, heard.topic, heard.payload)
            begun = self.lab.apply(message, heard.at)
            self._urgent |= bool(begun) or (message is not None and message.leaf == "state"
                                      and self.lab.benches[message.bench].word != self._words.get(message.bench))
            if self.bell_on and any(d.get("kind") in ALERT_KINDS for d in begun):
                self.bell()
            if message is not None and message.leaf == "event" and message.doc["phase"] == "end" and self.runner:
                self.runner.offer(message.doc["kind"], event_fields(self.lab.benches[message.bench], message.doc))
        since = time.monotonic() - self._drawn_at
        if since >= DRAW_S or (self._urgent and since >= URGENT_S):
            self.refresh_rows()
            if isinstance(self.screen, BenchScreen):
                self.screen.refresh_from(self.lab, self.kind_filter)

    # -- drawing -----------------------------------------------------------------------------------------

    def visible(self, rows: list[Row]) -> list[Row]:
        """The rows the filters let through."""
        if self.state_filter == "attention":
            rows = [r for r in rows if r.rank <= 4]
        elif self.state_filter != "all":
            rows = [r for r in rows if r.shown_state == self.state_filter]
        if self.kind_filter != "all":
            rows = [r for r in rows if r.today_kinds.get(self.kind_filter)]
        return rows

    def refresh_rows(self) -> None:
        self._drawn_at, self._urgent = time.monotonic(), False
        self._words = {name: b.word for name, b in self.lab.benches.items()}
        rows = self.lab.rows(time.time())
        shown = self.visible(rows)
        table = self.query_one("#benches", DataTable)
        names = [r.name for r in shown]
        if names != self._order:
            keep = table.cursor_row
            table.clear()
            for r in shown:
                table.add_row(*self._cells(r), key=r.name, height=_height(r))
            self._order, self._shown = names, {r.name: self._cells(r) for r in shown}
            if shown:
                table.move_cursor(row=min(keep, len(shown) - 1))
        else:
            for r in shown:
                cells = self._cells(r)
                if cells != self._shown.get(r.name):
                    if _height(r) != table.rows[r.name].height:  # its channels became known: draw it afresh
                        self._order = []
                        return self.refresh_rows()
                    for (label, _), old, new in zip(COLUMNS, self._shown[r.name], cells, strict=True):
                        if old != new:
                            table.update_cell(r.name, label, new)
                    self._shown[r.name] = cells
        attention = sum(1 for r in rows if r.rank <= 4)
        self.query_one("#lab-head", Static).update(Text.assemble(
            (f"{self.where}", "bold"), f"  {len(rows)} bench{'es' if len(rows) != 1 else ''}  ",
            (f"{attention} need attention" if attention else "all well", "bold red" if attention else "green"),
            f"  |  {self.link_text}"))
        self.query_one("#lab-foot", Static).update(
            f"filter: state {self.state_filter}, kind {self.kind_filter}  |  bell {'on' if self.bell_on else 'off'}"
            + (f"  |  {self.lab.ignored} foreign messages passed over" if self.lab.ignored else "")
            + (f"  |  {self.runner.summary()}" if self.runner is not None else ""))

    @staticmethod
    def _cells(r: Row) -> tuple[Any, ...]:
        return (Text(r.name, "bold"), Text(r.shown_state, STATE_STYLES.get(r.shown_state, "")), channels_text(r),
                event_text(r.last_event), str(r.today) if r.today else "-", elapsed(r.elapsed_s))

    # -- keys --------------------------------------------------------------------------------------------

    def action_open(self) -> None:
        table = self.query_one("#benches", DataTable)
        if not self._order or table.cursor_row >= len(self._order):
            return
        name = self._order[table.cursor_row]
        screen = BenchScreen(name)
        self.push_screen(screen)
        screen.refresh_from(self.lab, self.kind_filter)

    def action_state_filter(self) -> None:
        self.state_filter = STATE_FILTERS[(STATE_FILTERS.index(self.state_filter) + 1) % len(STATE_FILTERS)]
        self.refresh_rows()

    def action_kind_filter(self) -> None:
        self.kind_filter = KIND_FILTERS[(KIND_FILTERS.index(self.kind_filter) + 1) % len(KIND_FILTERS)]
        self.refresh_rows()
        if isinstance(self.screen, BenchScreen):
            self.screen.refresh_from(self.lab, self.kind_filter)

    def action_bell(self) -> None:
        self.bell_on = not self.bell_on
        self.refresh_rows()

    def on_data_table_row_selected(self, event: DataTable.RowSelected) -> None:
        self.action_open()


def event_fields(bench: Bench, doc: dict[str, Any]) -> dict[str, Any]:
    """An ended event from the broker as ``--on-event`` commands see it: the same fields a recorder gives
    them (``RAILTAP_START`` ...), with the bench's name, rig and run."""
    fields = {k: v for k, v in doc.items() if k not in ("v", "phase")}
    fields.update(bench=bench.name, rig=bench.state.get("rig"), run=bench.state.get("run"))
    return fields


def _height(row: Row) -> int:
    """A bench's lines: one per channel, two at least (the last event takes two)."""
    return max(2, len(row.channels))
