"""Batch helpers of the writer: bring a batch to the run's schema, and cut it at part boundaries.

Both work on whole columns (numpy and Arrow), never row by row.
"""

from __future__ import annotations

import itertools
from collections.abc import Iterator

import numpy as np
import pyarrow as pa

from logger.store.arrays import as_numpy


def conform(batch: pa.RecordBatch, schema: pa.Schema) -> pa.RecordBatch:
    """``batch`` in exactly ``schema``: columns reordered and safely cast (int64 counts to uint16...).

    Raises:
        ValueError: A column is missing, extra, has nulls, or does not fit (a count above 65535, a time with
            nanoseconds...).
    """
    if batch.schema.equals(schema):
        return batch
    extra = sorted(set(batch.schema.names) - set(schema.names))
    if extra:
        raise ValueError(f"batch has columns the run does not record: {extra}")
    columns = []
    for field in schema:
        if field.name not in batch.schema.names:
            raise ValueError(f"batch lacks column {field.name!r}")
        column = batch.column(field.name)
        if column.null_count:
            raise ValueError(f"column {field.name!r} has nulls; samples must be complete")
        try:
            columns.append(column.cast(field.type) if column.type != field.type else column)
        except (pa.ArrowInvalid, pa.ArrowNotImplementedError) as exc:
            problem = f"cannot store {column.type} as {field.type}: {exc}"
            raise ValueError(f"column {field.name!r}: {problem}") from None
    return pa.RecordBatch.from_arrays(columns, schema=schema)


def split_by_slot(
    batch: pa.RecordBatch, t0_us: int, slot_us: int, current: int
) -> Iterator[tuple[int, pa.RecordBatch]]:
    """Cut ``batch`` where its ``utc`` enters a new slot ``[t0 + k * slot_us, t0 + (k + 1) * slot_us)``.

    Slots never go back: a row whose time is earlier than the current slot (a host clock step back) stays in
    the current slot, so every row lands in exactly one part and parts never overlap in order.

    Args:
        batch: Samples with a ``utc`` timestamp column.
        t0_us: Start of slot 0, µs since the epoch (the run's first sample).
        slot_us: Slot length in µs.
        current: Slot of the part being recorded.

    Yields:
        ``(slot, piece)`` in order; the pieces together are the batch.
    """
    utc = as_numpy(batch.column("utc"), np.int64)
    slots = np.maximum.accumulate(np.maximum((utc - t0_us) // slot_us, current))
    edges = [0, *(np.flatnonzero(np.diff(slots)) + 1).tolist(), len(slots)]
    for start, stop in itertools.pairwise(edges):
        yield int(slots[start]), batch.slice(start, stop - start)
