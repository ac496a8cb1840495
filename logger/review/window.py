"""Reading a stretch of a run: the samples around an event, or between two times, for some channels.

Each part's row-group statistics on ``utc`` let the reader skip everything outside the stretch, so a few
seconds out of a day-long run cost a few row groups, not the day. A short window is read whole through a
pyarrow dataset; a long stretch (an export) is streamed part by part in batches of :data:`BATCH_ROWS`, so
memory stays flat however long the run.
"""

from __future__ import annotations

from collections.abc import Iterator
from dataclasses import dataclass
from datetime import UTC, datetime, timedelta
from pathlib import Path
from typing import Any

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq

from logger.store.arrays import as_numpy, from_numpy
from logger.store.check import naming_damage, open_part, parts_dataset
from logger.store.files import StoreError
from logger.store.layout import EVENTS_PARQUET
from logger.store.schema import channels_of

EPOCH = datetime(1970, 1, 1, tzinfo=UTC)
ONE_US = timedelta(microseconds=1)
BATCH_ROWS = 65_536
"""Rows per streamed batch: a few MB of columns and of their text, so an export's memory stays near one batch,
and enough rows that the fixed cost of a batch is lost in its work."""


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


@dataclass(frozen=True)
class Stretch:
    """The rows of some columns of a run's parts with ``start <= utc <= end`` (either end open when None),
    streamed in order: part by part, only the row groups whose ``utc`` statistics reach into the stretch."""

    plan: tuple[tuple[Path, tuple[int, ...]], ...]
    """Each part to read and its row groups that may hold rows of the stretch."""
    columns: tuple[str, ...]
    start_us: int | None
    end_us: int | None
    rows: int
    """Rows in the planned row groups: the stretch's rows, or a few more where a group straddles an end."""

    @classmethod
    def of(cls, parts: list[Path], columns: list[str], start: datetime | None, end: datetime | None) -> Stretch:
        """Plan the read from the parts' footers (no page is read yet); times are aware or UTC."""
        start_us, end_us = (None if t is None else (_aware(t) - EPOCH) // ONE_US for t in (start, end))
        plan, rows = [], 0
        for part in parts:
            meta = pq.read_metadata(part)
            groups = tuple(_groups_within(meta, start_us, end_us))
            if groups:
                plan.append((part, groups))
                rows += sum(meta.row_group(g).num_rows for g in groups)
        return cls(tuple(plan), tuple(columns), start_us, end_us, rows)

    def batches(self) -> Iterator[pa.RecordBatch]:
        """Non-empty batches of at most :data:`BATCH_ROWS` rows, in the parts' order; each page is checked
        against its checksum as it is read (a damaged one raises)."""
        for part, groups in self.plan:
            source = open_part(part)
            for batch in source.iter_batches(batch_size=BATCH_ROWS, row_groups=list(groups),
                                             columns=list(self.columns), use_threads=False):
                batch = self._within(batch)
                if batch.num_rows:
                    yield batch

    def _within(self, batch: pa.RecordBatch) -> pa.RecordBatch:
        """The batch's rows inside the stretch (all of them when it has no ends). Compared in numpy: Arrow's
        comparison with a Python number would import pandas to convert it."""
        if self.start_us is None and self.end_us is None:
            return batch
        us = as_numpy(batch.column("utc"), np.int64)
        inside = np.ones(len(us), bool)
        if self.start_us is not None:
            inside &= us >= self.start_us
        if self.end_us is not None:
            inside &= us <= self.end_us
        return batch if inside.all() else batch.take(from_numpy(np.flatnonzero(inside), pa.int64()))


def _groups_within(meta: pq.FileMetaData, start_us: int | None, end_us: int | None) -> Iterator[int]:
    """Row groups of a part whose ``utc`` range meets the stretch (a group without statistics always does)."""
    column = meta.schema.to_arrow_schema().get_field_index("utc")
    for group in range(meta.num_row_groups):
        stats = meta.row_group(group).column(column).statistics if column >= 0 else None
        if stats is not None and stats.has_min_max and (
                (start_us is not None and stats.max_raw < start_us) or (end_us is not None and stats.min_raw > end_us)):
            continue
        yield group


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
