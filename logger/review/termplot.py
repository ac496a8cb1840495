"""A quick look at a channel without leaving the shell: the same min/max column chart the live screen's trend
draws, over the whole run (from the per-second rollups) or around one event (from every sample).

The chart fills the width asked for (a terminal's width) and the height asked for, counting a title line at
the top and a time line at the bottom that gives the local time at both ends and marks the events under the
columns they fall in. A negative rail is drawn as its size, as its detectors watch it, so a dip towards zero
points down and the brownout threshold keeps its meaning.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import numpy as np
from rich.style import Style
from rich.text import Text

from logger.core.seconds import SECOND_US
from logger.review.chart import (
    Limits,
    channel_names,
    events_of,
    fold,
    from_us,
    kind_colour,
    local_text,
    run_limits,
    run_rollups,
    to_us,
    utc_us,
    zone_name,
)
from logger.review.window import around_event
from logger.store.check import naming_damage, parts_dataset
from logger.store.files import StoreError
from logger.textplot import DEFAULT_STYLES, GUTTER, draw_columns, value_range

SMALLEST = (GUTTER + 8, 4)
"""The least width and height that still make a chart: a few columns, and two rows besides the title and
the time line."""


def run_chart(folder: Path, channel: str, width: int = 80, height: int = 16) -> Text:
    """``channel`` over the whole run in ``width`` x ``height`` cells. Columns come from the rollups, or from
    the samples themselves when the run has fewer seconds than the chart has columns."""
    _check_size(width, height)
    columns = width - GUTTER
    rollups = run_rollups(folder)
    if channel not in channel_names(rollups):
        raise StoreError(f"{folder}: no channel {channel!r} (it has {', '.join(channel_names(rollups))})")
    count = rollups["count"].to_numpy()
    t = utc_us(rollups["utc"])[count > 0]
    start, stop = int(t[0]), int(t[-1]) + SECOND_US
    if (stop - start) // SECOND_US >= columns:
        lo, hi = fold(t, rollups[f"{channel}_min"].to_numpy()[count > 0],
                      rollups[f"{channel}_max"].to_numpy()[count > 0], start, stop, columns)
    else:
        with naming_damage(folder):
            table = parts_dataset(folder).to_table(columns=["utc", channel])
        t_all = utc_us(table["utc"])
        start, stop = int(t_all.min()), int(t_all.max()) + 1
        values = table[channel].to_numpy().astype(np.float64)
        lo, hi = fold(t_all, values, values, start, stop, columns)
    marks = [e for e in events_of(folder) if e["channel"] in (channel, None) and e["kind"] != "mark"]
    lim = run_limits(folder).get(channel, Limits(""))
    span = (stop - start) / 1e6 / columns
    about = f"whole run {folder.name}, lowest to highest of each {span:.3g} s"
    return _compose(_name(channel, lim), about, lo, hi, lim, height, (start, stop), marks, digits=0)


def event_chart(folder: Path, event_id: int, width: int = 80, height: int = 16, before_s: float = 1.0,
                after_s: float = 1.0, channel: str | None = None) -> Text:
    """The samples of one channel (the event's own, unless ``channel`` is given; the first channel for a link
    event) from ``before_s`` ahead of event ``event_id`` to ``after_s`` past its end."""
    _check_size(width, height)
    window = around_event(folder, event_id, before_s, after_s, [channel] if channel else None)
    event = window.event or {}
    name = channel or event.get("channel") or next(n for n in window.samples.column_names if n != "utc")
    start, stop = to_us(window.start), to_us(window.end) + 1
    t = utc_us(window.samples["utc"])
    values = window.samples[name].to_numpy().astype(np.float64)
    lo, hi = fold(t, values, values, start, stop, width - GUTTER)
    lim = run_limits(folder).get(name, Limits(""))
    lasted = f", {event['duration_s']:.3f} s" if event.get("duration_s") is not None else ""
    about = f"#{event_id} {event.get('kind')} on {event.get('channel') or 'the link'}{lasted}: {event.get('detail')}"
    return _compose(_name(name, lim), about, lo, hi, lim, height, (start, stop), [event], digits=3)


def _check_size(width: int, height: int) -> None:
    if width < SMALLEST[0] or height < SMALLEST[1]:
        raise ValueError(f"a terminal chart needs at least {SMALLEST[0]} x {SMALLEST[1]} cells, "
                         f"not {width} x {height}")


def _name(channel: str, lim: Limits) -> str:
    """``out_v (V)``; a negative rail, drawn as its size, as ``|neg_v| (V)``."""
    name = f"|{channel}|" if lim.negative else channel
    return f"{name} ({lim.unit})" if lim.unit else name


def _compose(name: str, about: str, lo: np.ndarray, hi: np.ndarray, lim: Limits, height: int, span: tuple[int, int],
             events: list[dict[str, Any]], digits: int) -> Text:
    """Title, chart and time line, each exactly as wide as the chart."""
    if np.isnan(lo).all():
        raise StoreError("no samples to draw in that stretch of the run")
    threshold = lim.low
    if lim.negative:  # drawn as its size: the lowest size is the negated highest value
        lo, hi = -hi, -lo
        threshold = None if threshold is None else -threshold
    width = GUTTER + len(lo)
    bottom, top = value_range(lo, hi, threshold)
    title = f"{name}{f', brownout below {threshold:g}' if threshold is not None else ''}: {about}"
    text = Text(no_wrap=True, overflow="crop")
    text.append(title[:width].ljust(width) + "\n", Style(bold=True))
    text.append_text(draw_columns(lo, hi, threshold, bottom, top, height - 2, DEFAULT_STYLES))
    text.append("\n")
    text.append_text(_time_line(span, len(lo), events, digits))
    return text


def _time_line(span: tuple[int, int], columns: int, events: list[dict[str, Any]], digits: int) -> Text:
    """The time at the chart's two ends, its zone named (local time unless ``--utc``); between them a rule with
    each event drawn under its columns."""
    start, stop = span
    cells = ["\u2500"] * columns
    colours: list[str | None] = [None] * columns
    scale = columns / max(stop - start, 1)
    for event in events:
        if not event:
            continue
        a = int((to_us(event["start"]) - start) * scale)
        b = int((to_us(event["end"] or event["start"]) - start) * scale)
        for k in range(max(a, 0), min(max(b, a) + 1, columns)):
            cells[k], colours[k] = "\u2501", kind_colour(event["kind"])
    left, right = _clock(start, digits), f"{_clock(stop, digits)} {zone_name(from_us(stop))}"
    if len(left) + len(right) + 2 <= columns:
        cells[: len(left)] = list(left)
        cells[columns - len(right):] = list(right)
        colours[: len(left)] = [None] * len(left)
        colours[columns - len(right):] = [None] * len(right)
    line = Text(" " * GUTTER, no_wrap=True, overflow="crop")
    for cell, colour in zip(cells, colours, strict=True):
        line.append(cell, Style(color=colour, bold=True) if colour else DEFAULT_STYLES["axis"])
    return line


def _clock(us: int, digits: int) -> str:
    text = local_text(from_us(us), digits)
    return text[11:] if digits else text
