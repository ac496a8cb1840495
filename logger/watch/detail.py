"""One bench opened from the lab screen: each channel's trend from its per-second figures, and its events."""

from __future__ import annotations

from typing import Any, ClassVar

from rich.text import Text
from textual.app import ComposeResult
from textual.binding import Binding, BindingType
from textual.containers import VerticalScroll
from textual.screen import Screen
from textual.widgets import DataTable, Footer, Sparkline, Static

from logger.publish.topics import STATS
from logger.tui.fmt import duration_text
from logger.watch.model import Bench, Lab
from logger.watch.text import STATE_STYLES, _local, _value, elapsed

TREND_POINTS = 600
"""The trend's span: the last ten minutes of per-second means."""


class BenchScreen(Screen[None]):
    """A bench's trend and event list; ``escape`` goes back to the lab."""

    CSS = """
    #bench-head { height: 2; padding: 0 1; background: $boost; }
    #trends { height: auto; max-height: 60%; }
    .trend-label { height: 1; padding: 0 1; }
    Sparkline { height: 3; margin: 0 1; }
    #bench-events { height: 1fr; }
    """
    BINDINGS: ClassVar[list[BindingType]] = [Binding("escape", "app.pop_screen", "back"),
                                             Binding("k", "app.kind_filter", "kind filter"),
                                             Binding("q", "app.pop_screen", "back", show=False)]

    def __init__(self, bench: str) -> None:
        super().__init__()
        self.bench = bench
        self._channels: tuple[str, ...] = ()
        self._events_shown: tuple[Any, ...] = ()

    def compose(self) -> ComposeResult:
        yield Static(id="bench-head")
        yield VerticalScroll(id="trends")
        table = DataTable(id="bench-events", cursor_type="row", zebra_stripes=True)
        for label in ("start", "kind", "channel", "lasted", "lowest/peak", "depth", "detail"):
            table.add_column(label, key=label)
        yield table
        yield Footer()

    def refresh_from(self, lab: Lab, kind: str) -> None:
        """Redraw from the lab's latest picture of this bench (events of ``kind`` only, unless ``all``)."""
        bench = lab.benches.get(self.bench)
        if bench is None or not self.is_mounted:
            return
        self._head(bench, kind)
        self._trends(bench)
        self._events(bench, kind)

    def _head(self, bench: Bench, kind: str) -> None:
        s = bench.state
        link = s.get("link") or {}
        self.query_one("#bench-head", Static).update(Text.assemble(
            (bench.name, "bold"), "  ", (bench.word, STATE_STYLES.get(bench.word, "")),
            f"  {s.get('rig', '')}  elapsed {elapsed(s.get('elapsed_s'))}  run {s.get('run') or '-'}\n",
            (f"{s.get('message', '')}  |  link {link.get('source', '?')}: {link.get('rate_hz') or 0:.0f} frames/s, "
             f"lost {link.get('lost', 0)}  |  events shown: {kind}", "dim")))

    def _trends(self, bench: Bench) -> None:
        box = self.query_one("#trends", VerticalScroll)
        names = tuple(bench.seconds[-1][1]) if bench.seconds else ()
        if names != self._channels:
            box.remove_children()
            for name in names:
                box.mount(Static(classes="trend-label", id=f"label-{name}"), Sparkline([], id=f"trend-{name}"))
            self._channels = names
        recent = list(bench.seconds)[-TREND_POINTS:]
        units = bench.units()
        mean_k, lo_k, hi_k = STATS.index("mean"), STATS.index("min"), STATS.index("max")
        for name in names:
            figures = [ch[name] for _, ch in recent if name in ch]
            means = [f[mean_k] for f in figures if f[mean_k] is not None]
            lows = [f[lo_k] for f in figures if f[lo_k] is not None]
            highs = [f[hi_k] for f in figures if f[hi_k] is not None]
            label = Text.assemble((name, "bold"), f" {units.get(name, '')}  now {_value(means[-1] if means else None)}"
                                  f"  lowest {_value(min(lows, default=None))}  highest "
                                  f"{_value(max(highs, default=None))}  over {len(figures)} s", )
            for widget in self.query(f"#label-{name}"):
                widget.update(label)
            for widget in self.query(f"#trend-{name}"):
                widget.data = means  # a new list each time: Sparkline redraws on a new object

    def _events(self, bench: Bench, kind: str) -> None:
        events = [e for e in bench.events if kind == "all" or e.get("kind") == kind]
        shown = tuple((e.get("key"), e.get("phase")) for e in events)
        if shown == self._events_shown:
            return
        self._events_shown = shown
        table = self.query_one("#bench-events", DataTable)
        table.clear()
        for e in events:
            lasted = duration_text(e.get("duration_s")) if e.get("phase") == "end" else "going on"
            depth = f"{e['depth_pct']:.0f} %" if e.get("depth_pct") is not None else "-"
            table.add_row(_local(e.get("start")), e.get("kind", "?"), e.get("channel") or "link", lasted,
                          _value(e.get("value")), depth, e.get("detail", ""))
