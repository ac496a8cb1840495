"""The trend: one channel over the last span, one column per slice of time, drawn from lowest to highest.

Each column covers ``span / width`` of time and is filled from the lowest to the highest value seen in it
(half-cell steps), so a dip of a single sample shows however long the span; where a column spans more than a
cell, the cell of its mean is marked, so a night full of dips still shows where the rail sat. The brownout
threshold is a dashed line; columns that went below it are drawn in the alert colour.
"""

from __future__ import annotations

import math
from typing import ClassVar

import numpy as np
from rich.style import Style
from rich.text import Text
from textual.widget import Widget

from logger.textplot import DEFAULT_STYLES, GUTTER, draw_columns, value_range
from logger.tui.fmt import local_time, value_text
from logger.tui.history import TrendHistory

SPANS_S = (10.0, 60.0, 600.0, 3600.0, math.inf)
"""The spans ``s`` steps through; ``inf`` is the whole run so far."""


def span_label(span_s: float) -> str:
    if span_s < 60:
        return f"{span_s:g} s"
    return f"{span_s / 60:g} min" if span_s < 3600 else f"{span_s / 3600:g} h"


class Trend(Widget):
    """One channel's recent history as a min/max column chart with its brownout threshold."""

    DEFAULT_CSS = """
    Trend {
        height: 1fr;
        min-height: 5;
        border: round $primary 60%;
        border-title-color: $text;
        border-subtitle-color: $text-muted;
        padding: 0 1 0 0;
    }
    Trend.-paused { border: round $warning; }
    Trend > .trend--data { color: $success; }
    Trend > .trend--low { color: $error; text-style: bold; }
    Trend > .trend--threshold { color: $warning; }
    Trend > .trend--axis { color: $text-muted; }
    Trend > .trend--mean { color: $text; text-style: bold; }
    """
    COMPONENT_CLASSES: ClassVar[set[str]] = {"trend--data", "trend--low", "trend--threshold", "trend--axis",
                                             "trend--mean"}

    def __init__(self, history: TrendHistory, *, id: str | None = None) -> None:
        super().__init__(id=id)
        self.history = history
        self.channel = 0
        self.span_s = SPANS_S[0]
        self._update_titles()

    def new_data(self) -> None:
        """New samples came: the span's ends in the title move, and the chart is drawn again."""
        self._update_titles()
        self.refresh()

    def next_span(self) -> None:
        self.span_s = SPANS_S[(SPANS_S.index(self.span_s) + 1) % len(SPANS_S)]
        self._update_titles()
        self.refresh()

    def next_channel(self) -> None:
        self.channel = (self.channel + 1) % self.history.width
        self._update_titles()
        self.refresh()

    def _update_titles(self) -> None:
        shown = self.history.shown
        name, unit = shown.names[self.channel], shown.units[self.channel]
        self.border_title = f"trend: {name} ({unit}), {self._span_words()}"
        threshold = shown.thresholds[self.channel]
        words = "overcurrent above" if shown.over[self.channel] else "brownout below"
        self.border_subtitle = f"- - {words} {value_text(threshold, False)} {unit}" if threshold else ""

    def shown_span_s(self) -> float:
        """The span drawn: the chosen one, or the whole run so far (at least the shortest span)."""
        return self.span_s if not math.isinf(self.span_s) else max(SPANS_S[0], self.history.run_s)

    def _span_words(self) -> str:
        """What the chart covers, with its ends in local time: ``last 1 h, 13:02:10 to 14:02:10``."""
        what = "whole run" if math.isinf(self.span_s) else f"last {span_label(self.span_s)}"
        end = self.history.last_utc_us
        if end is None:
            return what
        start = end - round(self.shown_span_s() * 1e6)
        return f"{what}, {local_time(start, 0)} to {local_time(end, 0)}"

    def _styles(self) -> dict[str, Style]:
        try:
            return {name: self.get_component_rich_style(f"trend--{name}") for name in DEFAULT_STYLES}
        except Exception:  # before the first layout there are no styles yet
            return DEFAULT_STYLES

    def render(self) -> Text:
        height, width = self.content_size.height, self.content_size.width - GUTTER
        if height <= 0 or width <= 4:
            return Text("")
        lo, hi, mean = self.history.columns(self.channel, self.shown_span_s(), width)
        if np.all(np.isnan(lo)):
            return Text("waiting for samples...", style="dim")
        threshold = self.history.shown.thresholds[self.channel]
        bottom, top = value_range(lo, hi, threshold)
        return draw_columns(lo, hi, threshold, bottom, top, height, self._styles(),
                            over=self.history.shown.over[self.channel], mean=mean)
