"""Per-second rollups of a run: what a summary of a day-long run reads instead of 86 million rows.

Each sealed part ``part-NNNNN.parquet`` gets ``_rollup-NNNNN.parquet`` beside it, written right after the part
is sealed (and by recovery, and by a reader that finds one missing). One row per second of data:

* ``utc``: the start of the second; ``count``: samples in it; ``covered_s``: time integrated in it;
* per channel ``<c>_min``, ``<c>_max``, ``<c>_mean``, ``<c>_m2`` (sum of squared deviations from that second's
  mean, so variances combine exactly) and ``<c>_int``, the time integral of the value (unit x seconds);
* per volts/amps pair of one rail ``<rail>_w_int``, the time integral of volts x amps (joules).

Integrals use the trapezoid rule on the samples' own timestamps; each interval between two samples belongs to
the second its first sample is in, and an interval longer than 20 sample periods and at least a second (a lost
link: :func:`gap_limit_us`) is left out, as the live counters do. The interval from a part's last sample to
the next part's first is counted in the next part, so the rollups of a run sum to exactly the full-rate
integral.
"""

from __future__ import annotations

import contextlib
import os
import re
import threading
from concurrent.futures import Future, ThreadPoolExecutor
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq

from logger.store.arrays import as_numpy, from_numpy
from logger.store.files import fsync_dir
from logger.store.layout import parts_in
from logger.store.schema import UTC_TYPE, channels_of
from logger.store.seal import temp_name

MAX_STEP_US = 1_000_000
SECOND_US = 1_000_000
STATS = ("min", "max", "mean", "m2", "int")


@dataclass(frozen=True)
class Pair:
    """A rail's volts and amps channels, by name; their product is the rail's power."""

    rail: str
    volts: str
    amps: str
    sign: float = 1.0
    """-1 for a negative rail, so the power it delivers is counted positive."""


def gap_limit_us(metadata: dict[str, Any]) -> int:
    """The longest step between samples that is integrated across: 20 sample periods, at least a second."""
    rate = (metadata.get("link") or {}).get("rate_hz")
    if not rate and metadata.get("device_header"):
        match = re.search(r"rate_hz=([0-9.]+)", str(metadata["device_header"]))
        rate = float(match.group(1)) if match else None
    return max(MAX_STEP_US, round(20e6 / rate)) if rate else MAX_STEP_US


def rollup_name(index: int) -> str:
    return f"_rollup-{index:05d}.parquet"


def pairs_of(metadata: dict[str, Any]) -> list[Pair]:
    """The power pairs a run's metadata names (``power_pairs``), or none."""
    return [Pair(p["rail"], p["volts"], p["amps"], float(p.get("sign", 1.0))) for p in metadata.get("power_pairs", [])]


def rollup_schema(channels: list[str], pairs: list[Pair]) -> pa.Schema:
    fields = [pa.field("utc", UTC_TYPE), pa.field("count", pa.int64()), pa.field("covered_s", pa.float64())]
    fields += [pa.field(f"{c}_{s}", pa.float64()) for c in channels for s in STATS]
    fields += [pa.field(f"{p.rail}_w_int", pa.float64()) for p in pairs]
    return pa.schema(fields)


def rollup_part(part: Path, pairs: list[Pair], carry: tuple[int, np.ndarray] | None = None,
                max_step_us: int = MAX_STEP_US) -> pa.Table:
    """The per-second rollup of one sealed part, streamed row group by row group. ``carry`` is the last
    sample (UTC µs, values) of the part before, whose interval to this part's first sample counts here."""
    source = pq.ParquetFile(part)
    channels = channels_of(source.schema_arrow)
    builder = _Builder(channels, pairs, carry, max_step_us)
    for batch in source.iter_batches(columns=["utc", *channels]):
        utc = as_numpy(batch.column("utc"), np.int64)
        builder.add(utc, np.vstack([as_numpy(batch.column(c), np.float32) for c in channels]).astype(np.float64))
    return builder.table()


def last_sample(part: Path) -> tuple[int, np.ndarray] | None:
    """The last row of a part as (UTC µs, values), read from its last row group only."""
    source = pq.ParquetFile(part)
    if source.metadata.num_rows == 0:
        return None
    channels = channels_of(source.schema_arrow)
    group = source.read_row_group(source.num_row_groups - 1, columns=["utc", *channels])
    row = group.slice(group.num_rows - 1)
    utc = int(as_numpy(row.column("utc").combine_chunks(), np.int64)[0])
    return utc, np.array([float(row.column(c)[0].as_py()) for c in channels])


def write_rollup(folder: Path, index: int, pairs: list[Pair], max_step_us: int = MAX_STEP_US) -> Path:
    """Write the rollup of part ``index`` (carrying the previous part's last sample), atomically."""
    parts = dict(parts_in(folder))
    before = [i for i in parts if i < index]
    carry = last_sample(parts[max(before)]) if before else None
    table = rollup_part(parts[index], pairs, carry, max_step_us)
    target = folder / rollup_name(index)
    tmp = temp_name(target)
    try:
        pq.write_table(table, tmp, compression="zstd")
        with open(tmp, "rb") as handle:
            os.fsync(handle.fileno())
        os.replace(tmp, target)
    finally:
        tmp.unlink(missing_ok=True)
    fsync_dir(folder)
    return target


class RollupQueue:
    """Writes rollups of freshly sealed parts on a thread of its own, one at a time, so the recorder goes
    straight back to the journal; a rollup that fails is left to be rebuilt when it is first read."""

    def __init__(self, folder: Path, pairs: list[Pair], max_step_us: int = MAX_STEP_US) -> None:
        self.folder = folder
        self.pairs = pairs
        self.max_step_us = max_step_us
        self._pool: ThreadPoolExecutor | None = None
        self._pending: list[Future[Path]] = []
        self._lock = threading.Lock()

    def add(self, index: int) -> None:
        with self._lock:
            if self._pool is None:
                self._pool = ThreadPoolExecutor(max_workers=1, thread_name_prefix="railtap-rollup")
            self._pending.append(self._pool.submit(write_rollup, self.folder, index, self.pairs, self.max_step_us))

    def wait(self) -> None:
        """Until every queued rollup is written (or has failed: it is derived data, rebuilt on demand)."""
        with self._lock:
            pending, self._pending = self._pending, []
        for future in pending:
            with contextlib.suppress(Exception):
                future.result()
        if self._pool is not None:
            self._pool.shutdown(wait=True)
            self._pool = None


def read_rollups(folder: Path, pairs: list[Pair], max_step_us: int = MAX_STEP_US) -> pa.Table:
    """Every part's rollup, in order; those missing (an older run, a crash between sealing a part and
    writing its rollup) or lacking a rail asked for are written first."""
    tables = []
    wanted = {f"{p.rail}_w_int" for p in pairs}
    for index, _ in parts_in(folder):
        path = folder / rollup_name(index)
        if not path.exists() or not wanted <= set(pq.read_schema(path).names):
            write_rollup(folder, index, pairs, max_step_us)
        tables.append(pq.read_table(path))
    return pa.concat_tables(tables) if tables else pa.table({})


class _Builder:
    """Streams (utc, values) batches in time order into per-second rows."""

    def __init__(self, channels: list[str], pairs: list[Pair], carry: tuple[int, np.ndarray] | None,
                 max_step_us: int = MAX_STEP_US) -> None:
        self.max_step_us = max_step_us
        self.channels = channels
        self.pairs = pairs
        self.volt_cols = np.array([channels.index(p.volts) for p in pairs], dtype=int)
        self.amp_cols = np.array([channels.index(p.amps) for p in pairs], dtype=int)
        self.pair_signs = np.array([p.sign for p in pairs])
        self.carry = carry
        self.rows: list[dict[str, np.ndarray]] = []

    def add(self, utc: np.ndarray, cols: np.ndarray) -> None:
        """Fold one batch: ``cols`` holds one row per channel (channels x samples), so every reduction runs
        along contiguous memory."""
        if len(utc) == 0:
            return
        keys = utc // SECOND_US
        starts = np.flatnonzero(np.r_[True, keys[1:] != keys[:-1]])
        counts = np.diff(np.r_[starts, len(utc)])
        mean = np.add.reduceat(cols, starts, axis=1) / counts
        dev = cols - np.repeat(mean, counts, axis=1)
        integ, cover = self._integrals(utc, cols, keys, starts)
        self.rows.append({
            "key": keys[starts], "count": counts,
            "min": np.minimum.reduceat(cols, starts, axis=1).T, "max": np.maximum.reduceat(cols, starts, axis=1).T,
            "mean": mean.T, "m2": np.add.reduceat(dev * dev, starts, axis=1).T, "int": integ.T, "covered": cover,
        })
        self.carry = (int(utc[-1]), cols[:, -1].copy())

    def _integrals(self, utc: np.ndarray, cols: np.ndarray, keys: np.ndarray,
                   starts: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Trapezoid areas of each interval, summed into the second of its left sample. The interval from
        the carried sample lands in the first second of this batch when the carry is in that same second,
        else in a row of its own second."""
        both = np.vstack([cols, self._power(cols)])
        steps = np.diff(utc)
        ok = steps <= self.max_step_us
        half_dt = np.where(ok, steps * 0.5e-6, 0.0)
        # Interval i starts at sample i, so the intervals of a second start where its samples do; a zero column
        # at the end gives the last second (whose last sample starts no interval) something to sum.
        area = np.zeros((both.shape[0], len(utc)))
        area[:, :-1] = (both[:, 1:] + both[:, :-1]) * half_dt
        integ = np.add.reduceat(area, starts, axis=1)
        cover = np.add.reduceat(np.r_[2.0 * half_dt, 0.0], starts)
        lead = self._lead(utc[0], both[:, 0])
        if lead is not None:
            key, lead_area, lead_dt = lead
            if key == keys[0]:
                integ[:, 0] += lead_area
                cover[0] += lead_dt
            else:
                self.rows.append(self._lead_row(key, lead_area, lead_dt))
        return integ, cover

    def _power(self, cols: np.ndarray) -> np.ndarray:
        """Volts x amps of each rail (rails x samples), counted positive for a negative rail."""
        return cols[self.volt_cols] * cols[self.amp_cols] * self.pair_signs[:, None]

    def _lead(self, t0: int, first: np.ndarray) -> tuple[int, np.ndarray, float] | None:
        if self.carry is None:
            return None
        t_prev, prev = self.carry
        step = t0 - t_prev
        if step <= 0 or step > self.max_step_us:
            return None
        prev_both = np.r_[prev, self._power(prev[:, None])[:, 0]]
        return t_prev // SECOND_US, (prev_both + first) / 2 * step * 1e-6, step * 1e-6

    def _lead_row(self, key: int, area: np.ndarray, dt: float) -> dict[str, np.ndarray]:
        """A row for the second that holds only the interval leading into this batch (no samples of its own)."""
        width = len(self.channels)
        nan = np.full((1, width), np.nan)
        return {"key": np.array([key]), "count": np.array([0]), "min": nan, "max": nan, "mean": nan,
                "m2": np.zeros((1, width)), "int": area[None, :], "covered": np.array([dt])}

    def table(self) -> pa.Table:
        merged = _merge(self.rows, len(self.channels))
        columns: dict[str, pa.Array] = {
            "utc": pa.array(merged["key"] * SECOND_US, type=pa.int64()).cast(UTC_TYPE),
            "count": from_numpy(merged["count"].astype(np.int64), pa.int64()),
            "covered_s": from_numpy(merged["covered"], pa.float64()),
        }
        for k, c in enumerate(self.channels):
            for stat in STATS:
                columns[f"{c}_{stat}"] = from_numpy(np.ascontiguousarray(merged[stat][:, k]), pa.float64())
        for j, p in enumerate(self.pairs):
            columns[f"{p.rail}_w_int"] = from_numpy(np.ascontiguousarray(merged["int"][:, len(self.channels) + j]),
                                                    pa.float64())
        return pa.table(columns, schema=rollup_schema(self.channels, self.pairs))


def _merge(rows: list[dict[str, np.ndarray]], width: int) -> dict[str, np.ndarray]:
    """Concatenate batch rows and combine rows of the same second (a second split across batches)."""
    if not rows:
        empty = np.zeros((0, width))
        return {"key": np.zeros(0, dtype=np.int64), "count": np.zeros(0, dtype=np.int64), "min": empty,
                "max": empty, "mean": empty, "m2": empty, "int": np.zeros((0, width)), "covered": np.zeros(0)}
    cat = {k: np.concatenate([r[k] for r in rows]) for k in rows[0]}
    order = np.argsort(cat["key"], kind="stable")
    cat = {k: v[order] for k, v in cat.items()}
    starts = np.flatnonzero(np.r_[True, cat["key"][1:] != cat["key"][:-1]])
    if len(starts) == len(cat["key"]):
        return cat
    n = cat["count"].astype(np.float64)[:, None]
    total = np.add.reduceat(n, starts, axis=0)
    mean_sum = np.add.reduceat(np.nan_to_num(cat["mean"]) * n, starts, axis=0)
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = np.where(total > 0, mean_sum / total, np.nan)
    spread = np.nan_to_num(cat["mean"] - np.repeat(mean, np.diff(np.r_[starts, len(n)]), axis=0)) ** 2 * n
    return {
        "key": cat["key"][starts], "count": np.add.reduceat(cat["count"], starts),
        "min": np.fmin.reduceat(cat["min"], starts, axis=0), "max": np.fmax.reduceat(cat["max"], starts, axis=0),
        "mean": mean, "m2": np.add.reduceat(cat["m2"] + spread, starts, axis=0),
        "int": np.add.reduceat(cat["int"], starts, axis=0), "covered": np.add.reduceat(cat["covered"], starts),
    }
