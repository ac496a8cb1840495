"""Sample batches as text for export: CSV rows and JSON lines, built column by column, never row by row.

The text is Arrow's own: each value goes through Arrow's cast to text (a float32 as the shortest text that reads
back as the same float32), once per distinct value in a batch, and the CSV is written by Arrow's CSV writer. The
time column is made another way, because Arrow's text for a timestamp costs about a microsecond a row (each
value goes through a calendar and a time zone), several times what the rest of a row costs. At 1 kHz a thousand
rows share each second, so Arrow formats each second once and numpy writes the six digits of the microseconds
into a copy of it: the same bytes, a small part of the work. A batch whose seconds do not all read as text of
one width ending in ``.000000Z`` (a year past 9999, a unit other than microseconds) is formatted by Arrow whole
instead.
"""

from __future__ import annotations

import io
import json
from collections.abc import Callable

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.csv as pacsv

from logger.store.arrays import as_numpy, from_numpy

JSON_TIME = "%Y-%m-%dT%H:%M:%SZ"
"""``strftime`` format of a JSON line's time; Arrow's ``%S`` carries the microseconds (``10.100000``)."""
WHOLE_SECOND_TAIL = b".000000Z"
"""How a whole second's text ends, in both formats: the six zeros are where the microseconds go."""
US_PER_S = 1_000_000
TEXT = pa.string()

Formatter = Callable[[pa.Array], pa.Array]


def csv_time(utc: pa.Array) -> pa.Array:
    """Arrow's CSV text of each time (``2027-01-15 08:00:10.100000Z``)."""
    return stamp_text(utc, lambda t: pc.cast(t, pa.string()))


def json_time(utc: pa.Array) -> pa.Array:
    """The ISO 8601 text a JSON line carries (``2027-01-15T08:00:10.100000Z``)."""
    return stamp_text(utc, lambda t: pc.strftime(t, format=JSON_TIME))


def stamp_text(utc: pa.Array, whole: Formatter) -> pa.Array:
    """Text of each timestamp as ``whole`` writes it, calling ``whole`` once per distinct second.

    Args:
        utc: Timestamps in microseconds, no nulls (a run's ``utc`` column).
        whole: Arrow's formatter for the time column (a cast or a ``strftime``).

    Returns:
        A string array equal to ``whole(utc)``.
    """
    if utc.type.unit != "us" or utc.null_count or len(utc) == 0:
        return whole(utc)
    us = as_numpy(utc, np.int64)
    seconds, micros = np.divmod(us, US_PER_S)  # floor: times before 1970 keep a fraction in 0..999999
    starts = np.flatnonzero(np.r_[True, seconds[1:] != seconds[:-1]])
    heads = _fixed_width(whole(from_numpy(seconds[starts] * US_PER_S, utc.type)))
    if heads is None:
        return whole(utc)
    rows = np.repeat(heads, np.diff(np.r_[starts, len(us)]), axis=0)
    _write_digits(rows, heads.shape[1] - len(WHOLE_SECOND_TAIL) + 1, micros)
    width = rows.shape[1]
    offsets = np.arange(0, width * (len(us) + 1), width, dtype=np.int64)
    return pa.LargeStringArray.from_buffers(len(us), pa.py_buffer(offsets), pa.py_buffer(rows))


def _fixed_width(texts: pa.Array) -> np.ndarray | None:
    """The texts as rows of one byte matrix, or None unless all have one width and end in ``.000000Z``."""
    offsets = _offsets(texts)
    widths = np.diff(offsets)
    if widths.min() != widths.max() or widths[0] < len(WHOLE_SECOND_TAIL):
        return None
    data = np.frombuffer(texts.buffers()[2], np.uint8)[offsets[0]: offsets[-1]]
    heads = data.reshape(len(texts), int(widths[0]))
    tail = np.frombuffer(WHOLE_SECOND_TAIL, np.uint8)
    return heads if (heads[:, -len(tail):] == tail).all() else None


def _write_digits(rows: np.ndarray, first: int, micros: np.ndarray) -> None:
    """Write ``micros`` (0..999999) as six decimal digits into columns ``first``..``first + 5`` of ``rows``."""
    rest = micros.astype(np.int32)
    for column in range(first + 5, first - 1, -1):
        rest, digit = np.divmod(rest, 10)
        rows[:, column] = digit + ord("0")


def value_text(values: pa.Array, text: pa.DataType = TEXT) -> pa.Array:
    """Arrow's text of each value, each distinct value formatted once and its text copied to its rows.

    A channel's values come from its converter's counts, so a batch of 65 k rows holds a few hundred distinct
    values: formatting those and copying their text costs a fraction of formatting every row. A batch with
    many distinct values (more than a quarter of its rows) is formatted row by row, where the copy would cost
    more than it saves."""
    levels = pc.dictionary_encode(values)
    if len(levels.dictionary) > len(values) // 4:
        return pc.cast(values, text)
    return pc.take(pc.cast(levels.dictionary, text), levels.indices)


def csv_header(schema: pa.Schema) -> bytes:
    """The header line Arrow's CSV writer puts above these columns (each name quoted).

    Written from a batch of null columns: ``Schema.empty_table`` would import pandas (some 40 MB) for nothing."""
    sink = io.BytesIO()
    pacsv.write_csv(pa.RecordBatch.from_arrays([pa.nulls(0, f.type) for f in schema], schema=schema), sink)
    return sink.getvalue()


def csv_rows(batch: pa.RecordBatch) -> pa.Buffer:
    """The batch's rows as CSV, as Arrow's CSV writer writes them, without the header.

    Arrow quotes text columns; the time column, now text, is left unquoted as Arrow leaves a timestamp (it holds
    no comma, quote or line break, so no reader needs the quotes: RFC 4180 section 2, rule 6)."""
    columns = [csv_time(c) if name == "utc" else value_text(c)
               for name, c in zip(batch.schema.names, batch.columns, strict=True)]
    sink = pa.BufferOutputStream()
    options = pacsv.WriteOptions(include_header=False, quoting_style="none", batch_size=max(batch.num_rows, 1))
    pacsv.write_csv(pa.record_batch(columns, names=batch.schema.names), sink, write_options=options)
    return sink.getvalue()


def json_rows(batch: pa.RecordBatch) -> pa.Buffer:
    """One JSON object per row, each on its own line: ``{"utc": "<ISO 8601>", "<channel>": <number>, ...}``.

    Numbers are Arrow's text of each value, as in the CSV; the whole is joined element-wise by Arrow."""
    text = pa.large_string()  # one string type throughout: the join has no kernel for a mix
    pieces: list[pa.Array | pa.Scalar] = [_literal('{"utc": "'), json_time(batch.column("utc")).cast(text)]
    glue = '", '
    for name in batch.schema.names:
        if name != "utc":
            pieces += [_literal(f"{glue}{json.dumps(name)}: "), value_text(batch.column(name), text)]
            glue = ", "
    pieces += [_literal("}\n" if glue == ", " else '"}\n'), _literal("")]
    lines = pc.binary_join_element_wise(*pieces)
    return _string_bytes(lines)


def _literal(text: str) -> pa.Scalar:
    """A large-string scalar built from buffers (``pyarrow.scalar`` would import pandas to look at ``text``)."""
    data = text.encode()
    offsets = np.array([0, len(data)], np.int64)
    return pa.LargeStringArray.from_buffers(1, pa.py_buffer(offsets), pa.py_buffer(data))[0]


def _string_bytes(texts: pa.Array) -> pa.Buffer:
    """The characters of a string array end to end (its data buffer, cut to the rows it holds)."""
    offsets = _offsets(texts)
    first, last = int(offsets[0]), int(offsets[-1])
    return texts.buffers()[2].slice(first, last - first)


def _offsets(texts: pa.Array) -> np.ndarray:
    """Where each text of a string array starts in its data buffer, and where the last one ends."""
    kind = np.int64 if pa.types.is_large_string(texts.type) else np.int32
    return np.frombuffer(texts.buffers()[1], kind)[texts.offset: texts.offset + len(texts) + 1]
