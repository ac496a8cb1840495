"""Samples out of a run for other tools: CSV or JSON lines, for a stretch of time and some channels.

Streamed batch by batch from a filtered dataset scan, so a day-long run exports in bounded memory; written
under a temporary name and renamed at the end, so an interrupted export leaves no half file behind.
"""

from __future__ import annotations

import json
import os
from collections.abc import Callable
from datetime import UTC, datetime, timedelta
from pathlib import Path

import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.csv as pacsv
import pyarrow.dataset as ds

from logger.durations import SYNTAX, parse_duration
from logger.review.window import pick_channels
from logger.store.check import naming_damage, parts_dataset
from logger.store.files import StoreError, read_run_json

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
    data = parts_dataset(folder)
    chosen = pick_channels(folder, data.schema, channels)
    columns = ["utc", *[c for name in chosen for c in ((name, f"{name}_counts") if counts else (name,))]]
    # Little read-ahead: memory stays near one batch per core however long the run.
    scanner = data.scanner(columns=columns, filter=_between(data.schema, start, end), batch_readahead=2,
                           fragment_readahead=1)
    total = data.count_rows() if progress is not None else 0
    tmp = path.with_name(f".{path.name}.part")
    try:
        with naming_damage(folder):
            rows = _write(scanner, tmp, fmt, total, progress)
        os.replace(tmp, path)
    finally:
        tmp.unlink(missing_ok=True)
    return rows


def _between(schema: pa.Schema, start: datetime | None, end: datetime | None) -> pc.Expression | None:
    kind = schema.field("utc").type
    parts = []
    if start is not None:
        parts.append(pc.field("utc") >= pa.scalar(start, kind))
    if end is not None:
        parts.append(pc.field("utc") <= pa.scalar(end, kind))
    if not parts:
        return None
    return parts[0] if len(parts) == 1 else parts[0] & parts[1]


def _write(scanner: ds.Scanner, tmp: Path, fmt: str, total: int, progress: Callable[[int, int], None] | None) -> int:
    rows = 0
    with open(tmp, "wb") as handle:
        writer = None
        for batch in scanner.to_batches():
            if batch.num_rows == 0:
                continue
            if fmt == "csv":
                writer = writer or pacsv.CSVWriter(handle, batch.schema)
                writer.write_batch(batch)
            else:
                handle.write(_json_lines(batch))
            rows += batch.num_rows
            if progress is not None:
                progress(rows, total)
        if writer is not None:
            writer.close()
        handle.flush()
        os.fsync(handle.fileno())
    return rows


def _json_lines(batch: pa.RecordBatch) -> bytes:
    """One JSON object per row; times as ISO 8601 UTC text, values as numbers written as Arrow writes them
    (the shortest text that reads back as the same float32, as in the CSV)."""
    utc = pc.strftime(batch.column("utc"), format="%Y-%m-%dT%H:%M:%SZ").to_pylist()
    names = [n for n in batch.schema.names if n != "utc"]
    keys = [json.dumps(n) for n in names]
    cols = [pc.cast(batch.column(n), pa.string()).to_pylist() for n in names]
    lines = ['{"utc": "' + t + '", ' + ", ".join(f"{k}: {v}" for k, v in zip(keys, row, strict=True)) + "}"
             for t, *row in zip(utc, *cols, strict=True)]
    return ("\n".join(lines) + "\n").encode()
