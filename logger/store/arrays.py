"""Arrow arrays built straight from numpy buffers and plain Python values.

``pyarrow.array()`` looks at its input for pandas objects and imports pandas to do so: some 40 MB of memory
and half a second of CPU in the middle of a run. A recorder that runs for a day has no use for pandas, so the
store builds its arrays from buffers: zero-copy for numpy columns, and a few lines of packing for the rare
one-row event.
"""

from __future__ import annotations

from collections.abc import Sequence
from datetime import UTC, datetime, timedelta
from typing import Any

import numpy as np
import pyarrow as pa

_EPOCH = datetime(1970, 1, 1, tzinfo=UTC)
_ONE_US = timedelta(microseconds=1)


def from_numpy(values: np.ndarray, type_: pa.DataType) -> pa.Array:
    """A fixed-width Arrow array over the same memory as ``values`` (copied only if not contiguous).

    ``values`` must already have the column's width (int64 for timestamps, float32, uint16...).
    """
    values = np.ascontiguousarray(values)
    if values.ndim != 1 or values.dtype.itemsize * 8 != type_.bit_width:
        raise ValueError(f"{values.dtype} values of shape {values.shape} do not fit an Arrow {type_} column")
    return pa.Array.from_buffers(type_, len(values), [None, pa.py_buffer(values)])


def from_values(values: Sequence[Any], type_: pa.DataType) -> pa.Array:
    """An Arrow array of strings, bytes, floats or UTC timestamps from Python values; None becomes null."""
    valid = np.array([v is not None for v in values], dtype=bool)
    bitmap = None if valid.all() else pa.py_buffer(np.packbits(valid, bitorder="little"))
    n = len(values)
    if pa.types.is_string(type_) or pa.types.is_binary(type_):
        raw = [b"" if v is None else (v.encode() if isinstance(v, str) else bytes(v)) for v in values]
        offsets = np.zeros(n + 1, dtype=np.int32)
        np.cumsum([len(r) for r in raw], out=offsets[1:])
        return pa.Array.from_buffers(type_, n, [bitmap, pa.py_buffer(offsets), pa.py_buffer(b"".join(raw))])
    if pa.types.is_timestamp(type_):
        data = np.array([0 if v is None else _micros(v) for v in values], dtype=np.int64)
    elif pa.types.is_floating(type_) or pa.types.is_integer(type_):
        data = np.array([0 if v is None else v for v in values], dtype=type_.to_pandas_dtype())
    else:
        raise TypeError(f"no builder for Arrow type {type_}")
    return pa.Array.from_buffers(type_, n, [bitmap, pa.py_buffer(data)])


def _micros(value: datetime | int) -> int:
    """Microseconds since the epoch from an aware datetime or an integer already in µs."""
    if isinstance(value, datetime):
        if value.tzinfo is None:
            raise ValueError(f"time {value} has no time zone; give UTC")
        return (value - _EPOCH) // _ONE_US
    return int(value)


def as_numpy(array: pa.Array, dtype: type[np.generic] | np.dtype) -> np.ndarray:
    """A null-free fixed-width Arrow array (timestamps included) as a read-only numpy view of its buffer."""
    if array.null_count:
        raise ValueError("column has nulls")
    itemsize = np.dtype(dtype).itemsize
    return np.frombuffer(array.buffers()[1], dtype=dtype, count=len(array), offset=array.offset * itemsize)
