"""Point the brownouts and dropouts of a flicker episode at it, in the sealed event table.

Dips are written the moment they end, before anyone knows a flicker episode will follow; the episode row
comes later. So once a run's events are sealed, each dip on the episode's channel that started within the
episode's span gets the episode's id in its ``episode`` column. Event tables are small: plain lists do.
"""

from __future__ import annotations

import os
from pathlib import Path

import pyarrow as pa
import pyarrow.parquet as pq

from logger.store.arrays import from_values

DIPS = ("brownout", "dropout")


def link_episodes(path: Path) -> int:
    """Rewrite the event table at ``path`` with dips pointing at their episode; returns how many were linked."""
    table = pq.read_table(path)
    kinds = table["kind"].to_pylist()
    if "flicker" not in kinds:
        return 0
    channels = table["channel"].to_pylist()
    starts = table["start"].cast(pa.int64()).to_pylist()
    ends = table["end"].cast(pa.int64()).to_pylist()
    ids = table["id"].to_pylist()
    episode = table["episode"].to_pylist()
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
    key_value = pq.read_metadata(path).metadata or {}
    tmp = path.with_name("_" + path.name + ".tmp")
    with pq.ParquetWriter(tmp, table.schema, compression="zstd", write_page_checksum=True) as writer:
        writer.write_table(table)
        writer.add_key_value_metadata({k.decode(): v.decode() for k, v in key_value.items()})
    os.replace(tmp, path)
    return linked
