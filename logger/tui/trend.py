"""The trend: one channel over the last span, one column per slice of time, drawn from lowest to highest.

Each column covers ``span / width`` of time and is filled from the lowest to the highest value seen in it
(half-cell steps), so a dip of a single sample shows however long the span. The brownout threshold is a
dashed line; columns that went below it are drawn in the alert colour.
"""

from __future__ import annotations

import math
from typing import ClassVar

import numpy as np
from rich.style import Style
from rich.text import Text
from textual.widget import Widget

from logger.tui.fmt import value_text
from logger.tui.history import TrendHistory

SPANS_S = (10.0, 60.0, 600.0, 3600.0)
GUTTER = 8


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
    """
    COMPONENT_CLASSES: ClassVar[set[str]] = {"trend--data", "trend--low", "trend--threshold", "trend--axis"}

    def __init__(self, history: TrendHistory, *, id: str | None = None) -> None:
        super().__init__(id=id)
        self.history = history
        self.channel = 0
        self.span_s = SPANS_S[0]
        self._update_titles()

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
        self.border_title = f"trend: {name} ({unit}), last {span_label(self.span_s)}"
        threshold = shown.thresholds[self.channel]
        self.border_subtitle = f"- - brownout below {value_text(threshold, False)} {unit}" if threshold else ""

    def _styles(self) -> dict[str, Style]:
        fallback = {"trend--data": Style(color="green"), "trend--low": Style(color="red", bold=True),
                    "trend--threshold": Style(color="yellow"), "trend--axis": Style(dim=True)}
        try:
            return {name: self.get_component_rich_style(name) for name in fallback}
        except Exception:  # before the first layout there are no styles yet
            return fallback

    def render(self) -> Text:
        height, width = self.content_size.height, self.content_size.width - GUTTER
        if height <= 0 or width <= 4:
            return Text("")
        lo, hi = self.history.columns(self.channel, self.span_s, width)
        if np.all(np.isnan(lo)):
            return Text("waiting for samples...", style="dim")
        threshold = self.history.shown.thresholds[self.channel]
        bottom, top = _range(lo, hi, threshold)
        styles = self._styles()
        return _draw(lo, hi, threshold, bottom, top, height, styles)


def _range(lo: np.ndarray, hi: np.ndarray, threshold: float | None) -> tuple[float, float]:
    """The value range to draw: the data's, stretched to take in the threshold, with a little room."""
    bottom, top = float(np.nanmin(lo)), float(np.nanmax(hi))
    if threshold is not None:
        bottom, top = min(bottom, threshold), max(top, threshold)
    room = max((top - bottom) * 0.05, abs(top) * 0.002, 1e-6)
    return bottom - room, top + room


def _draw(lo: np.ndarray, hi: np.ndarray, threshold: float | None, bottom: float, top: float,
          height: int, styles: dict[str, Style]) -> Text:
    levels = 2 * height
    scale = (levels - 1) / (top - bottom)
    have = ~np.isnan(lo)
    lo_l = np.where(have, np.floor((np.nan_to_num(lo) - bottom) * scale + 0.5), -1).astype(int)
    hi_l = np.where(have, np.floor((np.nan_to_num(hi) - bottom) * scale + 0.5), -1).astype(int)
    thr_row = None if threshold is None else math.floor((threshold - bottom) * scale + 0.5) // 2
    below = have & (lo < threshold) if threshold is not None else np.zeros(len(lo), dtype=bool)
    text = Text(no_wrap=True, overflow="crop")
    for row in range(height - 1, -1, -1):
        label = value_text(top if row == height - 1 else bottom if row == 0 else None, False)
        text.append(f"{label:>{GUTTER - 1}}\u2524" if row in (0, height - 1) else " " * (GUTTER - 1) + "\u2502",
                    styles["trend--axis"])
        lower = have & (lo_l <= 2 * row) & (hi_l >= 2 * row)
        upper = have & (lo_l <= 2 * row + 1) & (hi_l >= 2 * row + 1)
        cells = np.where(lower & upper, "\u2588", np.where(upper, "\u2580", np.where(lower, "\u2584", " ")))
        line = "".join(cells)
        if row == thr_row:
            line = "".join(c if c != " " else ("\u254c" if k % 2 == 0 else " ") for k, c in enumerate(line))
        _append_runs(text, line, below, row == thr_row, styles)
        if row:
            text.append("\n")
    return text


def _append_runs(text: Text, line: str, below: np.ndarray, on_threshold: bool, styles: dict[str, Style]) -> None:
    """Append a row of cells, one styled run per stretch of the same kind of cell."""
    start = 0
    kinds = ["t" if c == "\u254c" or (on_threshold and c == " ") else "l" if below[k] else "d"
             for k, c in enumerate(line)]
    names = {"t": "trend--threshold", "l": "trend--low", "d": "trend--data"}
    for k in range(1, len(line) + 1):
        if k == len(line) or kinds[k] != kinds[start]:
            text.append(line[start:k], styles[names[kinds[start]]])
            start = k
