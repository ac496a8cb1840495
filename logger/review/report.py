"""A run's report, to keep or send: the summary, the overview plot, the worst events each with its zoom, and
every event in a table. As Markdown (``report.md`` with its PNGs beside it) or as one self-contained HTML file
(the PNGs inside it as ``data:`` URIs, no outside stylesheet, script or font), so it opens anywhere, offline.

Both come from the same Markdown text: the HTML is that text's headings, paragraphs and tables converted here
(the summary's tables are plain pipe tables), which needs no Markdown library. Every file is written under a
``_`` name and renamed into place.
"""

from __future__ import annotations

import base64
import html
import re
import tempfile
from collections.abc import Callable
from pathlib import Path
from typing import Any

from logger.review.chart import event_label, events_of, run_limits
from logger.review.plots import event_png, overview_png, replacing
from logger.review.summary import summarize
from logger.review.text import events_text, summary_text
from logger.review.window import around_event

WORST = 5
"""Events shown with a zoom plot."""
STYLE = """
body { font-family: system-ui, sans-serif; max-width: 1240px; margin: 1.5em auto; padding: 0 1em; color: #1c1c1c; }
h1 { font-size: 1.5em; } h2 { font-size: 1.2em; border-bottom: 1px solid #ccc; margin-top: 2em; }
h3 { font-size: 1em; margin-top: 1.6em; }
table { border-collapse: collapse; margin: 0.8em 0; font-size: 0.9em; }
th, td { border: 1px solid #d0d0d0; padding: 0.2em 0.6em; text-align: left; }
th { background: #eef2f6; } img { max-width: 100%; }
"""

Progress = Callable[[int, int], None]


def worst_events(folder: Path, count: int = WORST) -> list[dict[str, Any]]:
    """The ``count`` worst events of the run: deepest first, then longest; marks are not events of the rail
    or the link and never count."""
    rows = [e for e in events_of(folder) if e["kind"] != "mark"]
    # Durations to the millisecond: runs of identical faults differ by microseconds of clock, and then the
    # earliest should come first.
    rows.sort(key=lambda e: (-(e["depth_pct"] if e["depth_pct"] is not None else -1e300),
                             -round(e["duration_s"] or 0.0, 3), e["id"]))
    return rows[:count]


def report_markdown(folder: Path, out_dir: Path, worst: int = WORST, progress: Progress | None = None) -> Path:
    """Write ``out_dir/report.md`` with ``overview.png`` and ``event-N.png`` beside it; returns the report's
    path. ``out_dir`` is made when missing."""
    out_dir.mkdir(parents=True, exist_ok=True)
    text = _markdown(folder, out_dir, worst, progress)
    target = out_dir / "report.md"
    with replacing(target) as tmp:
        tmp.write_text(text, encoding="utf-8")
    return target


def report_html(folder: Path, path: Path, worst: int = WORST, progress: Progress | None = None) -> Path:
    """Write the report as one HTML file at ``path`` with every plot inside it; returns ``path``."""
    with tempfile.TemporaryDirectory(prefix="_railtap-report-") as scratch:
        pictures = Path(scratch)
        text = _markdown(folder, pictures, worst, progress)
        page = _page(f"railtap report: {folder.name}", markdown_html(text, pictures))
    with replacing(path) as tmp:
        tmp.write_text(page, encoding="utf-8")
    return path


def _markdown(folder: Path, pictures: Path, worst: int, progress: Progress | None) -> str:
    """The report as Markdown, drawing its plots into ``pictures`` (named as the text refers to them)."""
    chosen = worst_events(folder, worst)
    steps, done = 2 + len(chosen), 0

    def step() -> None:
        nonlocal done
        done += 1
        if progress is not None:
            progress(done, steps)

    summary = summarize(folder)
    step()
    overview_png(folder, pictures / "overview.png")
    step()
    lines = [f"# Run {folder.name}", "", "## Summary", "", summary_text(summary), "", "## Overview", "",
             "Lowest to highest value and mean of each stretch of time, from the per-second rollups; thresholds "
             "dashed (brownout) and dotted (overvoltage, overcurrent); events as coloured lines and spans, "
             "link events hatched grey.", "", "![overview of the run](overview.png)", ""]
    lines += [f"## The {len(chosen)} worst events" if chosen else "## Worst events", ""]
    if not chosen:
        lines += ["None: no brownout, dropout or other event was recorded.", ""]
    limits = run_limits(folder)
    for event in chosen:
        pad = min(max(0.5, 0.5 * (event["duration_s"] or 0.0)), 60.0)
        name = f"event-{event['id']}.png"
        event_png(around_event(folder, event["id"], pad, pad), pictures / name, limits)
        step()
        lines += [f"### Event {event['id']}: {event['kind']}", "", event_label(event), "",
                  f"![event {event['id']}]({name})", ""]
    lines += ["## Every event", "", events_text(folder), ""]
    return "\n".join(lines)


def markdown_html(text: str, pictures: Path) -> str:
    """HTML for the Markdown this module and :mod:`logger.review.text` write: ``#`` headings, pipe tables,
    ``![alt](file)`` images (read from ``pictures`` and embedded) and paragraphs; all text escaped."""
    out: list[str] = []
    block: list[str] = []
    block_kind = ""
    for line in [*text.split("\n"), ""]:
        kind = _kind(line)
        if block and (kind != block_kind or kind in ("heading", "image")):
            out.append(_block(block_kind, block, pictures))
            block = []
        if kind != "blank":
            block.append(line)
            block_kind = kind
    return "\n".join(out)


def _kind(line: str) -> str:
    if not line.strip():
        return "blank"
    if re.match(r"#{1,6} ", line):
        return "heading"
    if re.fullmatch(r"!\[[^\]]*\]\([^)\s]+\)", line):
        return "image"
    return "table" if line.startswith("|") else "text"


def _block(kind: str, lines: list[str], pictures: Path) -> str:
    first = lines[0]
    if kind == "table":
        return _table(lines)
    if kind == "heading":
        level = len(first) - len(first.lstrip("#"))
        return f"<h{level}>{html.escape(first[level:].strip())}</h{level}>"
    if kind == "image":
        alt, name = first[2:-1].split("](", 1)
        data = base64.b64encode((pictures / name).read_bytes()).decode("ascii")
        return f'<p><img alt="{html.escape(alt)}" src="data:image/png;base64,{data}"></p>'
    return "<p>" + "<br>\n".join(html.escape(line) for line in lines) + "</p>"


def _table(lines: list[str]) -> str:
    """A pipe table: the first row is the header, a row of dashes under it is skipped."""
    rows = [[cell.strip() for cell in line.strip().strip("|").split("|")] for line in lines]
    body = [r for r in rows[1:] if not all(set(c) <= set("-: ") for c in r)]
    head = "".join(f"<th>{html.escape(c)}</th>" for c in rows[0])
    cells = ["<tr>" + "".join(f"<td>{html.escape(c)}</td>" for c in r) + "</tr>" for r in body]
    return f"<table>\n<thead><tr>{head}</tr></thead>\n<tbody>\n" + "\n".join(cells) + "\n</tbody>\n</table>"


def _page(title: str, body: str) -> str:
    return (f'<!DOCTYPE html>\n<html lang="en">\n<head>\n<meta charset="utf-8">\n<title>{html.escape(title)}</title>\n'
            f"<style>{STYLE}</style>\n</head>\n<body>\n{body}\n</body>\n</html>\n")
