"""Samples out of a run for other tools: CSV or JSON lines, for a stretch of time and some channels.

Streamed part by part in batches of a few MB (:class:`~logger.review.window.Stretch`), so a day-long run exports
in bounded memory; each batch becomes text column by column (:mod:`logger.review.sampletext`), never a Python
object per row. Written under a temporary name, made durable and renamed at the end, so an interrupted export
leaves no half file behind.
"""

from __future__ import annotations

import os
from collections.abc import Callable
from datetime import UTC, datetime, timedelta
from pathlib import Path

import pyarrow as pa

from logger.durations import SYNTAX, parse_duration
from logger.review.sampletext import csv_header, csv_rows, json_rows
from logger.review.window import Stretch, pick_channels
from logger.store.check import naming_damage, open_part
from logger.store.files import StoreError, read_run_json
from logger.store.layout import parts_in

FORMATS = ("csv", "jsonl")
def parse_when(text: str, run_start: datetime) -> datetime:
    """A time on the command line: an offset from the run's first sample in the one duration syntax (``90s``,
    ``+10m``, ``1.5h``, ``2h5m``) or an ISO date-time (local time when it has no zone)."""
    seconds = parse_duration(text)
    if seconds is not None:
        return run_start + timedelta(seconds=seconds)
    try:
        when = datetime.fromisoformat(text)
    except ValueError:
        raise StoreError(f"{text!r}: expected an offset from the run's start ({SYNTAX}) or a date-time "
                         "(2026-12-01T22:15:00, local time; add Z for UTC)") from None
    return when.astimezone(UTC) if when.tzinfo is None else when


def run_start(folder: Path) -> datetime:
    """The run's first sample time (its first part's), or its start time."""
    return run_span(folder)[0]


def run_span(folder: Path) -> tuple[datetime, datetime]:
    """The run's first and last sample times (from its parts), or its start and end."""
    meta = read_run_json(folder)
    parts = meta.get("parts") or [{}]
    first = parts[0].get("first_utc") or meta.get("start_utc")
    last = parts[-1].get("last_utc") or meta.get("last_sample_utc") or meta.get("end_utc") or first
    if not first:
        raise StoreError(f"{folder}: the run has no start time in _run.json")
    return datetime.fromisoformat(first), datetime.fromisoformat(last)


def check_span(folder: Path, start: datetime | None, end: datetime | None) -> None:
    """Refuse a stretch that holds no sample of the run, saying why, rather than write an empty file."""
    first, last = run_span(folder)
    if start is not None and end is not None and end < start:
        raise StoreError(f"--until {end.isoformat()} is before --from {start.isoformat()}")
    if start is not None and start > last:
        raise StoreError(f"--from {start.isoformat()} is after the run's last sample ({last.isoformat()})")
    if end is not None and end < first:
        raise StoreError(f"--until {end.isoformat()} is before the run's first sample ({first.isoformat()})")


def export_samples(
    folder: Path,
    path: Path,
    *,
    start: datetime | None = None,
    end: datetime | None = None,
    channels: list[str] | None = None,
    counts: bool = False,
    progress: Callable[[int, int], None] | None = None,
) -> int:
    """Write ``utc`` and the chosen channels (and their raw counts, with ``counts``) between ``start`` and
    ``end`` to ``path``, as CSV or JSON lines by its suffix; returns the rows written."""
    fmt = path.suffix.lstrip(".").lower()
    if fmt not in FORMATS:
        raise StoreError(f"{path}: say .csv or .jsonl, the format is taken from the name")
    parts = [part for _, part in parts_in(folder)]
    with naming_damage(folder):
        schema = open_part(parts[0]).schema_arrow if parts else pa.schema([])
    chosen = pick_channels(folder, schema, channels)
    columns = ["utc", *[c for name in chosen for c in ((name, f"{name}_counts") if counts else (name,))]]
    tmp = path.with_name(f".{path.name}.part")
    try:
        with naming_damage(folder):
            stretch = Stretch.of(parts, columns, start, end)
            rows = _write(stretch, tmp, fmt, progress)
        os.replace(tmp, path)
    finally:
        tmp.unlink(missing_ok=True)
    return rows


def _write(stretch: Stretch, tmp: Path, fmt: str, progress: Callable[[int, int], None] | None) -> int:
    """Write the stretch's rows to ``tmp`` and make them durable; returns the rows written.

    Nothing is written for a stretch without rows, not even the CSV header, as before."""
    rows = 0
    text = csv_rows if fmt == "csv" else json_rows
    with pa.OSFile(str(tmp), "wb") as sink:
        for batch in stretch.batches():
            if rows == 0 and fmt == "csv":
                sink.write(csv_header(batch.schema))
            sink.write(text(batch))
            rows += batch.num_rows
            if progress is not None:
                progress(rows, stretch.rows)
        os.fsync(sink.fileno())
    return rows
