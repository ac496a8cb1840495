"""Arrow schemas of a run: the sample table and the event table.

The sample table keeps, for every channel, the calibrated value beside the raw ADC counts it came from, so a
log can be re-calibrated later without the device. Time is kept twice: host UTC for people and joins, and the
unwrapped device clock, on which every interval is measured. ``seq`` is the unwrapped frame sequence (a gap
means lost frames); ``segment`` counts the device's restarts (0 from the start, one more after each).
"""

from __future__ import annotations

import keyword
import re
from collections.abc import Sequence
from typing import Any

import numpy as np
import pyarrow as pa

from logger.store.arrays import from_numpy, from_values

UTC_TYPE = pa.timestamp("us", tz="UTC")
FIXED_COLUMNS: tuple[str, ...] = ("utc", "device_us", "seq", "segment")
OLD_FIXED_COLUMNS: tuple[str, ...] = ("utc", "device_us", "seq")
"""Runs recorded before boot segments were kept (format 1) lack ``segment``; their rows count as segment 0."""
COUNTS_SUFFIX = "_counts"

_NAME = re.compile(r"^[A-Za-z_][A-Za-z0-9_]*$")


def _check_channel_names(channels: Sequence[str]) -> None:
    """Raise ValueError unless every name is identifier-like, unique and free of the other columns."""
    if isinstance(channels, str):
        raise ValueError("channels must be a sequence of names, not one string")
    if not channels:
        raise ValueError("a run needs at least one channel")
    for name in channels:
        if not isinstance(name, str) or not _NAME.match(name) or keyword.iskeyword(name):
            raise ValueError(
                f"channel name {name!r} is not valid: use letters, digits and '_', not starting with a digit"
            )
    if len(set(channels)) != len(channels):
        twice = sorted({name for name in channels if list(channels).count(name) > 1})
        raise ValueError(f"channel names appear twice: {', '.join(twice)}")
    seen: set[str] = set(FIXED_COLUMNS)
    for name in channels:
        for column in (name, name + COUNTS_SUFFIX):
            if column in seen:
                raise ValueError(f"channel {name!r} makes column {column!r}, which another column uses")
            seen.add(column)


def sample_schema(channels: Sequence[str]) -> pa.Schema:
    """Schema of the sample table for the given channel names.

    Args:
        channels: Channel names from the rig file, in display order, e.g. ``["out_v", "out_a"]``.

    Returns:
        ``utc`` (timestamp µs UTC), ``device_us`` (int64), ``seq`` (int64), ``segment`` (int32), then for each channel
        ``<name>`` (float32, calibrated) and ``<name>_counts`` (uint16, raw ADC counts). No column is
        nullable.

    Raises:
        ValueError: A channel name is not identifier-like, is repeated, or clashes with another column.
    """
    _check_channel_names(channels)
    fields = [
        pa.field("utc", UTC_TYPE, nullable=False),
        pa.field("device_us", pa.int64(), nullable=False),
        pa.field("seq", pa.int64(), nullable=False),
        pa.field("segment", pa.int32(), nullable=False),
    ]
    for name in channels:
        fields.append(pa.field(name, pa.float32(), nullable=False))
        fields.append(pa.field(name + COUNTS_SUFFIX, pa.uint16(), nullable=False))
    return pa.schema(fields)


def channels_of(schema: pa.Schema) -> list[str]:
    """Channel names of a sample schema (the inverse of :func:`sample_schema`).

    Raises:
        ValueError: The schema does not have the layout :func:`sample_schema` makes.
    """
    names = schema.names
    fixed = len(FIXED_COLUMNS) if tuple(names[: len(FIXED_COLUMNS)]) == FIXED_COLUMNS else len(OLD_FIXED_COLUMNS)
    if tuple(names[:fixed]) not in (FIXED_COLUMNS, OLD_FIXED_COLUMNS) or (len(names) - fixed) % 2:
        raise ValueError(f"not a sample schema: columns {names}")
    channels = names[fixed::2]
    expected = sample_schema(channels)
    if fixed < len(FIXED_COLUMNS):
        expected = expected.remove(expected.get_field_index("segment"))
    if [f.type for f in expected] != [f.type for f in schema]:
        raise ValueError(f"not a sample schema: column types {describe_columns(schema)}")
    return channels


def event_schema() -> pa.Schema:
    """Schema of the event table: brownouts, dropouts, overvoltage, link faults, user marks...

    ``kind`` and ``start`` are always set; the rest is null where it does not apply (a user mark has no
    depth, a link fault no channel). ``start`` and ``end`` are UTC labels; ``device_start_us`` and
    ``device_end_us`` are the same moments on the sample table's ``device_us`` axis, where the device measured
    the event, and ``duration_s`` comes from them. Tables written before these two columns lack them.
    """
    return pa.schema(
        [
            pa.field("kind", pa.string(), nullable=False),
            pa.field("channel", pa.string()),
            pa.field("start", UTC_TYPE, nullable=False),
            pa.field("end", UTC_TYPE),
            pa.field("duration_s", pa.float64()),
            pa.field("value", pa.float64()),
            pa.field("depth_pct", pa.float64()),
            pa.field("count", pa.int64()),
            pa.field("rate_hz", pa.float64()),
            pa.field("duty", pa.float64()),
            pa.field("peak", pa.float64()),
            pa.field("detail", pa.string()),
            pa.field("id", pa.int64()),
            pa.field("episode", pa.int64()),
            pa.field("device_start_us", pa.int64()),
            pa.field("device_end_us", pa.int64()),
        ]
    )


def describe_columns(schema: pa.Schema) -> dict[str, str]:
    """Column name -> Arrow type text, as kept in ``_run.json`` so a reader sees the layout at a glance."""
    return {field.name: str(field.type) for field in schema}


def event_batch(row: dict[str, Any]) -> pa.RecordBatch:
    """One event as a one-row batch of :func:`event_schema`.

    Args:
        row: Values by column name. ``kind`` and ``start`` are required; times may be timezone-aware
            datetimes (pandas Timestamps too) or integer µs since the epoch.

    Raises:
        ValueError: Unknown column, missing ``kind``/``start``, or a value that does not fit its column.
    """
    schema = event_schema()
    unknown = sorted(set(row) - set(schema.names))
    if unknown:
        raise ValueError(f"event has unknown columns {unknown}; known: {schema.names}")
    for name in ("kind", "start"):
        if row.get(name) is None:
            raise ValueError(f"event needs {name!r}")
    try:
        columns = [from_values([row.get(field.name)], field.type) for field in schema]
        return pa.RecordBatch.from_arrays(columns, schema=schema)
    except (pa.ArrowInvalid, pa.ArrowTypeError, TypeError, ValueError, OverflowError) as exc:
        raise ValueError(f"event {row!r} does not fit the event table: {exc}") from None


def sample_batch(
    schema: pa.Schema,
    utc_us: np.ndarray,
    device_us: np.ndarray,
    seq: np.ndarray,
    segment: np.ndarray,
    values: np.ndarray,
    counts: np.ndarray,
) -> pa.RecordBatch:
    """A batch of the sample table from numpy arrays, without copying the time columns.

    Args:
        schema: From :func:`sample_schema`.
        utc_us: int64 UTC in microseconds; ``device_us`` and ``seq`` int64; ``segment`` int32.
        values: float32 calibrated values, shape (rows, channels), channels in the schema's order.
        counts: uint16 raw counts, same shape.
    """
    columns = [from_numpy(utc_us, UTC_TYPE), from_numpy(device_us, pa.int64()), from_numpy(seq, pa.int64()),
               from_numpy(segment.astype(np.int32, copy=False), pa.int32())]
    for value_column, count_column in zip(values.T, counts.T, strict=True):
        columns.append(from_numpy(value_column, pa.float32()))
        columns.append(from_numpy(count_column, pa.uint16()))
    return pa.RecordBatch.from_arrays(columns, schema=schema)
