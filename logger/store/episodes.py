"""The sealed event table's final form: numbered in time order, dips pointing at their flicker episode.

Events are written the moment they end, so a long brownout or a flicker episode is written after events that
started later; once a run's events are sealed, the table is put in order of start time and numbered 1..N in
that order (what `railtap review --events` lists and `--event N` takes). Dips are written before anyone knows
a flicker episode will follow; each dip on the episode's channel that started within the episode's span gets
the episode's number in its ``episode`` column. Event tables are small: plain lists do.
"""

from __future__ import annotations

import os
from pathlib import Path

import pyarrow as pa
import pyarrow.parquet as pq

from logger.store.arrays import from_values

DIPS = ("brownout", "dropout")


def link_episodes(path: Path) -> int:
    """Rewrite the event table at ``path`` in time order, numbered afresh, with dips pointing at their episode;
    returns how many dips were linked."""
    table = pq.read_table(path)
    if table.num_rows:
        order = sorted(range(table.num_rows), key=_time_order(table))
        table = table.take(pa.array(order, pa.int64()))
        column = table.schema.get_field_index("id")
        table = table.set_column(column, table.schema.field(column),
                                 from_values(list(range(1, table.num_rows + 1)), pa.int64()))
    kinds = table["kind"].to_pylist()
    if "flicker" not in kinds:
        _write(table, path)
        return 0
    channels = table["channel"].to_pylist()
    starts = table["start"].cast(pa.int64()).to_pylist()
    ends = table["end"].cast(pa.int64()).to_pylist()
    ids = table["id"].to_pylist()
    episode: list[int | None] = [None] * table.num_rows  # numbers given while live are replaced by the final ones
    linked = 0
    for k, kind in enumerate(kinds):
        if kind != "flicker":
            continue
        last = ends[k] if ends[k] is not None else starts[k]
        for j, other in enumerate(kinds):
            if other in DIPS and channels[j] == channels[k] and starts[k] <= starts[j] <= last:
                episode[j] = ids[k]
                linked += 1
    column = table.schema.get_field_index("episode")
    table = table.set_column(column, table.schema.field(column), from_values(episode, pa.int64()))
    _write(table, path)
    return linked


def _time_order(table: pa.Table):
    """Sort key of a row: its start, then (at the same start) the longer first, so an episode precedes its
    first dip, then by kind and channel for a stable order."""
    starts = table["start"].cast(pa.int64()).to_pylist()
    ends = table["end"].cast(pa.int64()).to_pylist()
    kinds, channels = table["kind"].to_pylist(), table["channel"].to_pylist()
    return lambda k: (starts[k], -(ends[k] if ends[k] is not None else starts[k]), kinds[k], channels[k] or "")


def _write(table: pa.Table, path: Path) -> None:
    key_value = pq.read_metadata(path).metadata or {}
    tmp = path.with_name("_" + path.name + ".tmp")
    with pq.ParquetWriter(tmp, table.schema, compression="zstd", write_page_checksum=True) as writer:
        writer.write_table(table)
        writer.add_key_value_metadata({k.decode(): v.decode() for k, v in key_value.items()})
    os.replace(tmp, path)
