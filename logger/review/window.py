"""Reading a stretch of a run: the samples around an event, or between two times, for some channels.

The run folder is opened as a pyarrow dataset and filtered on ``utc``; each part's row-group statistics let
the reader skip everything outside the stretch, so a few seconds out of a day-long run cost a few row
groups, not the day.
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import UTC, datetime, timedelta
from pathlib import Path
from typing import Any

import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq

from logger.store.check import naming_damage, parts_dataset
from logger.store.files import StoreError
from logger.store.layout import EVENTS_PARQUET
from logger.store.schema import channels_of


@dataclass(frozen=True)
class Window:
    """Samples of some channels between two times, and the event it was cut around (if any)."""

    samples: pa.Table
    start: datetime
    end: datetime
    event: dict[str, Any] | None = None


def samples_between(folder: Path, start: datetime, end: datetime, channels: list[str] | None = None) -> pa.Table:
    """Rows with ``start <= utc <= end`` (UTC datetimes), columns ``utc`` and the chosen channels."""
    data = parts_dataset(folder)
    chosen = pick_channels(folder, data.schema, channels)
    when = (pc.field("utc") >= pa.scalar(start, data.schema.field("utc").type)) & (
        pc.field("utc") <= pa.scalar(end, data.schema.field("utc").type))
    with naming_damage(folder):
        return data.to_table(columns=["utc", *chosen], filter=when).sort_by("utc")


def pick_channels(folder: Path, schema: pa.Schema, channels: list[str] | None) -> list[str]:
    """The channels asked for (all of the run's when none), each checked against the run."""
    names = run_channels(schema)
    unknown = [c for c in channels or () if c not in names]
    if unknown:
        raise StoreError(f"{folder}: no channel {unknown[0]!r} (it has {', '.join(names)})")
    return channels or names


def run_channels(schema: pa.Schema) -> list[str]:
    try:
        return channels_of(schema)
    except ValueError:
        raise StoreError("not a railtap run: its parts do not have the sample columns") from None


def event_row(folder: Path, event_id: int) -> dict[str, Any]:
    path = folder / EVENTS_PARQUET
    if not path.exists():
        raise StoreError(f"{folder}: no event table; if the run was cut short, run `railtap recover {folder}`")
    rows = pq.read_table(path).filter(pc.field("id") == event_id).to_pylist()
    if not rows:
        count = pq.read_metadata(path).num_rows
        raise StoreError(f"{folder}: no event #{event_id} (the run has events #1 to #{count}); "
                         f"`railtap review {folder} --events` lists them")
    return rows[0]


def around_event(folder: Path, event_id: int, before_s: float, after_s: float,
                 channels: list[str] | None = None) -> Window:
    """The samples from ``before_s`` ahead of event ``event_id`` to ``after_s`` past its end."""
    event = event_row(folder, event_id)
    start = _aware(event["start"]) - timedelta(seconds=before_s)
    end = _aware(event["end"] or event["start"]) + timedelta(seconds=after_s)
    picked = channels or ([event["channel"]] if event["channel"] else None)
    return Window(samples_between(folder, start, end, picked), start, end, event)


def _aware(value: datetime) -> datetime:
    return value if value.tzinfo is not None else value.replace(tzinfo=UTC)
