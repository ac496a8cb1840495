"""PNG plots of a recorded run: the whole run per channel, one event close up, and a channel's distribution.

The overview reads the per-second rollups, so a day-long run costs 86,400 rows, not 86 million samples; the
histogram streams the parts row group by row group into fixed bins, so it never holds the run in memory; the
event zoom draws the full-rate samples of a short window. Figures are drawn on matplotlib's Agg canvas (no
display, no pyplot state), imported only when a plot is made, and each file is written under a ``_`` name and
renamed into place, so an interrupted plot leaves no half-written PNG.
"""

from __future__ import annotations

import contextlib
import os
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import Any

import numpy as np
import pyarrow as pa

from logger.core.seconds import SECOND_US
from logger.review.chart import (
    Limits,
    channel_names,
    event_label,
    events_of,
    fold,
    fold_mean,
    from_us,
    is_link,
    kind_colour,
    local_text,
    local_zone,
    run_limits,
    run_rollups,
    to_us,
    utc_us,
    zone_name,
)
from logger.review.window import Window
from logger.store.check import open_part
from logger.store.files import RUN_JSON, StoreError
from logger.store.layout import parts_in

DPI = 100
"""Laid out for 100 dots per inch: the 12-inch width makes a 1200-pixel PNG."""
WIDTH_IN = 12.0
MOST_COLUMNS = 1200
"""The overview folds its per-second rows into at most this many columns, one per pixel."""
MOST_POINTS = 40_000
"""An event window with more samples than this is drawn as a min/max envelope, a column per pixel."""
FILL, LINE = "#a8bfdc", "#1f4470"
RESIDUAL_KINDS = ("brownout", "dropout", "flicker")


@contextmanager
def replacing(path: Path) -> Iterator[Path]:
    """A temporary name beside ``path`` (``_`` first) to write to; renamed onto ``path`` when the block ends
    normally and removed when it does not (Ctrl-C included), so ``path`` is never half written.

    Raises:
        StoreError: ``path`` is inside a run folder: every Parquet reader of the run (pyarrow datasets, pandas,
            railtap's own export) would try to read it as a part and fail.
    """
    if (path.parent / RUN_JSON).exists() and not path.name.startswith(("_", ".")):
        raise StoreError(f"{path}: not inside a run folder, where readers of the run would take it for a part; "
                         "write it beside the run instead")
    tmp = path.with_name(f"_{path.name}.tmp")
    try:
        yield tmp
        os.replace(tmp, path)
    finally:
        tmp.unlink(missing_ok=True)


def overview_png(folder: Path, path: Path, channels: list[str] | None = None) -> Path:
    """One panel per channel over the whole run: the min/max envelope of the per-second rollups with the mean,
    the thresholds as lines, and the run's events as coloured spans (rail events on their channel, link events
    hatched grey and marks dotted on every panel; the dips of a flicker episode are left to its one span)."""
    rollups = run_rollups(folder)
    limits = run_limits(folder)
    names = _chosen(folder, channels, channel_names(rollups))
    count = rollups["count"].to_numpy()
    have = count > 0
    t = utc_us(rollups["utc"])[have]
    start, stop = int(t[0]), int(t[-1]) + SECOND_US
    columns = int(min(MOST_COLUMNS, max(1, (stop - start) // SECOND_US)))
    edges = start + (stop - start) * np.arange(columns + 1) // columns
    fig, axes = _figure(len(names), 2.2)
    events = events_of(folder)
    for ax, name in zip(axes, names, strict=True):
        lo, hi = fold(t, rollups[f"{name}_min"].to_numpy()[have], rollups[f"{name}_max"].to_numpy()[have],
                      start, stop, columns)
        mean = fold_mean(t, rollups[f"{name}_mean"].to_numpy()[have], count[have], start, stop, columns)
        x = _days(edges)
        # Above the event marks (zorder), so a one-column dip is never hidden under the line that marks it.
        ax.fill_between(x, np.r_[lo, lo[-1]], np.r_[hi, hi[-1]], step="post", facecolor=FILL, edgecolor=FILL,
                        lw=0.8, label="min to max", zorder=3)
        ax.step(x, np.r_[mean, mean[-1]], where="post", color=LINE, lw=0.9, label="mean of each column", zorder=4)
        lim = limits.get(name, Limits(""))
        _limit_lines(ax, lim)
        mine = [e for e in events if e["channel"] in (name, None) and e.get("episode") is None]
        _event_marks(ax, mine, lambda us: _days(np.asarray(us)))
        ax.set_title(f"{name} ({lim.unit})" if lim.unit else name, loc="left", fontsize=10)
        ax.set_ylabel(lim.unit)
    _date_axis(axes[-1], x[0], x[-1])
    width = (stop - start) / columns / 1e6
    fig.suptitle(f"run {folder.name}: {local_text(from_us(start), 0)} to {local_text(from_us(stop), 0)}, "
                 f"{(stop - start) / 1e6:,.0f} s; each column spans {width:.3g} s", fontsize=11)
    _legend(fig, axes)
    return _save(fig, path)


def event_png(window: Window, path: Path, limits: dict[str, Limits] | None = None) -> Path:
    """One event close up: every sample of the window (an envelope when there are very many), the thresholds,
    the event's span shaded and its residual or peak marked, with the event's own line as the title.
    ``limits`` come from :func:`logger.review.chart.run_limits`."""
    limits = limits or {}
    event = window.event
    names = [n for n in window.samples.column_names if n != "utc"]
    zero = to_us(event["start"]) if event is not None else to_us(window.start)
    t = (utc_us(window.samples["utc"]) - zero) / 1e6
    fig, axes = _figure(max(len(names), 1), 2.6)
    for ax, name in zip(axes, names, strict=False):
        y = window.samples[name].to_numpy().astype(np.float64)
        _trace(ax, t, y)
        lim = limits.get(name, Limits(""))
        _limit_lines(ax, lim, data=y)
        ax.set_title(f"{name} ({lim.unit})" if lim.unit else name, loc="left", fontsize=10)
        ax.set_ylabel(lim.unit)
        if event is not None and event["channel"] in (name, None):
            _event_marks(ax, [event], lambda us: (np.asarray(us) - zero) / 1e6)
            if event["channel"] == name:
                _annotate(ax, event, t, y, lim.unit)
    if not names or window.samples.num_rows == 0:
        axes[0].text(0.5, 0.5, "no samples in this window", transform=axes[0].transAxes, ha="center")
    axes[-1].set_xlim((to_us(window.start) - zero) / 1e6, (to_us(window.end) - zero) / 1e6)
    axes[-1].set_xlabel(f"seconds from {local_text(from_us(zero))} ({zone_name(from_us(zero))})")
    fig.suptitle(event_label(event) if event is not None else f"{local_text(window.start)} to "
                 f"{local_text(window.end)}", fontsize=11, wrap=True)
    _legend(fig, axes)
    return _save(fig, path)


def histogram_counts(folder: Path, channel: str, bins: int = 200,
                     progress: Callable[[int, int], None] | None = None) -> tuple[np.ndarray, np.ndarray]:
    """How many samples of ``channel`` fall in each of ``bins`` equal bins from its lowest to its highest
    value (the rollups know both), counted one row group at a time. Bins are half open except the last,
    as ``numpy.histogram``'s are. Returns (counts, edges)."""
    counts, edges, _ = _histogram(folder, channel, bins, progress)
    return counts, edges


def _histogram(folder: Path, channel: str, bins: int,
               progress: Callable[[int, int], None] | None) -> tuple[np.ndarray, np.ndarray, float]:
    lo, hi, mean = _extent(folder, channel)
    if lo == hi:
        lo, hi = lo - 0.5, hi + 0.5  # as numpy.histogram widens the range of a constant input
    edges = np.linspace(lo, hi, bins + 1)
    counts = np.zeros(bins, dtype=np.int64)
    parts = parts_in(folder)
    for n, (_, part) in enumerate(parts, start=1):
        with contextlib.suppress(OSError, pa.ArrowException):  # a damaged part is left out, as the summary does
            counts += _part_histogram(part, channel, edges)
        if progress is not None:
            progress(n, len(parts))
    return counts, edges, mean


def _part_histogram(part: Path, channel: str, edges: np.ndarray) -> np.ndarray:
    source = open_part(part)
    counts = np.zeros(len(edges) - 1, dtype=np.int64)
    for group in range(source.num_row_groups):
        values = source.read_row_group(group, columns=[channel]).column(0).to_numpy().astype(np.float64)
        counts += np.histogram(values, edges)[0]
    return counts


def histogram_png(folder: Path, channel: str, path: Path, bins: int = 200,
                  progress: Callable[[int, int], None] | None = None) -> Path:
    """The distribution of ``channel`` over the whole run as a bar chart on a log scale (so the few samples of
    a dropout show beside the millions at nominal), with the thresholds and the mean."""
    counts, edges, mean = _histogram(folder, channel, bins, progress)
    lim = run_limits(folder).get(channel, Limits(""))
    fig, (ax,) = _figure(1, 4.0)
    ax.stairs(counts, edges, fill=True, color=FILL, baseline=0.5)
    ax.stairs(counts, edges, color=LINE, lw=0.8, baseline=0.5)
    ax.set_yscale("log")
    ax.axvline(mean, color=LINE, lw=1.2, label=f"mean {mean:.5g} {lim.unit}")
    _limit_lines(ax, lim, vertical=True)
    unit = f" ({lim.unit})" if lim.unit else ""
    ax.set_xlabel(f"{channel}{unit}")
    ax.set_ylabel("samples per bin (log scale)")
    fig.suptitle(f"{channel}{unit} in run {folder.name}: {int(counts.sum()):,} samples in {bins} bins of "
                 f"{edges[1] - edges[0]:.3g}{' ' + lim.unit if lim.unit else ''}", fontsize=11)
    _legend(fig, [ax])
    return _save(fig, path)


def _extent(folder: Path, channel: str) -> tuple[float, float, float]:
    """Lowest, highest and mean value of a channel over the run, from its rollups."""
    rollups = run_rollups(folder)
    _chosen(folder, [channel], channel_names(rollups))
    count = rollups["count"].to_numpy()
    have = count > 0
    mean = float((rollups[f"{channel}_mean"].to_numpy()[have] * count[have]).sum() / count[have].sum())
    lo, hi = rollups[f"{channel}_min"].to_numpy(), rollups[f"{channel}_max"].to_numpy()
    return float(np.nanmin(lo)), float(np.nanmax(hi)), mean


def _chosen(folder: Path, asked: list[str] | None, names: list[str]) -> list[str]:
    unknown = [c for c in asked or [] if c not in names]
    if unknown:
        raise StoreError(f"{folder}: no channel {unknown[0]!r} (it has {', '.join(names)})")
    return asked or names


def _days(us: np.ndarray) -> np.ndarray:
    """UTC microseconds as matplotlib date numbers (days since 1970)."""
    return np.asarray(us, dtype=np.float64) / (86_400 * SECOND_US)


def _figure(panels: int, panel_in: float) -> tuple[Any, list[Any]]:
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=(WIDTH_IN, 1.3 + panel_in * panels), dpi=DPI, layout="constrained")
    FigureCanvasAgg(fig)
    axes = list(fig.subplots(panels, 1, sharex=True, squeeze=False)[:, 0])
    for ax in axes:
        ax.grid(True, color="#e2e2e2", lw=0.6)
        ax.set_axisbelow(True)
        ax.tick_params(labelsize=9)
        for side in ("top", "right"):
            ax.spines[side].set_visible(False)
    return fig, axes


def _save(fig: Any, path: Path) -> Path:
    with replacing(path) as tmp:
        fig.savefig(tmp, format="png", dpi=DPI, metadata={"Software": None})
    return path


def _limit_lines(ax: Any, lim: Limits, vertical: bool = False, data: np.ndarray | None = None) -> None:
    """The brownout threshold dashed and the overvoltage or overcurrent limit dotted, each with its value
    written at the end of the line. Given ``data``, the axis is scaled to the data (and the limits near it),
    and a limit far outside is named at the edge it lies beyond instead of squeezing the data into a corner."""
    lines = [(lim.low, "brownout", "brownout threshold", "--"),
             (lim.high, lim.high_kind, f"{lim.high_kind} limit", ":")]
    span = None
    if data is not None and np.isfinite(data).any():
        lo, hi = float(np.nanmin(data)), float(np.nanmax(data))
        pad = max(hi - lo, 1e-9) * 0.15
        span = (lo - pad, hi + pad)
    for value, kind, label, style in lines:
        if value is None:
            continue
        colour = kind_colour(kind)
        if span is not None and not span[0] - (span[1] - span[0]) * 0.5 <= value <= span[1] + (span[1] - span[0]) * 0.5:
            above = value > span[1]
            ax.annotate(f"{'↑' if above else '↓'} {label} {value:g} {lim.unit}", xy=(1.0, 1.0 if above else 0.0),
                        xycoords="axes fraction", xytext=(-4, -4 if above else 4), textcoords="offset points",
                        ha="right", va="top" if above else "bottom", fontsize=8, color=colour)
            continue
        if span is not None:
            span = (min(span[0], value), max(span[1], value))
        (ax.axvline if vertical else ax.axhline)(value, color=colour, ls=style, lw=1.2, label=label)
        where = ((value, 1.0), ax.get_xaxis_transform(), (0, 2), "center", "bottom") if vertical else \
            ((1.0, value), ax.get_yaxis_transform(), (3, 0), "left", "center")
        ax.annotate(f"{value:g} {lim.unit}", xy=where[0], xycoords=where[1], xytext=where[2],
                    textcoords="offset points", ha=where[3], va=where[4], fontsize=8, color=colour)
    if span is not None:
        ax.set_ylim(*span)


def _event_marks(ax: Any, events: list[dict[str, Any]], x_of: Callable[[Any], np.ndarray]) -> None:
    """Spans over the events' durations and a line at each start (seen however short the event), one
    collection per kind; link events hatched, marks dotted."""
    from matplotlib.collections import PolyCollection

    for kind in sorted({e["kind"] for e in events}):
        mine = [e for e in events if e["kind"] == kind]
        starts = x_of([to_us(e["start"]) for e in mine])
        ends = x_of([to_us(e["end"] or e["start"]) for e in mine])
        link, colour = is_link(mine[0]), kind_colour(kind)
        style = "--" if link else ":" if kind == "mark" else "-"
        ax.vlines(starts, 0, 1, transform=ax.get_xaxis_transform(), colors=colour, linestyles=style,
                  lw=0.9, alpha=0.85, label=kind.replace("_", " "))
        boxes = [[(a, 0), (a, 1), (b, 1), (b, 0)] for a, b in zip(starts, ends, strict=True) if b > a]
        if boxes:
            ax.add_collection(PolyCollection(boxes, transform=ax.get_xaxis_transform(), facecolor=colour,
                                             alpha=0.12 if link else 0.22, hatch="//" if link else None,
                                             edgecolor=colour if link else "none", lw=0), autolim=False)


def _trace(ax: Any, t: np.ndarray, y: np.ndarray) -> None:
    if len(t) <= MOST_POINTS:
        step = np.diff(t)
        # A line across lost frames would draw samples that never came; break it where the step is far
        # longer than usual (ten times the median: common practice, no source).
        cut = np.flatnonzero(step > 10 * np.median(step)) + 1 if len(t) > 2 else np.zeros(0, dtype=np.int64)
        ax.plot(np.insert(t, cut, np.nan), np.insert(y, cut, np.nan), color=LINE, lw=0.9, label="samples")
        return
    columns = int(WIDTH_IN * DPI)
    lo, hi = fold(t * 1e6, y, y, int(t[0] * 1e6), int(t[-1] * 1e6) + 1, columns)
    x = t[0] + (t[-1] - t[0]) * np.arange(columns + 1) / columns
    ax.fill_between(x, np.r_[lo, lo[-1]], np.r_[hi, hi[-1]], step="post", facecolor=LINE, edgecolor=LINE, lw=0.6,
                    label="samples (lowest to highest)")


def _annotate(ax: Any, event: dict[str, Any], t: np.ndarray, y: np.ndarray, unit: str) -> None:
    """Mark the residual (a dip) or peak (an excursion) where the samples reach it."""
    value = event.get("value")
    if value is None or event["kind"] in ("mark", "outside_cal") or not len(t):
        return
    lasted = event.get("duration_s") or 0.0
    inside = (t >= 0) & (t <= lasted)
    where = np.flatnonzero(inside) if inside.any() else np.arange(len(t))
    k = where[np.argmin(np.abs(y[where] - value))]
    word = "residual" if event["kind"] in RESIDUAL_KINDS else "peak"
    depth = event.get("depth_pct")
    text = f"{word} {value:.4g} {unit}" + (f", depth {depth:.1f} %" if depth is not None and word == "residual" else "")
    ax.plot([t[k]], [value], marker="o", ms=6, mfc="none", mec=kind_colour(event["kind"]), mew=1.6)
    ax.annotate(text, xy=(t[k], value), xytext=(14, 14 if word == "residual" else -18), textcoords="offset points",
                fontsize=9, color="#222222", arrowprops={"arrowstyle": "-", "color": "#666666", "lw": 0.8},
                bbox={"boxstyle": "round,pad=0.25", "fc": "white", "ec": "#bbbbbb", "lw": 0.6})


def _date_axis(ax: Any, left: float, right: float) -> None:
    import matplotlib.dates as mdates

    zone = local_zone(mdates.num2date(left))
    locator = mdates.AutoDateLocator(tz=zone, minticks=4, maxticks=10)
    ax.xaxis.set_major_locator(locator)
    ax.xaxis.set_major_formatter(mdates.ConciseDateFormatter(locator, tz=zone))
    ax.set_xlim(left, right)
    ax.set_xlabel(zone_name(mdates.num2date(left)))


def _legend(fig: Any, axes: list[Any]) -> None:
    """One legend for the figure, under it: each label once, whatever panel drew it."""
    seen: dict[str, Any] = {}
    for ax in axes:
        handles, labels = ax.get_legend_handles_labels()
        for handle, label in zip(handles, labels, strict=True):
            seen.setdefault(label, handle)
    if seen:
        fig.legend(list(seen.values()), list(seen), loc="outside lower center", ncol=min(len(seen), 6),
                   frameon=False, fontsize=9)
