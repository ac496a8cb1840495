"""Column charts in text: each column filled from its lowest to its highest value in half-cell steps, so a
one-sample dip shows however many samples a column covers, and, where a column spans more than a cell, its
mean marked in its own colour, so that a long span full of dips still shows where the rail sat. Used by the
live trend and by ``railtap review``'s quick look in the terminal.
"""

from __future__ import annotations

import math

import numpy as np
from rich.style import Style
from rich.text import Text

GUTTER = 8
"""Columns taken by the value labels and the axis line on the left."""
DEFAULT_STYLES = {"data": Style(color="green"), "low": Style(color="red", bold=True),
                  "threshold": Style(color="yellow"), "axis": Style(dim=True), "mean": Style(color="white", bold=True)}


def value_text(value: float | None, signed: bool = True) -> str:
    """A reading with four significant figures and its sign (``+12.00``, ``-15.02``, ``+3.487``).

    A fixed number of figures keeps the width steady as the value moves, so big digits do not jump about.
    """
    if value is None or not math.isfinite(value):
        return "-.--" if not signed else " -.--"
    size = abs(value)
    places = 3 if size < 10 else 2 if size < 100 else 1 if size < 1000 else 0
    return f"{value:+.{places}f}" if signed else f"{value:.{places}f}"

def value_range(lo: np.ndarray, hi: np.ndarray, threshold: float | None) -> tuple[float, float]:
    """The value range to draw: the data's, stretched to take in the threshold, with a little room."""
    bottom, top = float(np.nanmin(lo)), float(np.nanmax(hi))
    if threshold is not None:
        bottom, top = min(bottom, threshold), max(top, threshold)
    room = max((top - bottom) * 0.05, abs(top) * 0.002, 1e-6)
    # The room never carries the axis across zero: a positive rail's stops at 0 below, a negative rail's above.
    low = max(bottom - room, 0.0) if bottom >= 0 else bottom - room
    high = min(top + room, 0.0) if top <= 0 else top + room
    return low, high


def draw_columns(lo: np.ndarray, hi: np.ndarray, threshold: float | None, bottom: float, top: float,
                 height: int, styles: dict[str, Style], over: bool = False, mean: np.ndarray | None = None) -> Text:
    """Rows of half-cell blocks from each column's lowest to highest value, labelled at top and bottom, with the
    threshold dashed across; columns that went past it (below a brownout threshold, above an ``over`` limit)
    use the ``low`` style, and the cell of a column's ``mean`` the ``mean`` style where the column spans more
    than that cell."""
    levels = 2 * height
    scale = (levels - 1) / (top - bottom)
    have = ~np.isnan(lo)
    lo_l = np.where(have, np.floor((np.nan_to_num(lo) - bottom) * scale + 0.5), -1).astype(int)
    hi_l = np.where(have, np.floor((np.nan_to_num(hi) - bottom) * scale + 0.5), -1).astype(int)
    thr_row = None if threshold is None else math.floor((threshold - bottom) * scale + 0.5) // 2
    # A negative rail's threshold is negative, and its dips go up towards zero: "below" means past it.
    if threshold is None:
        below = np.zeros(len(lo), dtype=bool)
    else:
        below = have & ((lo < threshold) if (threshold >= 0) != over else (hi > threshold))
    mean_row = np.full(len(lo), -1)
    if mean is not None:
        mean_l = np.floor((np.nan_to_num(mean) - bottom) * scale + 0.5).astype(int)
        spread = have & ~np.isnan(mean) & (hi_l - lo_l > 2)
        mean_row = np.where(spread, mean_l // 2, -1)
    text = Text(no_wrap=True, overflow="crop")
    for row in range(height - 1, -1, -1):
        label = value_text(top if row == height - 1 else bottom if row == 0 else None, False)
        text.append(f"{label:>{GUTTER - 1}}\u2524" if row in (0, height - 1) else " " * (GUTTER - 1) + "\u2502",
                    styles["axis"])
        lower = have & (lo_l <= 2 * row) & (hi_l >= 2 * row)
        upper = have & (lo_l <= 2 * row + 1) & (hi_l >= 2 * row + 1)
        cells = np.where(lower & upper, "\u2588", np.where(upper, "\u2580", np.where(lower, "\u2584", " ")))
        line = "".join(cells)
        if row == thr_row:
            line = "".join(c if c != " " else ("\u254c" if k % 2 == 0 else " ") for k, c in enumerate(line))
        _append_runs(text, line, below, row == thr_row, styles, mean_row == row)
        if row:
            text.append("\n")
    return text


def _append_runs(text: Text, line: str, below: np.ndarray, on_threshold: bool, styles: dict[str, Style],
                 at_mean: np.ndarray) -> None:
    """Append a row of cells, one styled run per stretch of the same kind of cell."""
    start = 0
    kinds = ["t" if c == "\u254c" or (on_threshold and c == " ") else "m" if at_mean[k] else "l" if below[k]
             else "d" for k, c in enumerate(line)]
    names = {"t": "threshold", "l": "low", "d": "data", "m": "mean"}
    for k in range(1, len(line) + 1):
        if k == len(line) or kinds[k] != kinds[start]:
            text.append(line[start:k], styles[names[kinds[start]]])
            start = k
