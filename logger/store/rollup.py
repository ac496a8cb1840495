"""Per-second rollups of a run: what a summary of a day-long run reads instead of 86 million rows.

Each sealed part ``part-NNNNN.parquet`` gets ``_rollup-NNNNN.parquet`` beside it, written right after the part
is sealed (and by recovery, recal, and a reader that finds one missing). Its rows are the per-second figures
of :mod:`logger.core.seconds`, the same accumulator the live counters read, keyed by the second of the device
clock (``device_s``) and labelled with UTC (``utc``), with the gap rule of :mod:`logger.core.gaps`. The
interval from a part's last sample to the next part's first is counted in the next part, so the rollups of a
run sum to exactly the full-rate integral.
"""

from __future__ import annotations

import os
from collections.abc import Callable
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq

from logger.core.gaps import GAP_S
from logger.core.seconds import STATS, Carry, Pair, Seconds
from logger.store.arrays import as_numpy, from_numpy
from logger.store.check import damaged_part, open_part
from logger.store.files import StoreError, fsync_dir
from logger.store.layout import part_name, parts_in
from logger.store.schema import UTC_TYPE, channels_of
from logger.store.seal import temp_name

SEGMENT = "segment"


def gap_us(metadata: dict[str, Any]) -> int:
    """The gap rule's limit a run was recorded with (``gap_s`` in ``_run.json``), in µs."""
    gap = metadata.get("gap_s")
    return round((gap if isinstance(gap, int | float) and gap > 0 else GAP_S) * 1e6)


def rollup_name(index: int) -> str:
    return f"_rollup-{index:05d}.parquet"


def pairs_of(metadata: dict[str, Any]) -> list[Pair]:
    """The power pairs a run's metadata names (``power_pairs``), or none."""
    return [Pair(p["rail"], p["volts"], p["amps"], float(p.get("sign", 1.0))) for p in metadata.get("power_pairs", [])]


def rollup_schema(channels: list[str], pairs: list[Pair]) -> pa.Schema:
    fields = [pa.field("utc", UTC_TYPE), pa.field("device_s", pa.int64()), pa.field("count", pa.int64()),
              pa.field("covered_s", pa.float64()), pa.field("t_m2", pa.float64())]
    fields += [pa.field(f"{c}_{s}", pa.float64()) for c in channels for s in STATS]
    fields += [pa.field(f"{p.rail}_w_int", pa.float64()) for p in pairs]
    return pa.schema(fields)


FEED_ROWS = 16_384
"""Rows read at a time when a part is folded into seconds: the decoded batch and its float64 copy stay a few
megabytes (measured on a 30 min, four-channel part: 13 MB less resident than 64 k-row batches)."""


def feed_part(seconds: Seconds, part: Path) -> None:
    """Fold every sample of a sealed part into ``seconds``, row group by row group.

    Raises:
        StoreError: the part cannot be read to its end (a damaged page), naming it.
    """
    try:
        _feed(seconds, part)
    except (OSError, pa.ArrowException) as exc:
        raise StoreError(damaged_part(part, exc)) from None


def _feed(seconds: Seconds, part: Path) -> None:
    source = open_part(part)
    channels = channels_of(source.schema_arrow)
    has_segment = SEGMENT in source.schema_arrow.names
    columns = ["utc", "device_us", "seq", *([SEGMENT] if has_segment else []), *channels]
    for batch in source.iter_batches(batch_size=FEED_ROWS, columns=columns, use_threads=False):
        t = as_numpy(batch.column("device_us"), np.int64)
        segment = as_numpy(batch.column(SEGMENT), np.int32) if has_segment else np.zeros(len(t), dtype=np.int32)
        seconds.add(t, as_numpy(batch.column("seq"), np.int64), segment, as_numpy(batch.column("utc"), np.int64),
                    np.vstack([as_numpy(batch.column(c), np.float32) for c in channels]).astype(np.float64))


def rollup_part(part: Path, pairs: list[Pair], carry: Carry | None = None, gap: int = round(GAP_S * 1e6)
                ) -> pa.Table:
    """The per-second rollup of one sealed part. ``carry`` is the last sample of the part before, whose
    interval to this part's first sample counts here."""
    try:
        channels = channels_of(pq.read_schema(part))
    except (OSError, pa.ArrowException) as exc:
        raise StoreError(damaged_part(part, exc)) from None
    seconds = Seconds(channels, pairs, gap, carry)
    feed_part(seconds, part)
    return rollup_table(seconds)


def rollup_table(seconds: Seconds) -> pa.Table:
    """The rows of ``seconds`` as a rollup table."""
    merged = seconds.merged()
    width = len(seconds.channels)
    columns: dict[str, pa.Array] = {
        "utc": from_numpy(merged["utc"].astype(np.int64), UTC_TYPE),
        "device_s": from_numpy(merged["key"].astype(np.int64), pa.int64()),
        "count": from_numpy(merged["count"].astype(np.int64), pa.int64()),
        "covered_s": from_numpy(merged["covered"], pa.float64()),
        "t_m2": from_numpy(np.ascontiguousarray(merged["t_m2"]), pa.float64()),
    }
    for k, c in enumerate(seconds.channels):
        for stat in STATS:
            columns[f"{c}_{stat}"] = from_numpy(np.ascontiguousarray(merged[stat][:, k]), pa.float64())
    for j, p in enumerate(seconds.pairs):
        columns[f"{p.rail}_w_int"] = from_numpy(np.ascontiguousarray(merged["int"][:, width + j]), pa.float64())
    return pa.table(columns, schema=rollup_schema(seconds.channels, seconds.pairs))


def last_sample(part: Path) -> Carry | None:
    """The last row of a part, read from its last row group only."""
    source = open_part(part)
    if source.metadata.num_rows == 0:
        return None
    channels = channels_of(source.schema_arrow)
    has_segment = SEGMENT in source.schema_arrow.names
    columns = ["utc", "device_us", "seq", *([SEGMENT] if has_segment else []), *channels]
    group = source.read_row_group(source.num_row_groups - 1, columns=columns)
    row = group.slice(group.num_rows - 1).to_pylist()[0]
    utc = row["utc"]
    utc_us = int(pa.scalar(utc, type=UTC_TYPE).cast(pa.int64()).as_py()) if utc is not None else 0
    return Carry(int(row["device_us"]), int(row["seq"]), int(row.get(SEGMENT) or 0), utc_us,
                 np.array([float(np.float32(row[c])) for c in channels]))


def write_rollup(folder: Path, index: int, pairs: list[Pair], gap: int = round(GAP_S * 1e6)) -> Path:
    """Write the rollup of part ``index`` (carrying the previous part's last sample), atomically."""
    parts = dict(parts_in(folder))
    before = [i for i in parts if i < index]
    table = rollup_part(parts[index], pairs, _carry(parts[max(before)]) if before else None, gap)
    target = folder / rollup_name(index)
    tmp = temp_name(target)
    try:
        pq.write_table(table, tmp, compression="zstd")
        with open(tmp, "rb") as handle:
            os.fsync(handle.fileno())
        os.replace(tmp, target)
    finally:
        tmp.unlink(missing_ok=True)
        del table
        pa.default_memory_pool().release_unused()  # the part's decoded pages: back to the system, not kept
    fsync_dir(folder)
    return target


@dataclass(frozen=True)
class Rollups:
    """A run's per-second rows, and the parts left out of them because they cannot be read."""

    table: pa.Table
    skipped: tuple[str, ...] = ()
    """One line per part left out, naming it and what is wrong with it."""


def read_rollups(folder: Path, pairs: list[Pair], gap: int = round(GAP_S * 1e6), *, full: bool = False,
                 progress: Callable[[int, int], None] | None = None) -> Rollups:
    """Every part's per-second rows, in order: from its rollup file, or (``full``) from every sample again.

    A rollup that is missing (an older run, a crash between sealing a part and writing its rollup), of an older
    layout or lacking a rail asked for is written first. A part that cannot be read is left out and named in
    ``skipped``; the interval across it is not counted. The full scan runs its parts on every core: parts are
    independent once each is given the last sample of the one before (read from its last row group)."""
    parts = parts_in(folder)
    if full:
        jobs = [(part, _carry(parts[n - 1][1]) if n else None) for n, (_, part) in enumerate(parts)]
        with ThreadPoolExecutor(max_workers=os.cpu_count() or 1) as pool:
            futures = [pool.submit(rollup_part, part, pairs, carry, gap) for part, carry in jobs]
            results = [_outcome(part, future.result, progress, n, len(parts))
                       for n, ((_, part), future) in enumerate(zip(parts, futures, strict=True), 1)]
    else:
        wanted = {"device_s", "t_m2", *(f"{p.rail}_w_int" for p in pairs)}
        results = [_outcome(part, lambda i=index: _rollup_of(folder, i, pairs, gap, wanted), progress, n,
                            len(parts)) for n, (index, part) in enumerate(parts, 1)]
    tables = [r for r in results if isinstance(r, pa.Table)]
    return Rollups(pa.concat_tables(tables) if tables else pa.table({}),
                   tuple(r for r in results if isinstance(r, str)))


def _rollup_of(folder: Path, index: int, pairs: list[Pair], gap: int, wanted: set[str]) -> pa.Table:
    """A part's rollup; only while the part itself still opens (its samples are what the rollup vouches for)."""
    pq.read_metadata(folder / part_name(index))
    path = folder / rollup_name(index)
    if not _usable(path, wanted):
        write_rollup(folder, index, pairs, gap)
    return pq.read_table(path)


def _outcome(part: Path, read: Callable[[], pa.Table], progress: Callable[[int, int], None] | None, n: int,
             of: int) -> pa.Table | str:
    """A part's rows, or the one line that says why it cannot be read."""
    try:
        table = read()
    except StoreError as exc:
        return str(exc)
    except (OSError, pa.ArrowException) as exc:
        return damaged_part(part, exc)
    finally:
        if progress is not None:
            progress(n, of)
    return table


def _carry(part: Path) -> Carry | None:
    """The last sample of the part before, or none when that part cannot be read (the interval across a damaged
    part is not counted)."""
    try:
        return last_sample(part)
    except (OSError, pa.ArrowException):
        return None


def _usable(path: Path, wanted: set[str]) -> bool:
    """A rollup that exists, opens, and has the columns asked for (else it is written again: derived data)."""
    try:
        return path.exists() and wanted <= set(pq.read_schema(path).names)
    except (OSError, pa.ArrowException):
        return False
