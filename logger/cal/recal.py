"""Calibrate a finished run again from its raw counts: new value columns, events detected again.

Every run keeps each channel's raw counts beside its calibrated values, so a profile made after the test
(or a corrected one) can be applied to it. The value columns of every part are rewritten from the counts;
brownouts, dropouts and the other rail events are detected again on the new values (link events and marks
are kept as they were); the per-second rollups are written again; ``_run.json`` records the new calibration
and keeps the one it replaces under ``calibration_history``.

Safety: new parts and the new event table are written under temporary names first; the originals are
replaced only once all are complete. A crash in the short replacing step can leave some parts new and some
old, which ``_run.json`` then says (``recalibrating``); running the same recal again finishes it, since the
values come from the counts either way.
"""

from __future__ import annotations

import os
from collections.abc import Callable
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq

from logger.cal.profile import Profile, profile_from_dict
from logger.events import EventDetector
from logger.events.model import Event
from logger.events.outside import OutsideWatch
from logger.rig import RigError, parse_rig
from logger.store.episodes import link_episodes
from logger.store.files import RunLock, StoreError, fsync_dir, read_run_json, to_json, write_json_atomic
from logger.store.layout import parts_in
from logger.store.meta import start_part
from logger.store.rollup import gap_limit_us, pairs_of, write_rollup
from logger.store.schema import channels_of, event_schema
from logger.store.seal import RUN_KEY, event_parquet_options, row_group_rows, sample_parquet_options
from logger.wire import DeviceHeader

DETECTED = ("brownout", "dropout", "overvoltage", "overcurrent", "flicker", "outside_cal")
"""Event kinds made from the values, so made again; the others (link faults, marks) are kept."""
EVENTS = "_events.parquet"


def recalibrate(folder: Path, profiles: list[Profile], progress: Callable[[str], None] = lambda s: None) -> dict:
    """Apply ``profiles`` (one per channel) to the run in ``folder``; returns the new ``_run.json``.

    Raises:
        StoreError: the folder is not a finished run, is in use, or cannot be written; or a profile names a
            channel the run does not have.
    """
    meta = read_run_json(folder)
    if meta.get("status") not in ("complete", "recovered"):
        raise StoreError(f"{folder}: the run is {meta.get('status', 'unfinished')}; seal it first with "
                         f"`railtap recover {folder}`")
    lock = RunLock(folder)
    lock.acquire("recalibrating")
    temps: list[Path] = []
    try:
        parts = [path for _, path in parts_in(folder)]
        names = _channels(folder, parts, profiles)
        new_meta = _updated_metadata(meta, profiles)
        detect = _Detection(meta, names, profiles)
        for n, part in enumerate(parts, start=1):
            progress(f"part {n} of {len(parts)}: {part.name}")
            temps.append(_rewrite_part(part, profiles, names, start_part(new_meta), detect))
        temps.append(_write_events(folder, detect.finish()))
        write_json_atomic(folder / "_run.json", {**meta, "recalibrating": new_meta["calibration"]})
        for temp, target in zip(temps, [*parts, folder / EVENTS], strict=True):
            os.replace(temp, target)
        fsync_dir(folder)
        for index, _ in parts_in(folder):  # the per-second rollups follow the new values
            write_rollup(folder, index, pairs_of(meta), gap_limit_us(meta))
        link_episodes(folder / EVENTS)
        new_meta["events"] = pq.ParquetFile(folder / EVENTS).metadata.num_rows
        write_json_atomic(folder / "_run.json", new_meta)
        return new_meta
    except OSError as exc:
        raise StoreError(f"{folder}: cannot recalibrate ({exc.strerror or exc}); the run is as it was") from None
    finally:
        for temp in temps:
            temp.unlink(missing_ok=True)
        lock.release()


def detect_again(folder: Path) -> int:
    """Detect the rail events of a sealed run again from its samples, keeping link events and marks; returns
    how many events the run has now. After a crash, the events still going on were never written, and
    recovery calls this so the run's event table is whole."""
    meta = read_run_json(folder)
    parts = [path for _, path in parts_in(folder)]
    profiles = [profile_from_dict(entry["profile"]) for entry in meta.get("calibration", {}).values()
                if isinstance(entry, dict) and entry.get("profile")]
    names = _channels(folder, parts, profiles)
    detect = _Detection(meta, names, profiles)
    for part in parts:
        for batch in pq.ParquetFile(part).iter_batches(columns=["utc", *names, *(f"{n}_counts" for n in names)]):
            values = np.column_stack([batch.column(n).to_numpy() for n in names]).astype(np.float64)
            counts = np.column_stack([batch.column(f"{n}_counts").to_numpy() for n in names]).astype(np.float64)
            detect.feed(batch.column("utc").cast(pa.int64()).to_numpy(), values, counts)
    os.replace(_write_events(folder, detect.finish()), folder / EVENTS)
    link_episodes(folder / EVENTS)
    meta["events"] = pq.ParquetFile(folder / EVENTS).metadata.num_rows
    write_json_atomic(folder / "_run.json", meta)
    return meta["events"]


def _channels(folder: Path, parts: list[Path], profiles: list[Profile]) -> list[str]:
    if not parts:
        raise StoreError(f"{folder}: no sealed parts to recalibrate")
    names = channels_of(pq.read_schema(parts[0]))
    for profile in profiles:
        if profile.channel not in names:
            raise StoreError(f"{folder}: the run has no channel {profile.channel!r} (it has {', '.join(names)})")
    return names


def _updated_metadata(meta: dict[str, Any], profiles: list[Profile]) -> dict[str, Any]:
    now = datetime.now(UTC).isoformat(timespec="seconds")
    calibration = dict(meta.get("calibration", {}))
    history = list(meta.get("calibration_history", []))
    for profile in profiles:
        history.append({"channel": profile.channel, "replaced": now, "was": calibration.get(profile.channel)})
        calibration[profile.channel] = {"profile": profile.to_dict(), "applied": now, "by": "railtap recal"}
    new = {k: v for k, v in meta.items() if k != "recalibrating"}
    return {**new, "calibration": calibration, "calibration_history": history}


class _Detection:
    """The rail detectors of the run's own rig, run again over the new values."""

    def __init__(self, meta: dict[str, Any], names: list[str], profiles: list[Profile]) -> None:
        try:
            self.rig = parse_rig(meta.get("rig") or "", "the rig kept in _run.json", profiles=False)
        except RigError as exc:
            raise StoreError(f"{exc}; cannot detect events again") from None
        rate = DeviceHeader.parse(meta["device_header"]).rate_hz if meta.get("device_header") else 1000.0
        self.detector = EventDetector(self.rig, rate)
        spans = {names.index(p.channel): tuple(sorted(map(float, p.value(list(p.span_counts))))) for p in profiles}
        self.outside = OutsideWatch(tuple(names), spans, tuple(ch.unit for ch in self.rig.channels))
        self.spans_counts = {names.index(p.channel): p.span_counts for p in profiles}
        self.events: list[Event] = []

    def feed(self, utc: np.ndarray, values: np.ndarray, counts: np.ndarray) -> None:
        self.events += self.detector.feed(utc, values)
        out = np.zeros(values.shape, dtype=bool)
        for k, (lo, hi) in self.spans_counts.items():
            out[:, k] = (counts[:, k] < lo) | (counts[:, k] > hi)
        self.events += self.outside.feed(utc, out, values)

    def finish(self) -> list[Event]:
        return self.events + self.detector.finish() + self.outside.finish()


def _rewrite_part(part: Path, profiles: list[Profile], names: list[str], run_meta: dict[str, Any],
                  detect: _Detection) -> Path:
    """The part with new value columns, under a temporary name beside it; streamed by row group."""
    source = pq.ParquetFile(part)
    schema = source.schema_arrow
    kv = dict(schema.metadata or {})
    kv[RUN_KEY.encode()] = to_json(run_meta).encode()
    schema = schema.with_metadata(kv)
    temp = part.with_name(f"_recal-{part.name}")
    by_name = {p.channel: p for p in profiles}
    with pq.ParquetWriter(temp, schema, **sample_parquet_options(schema)) as writer:
        for batch in source.iter_batches(batch_size=row_group_rows(schema)):
            columns = {name: batch.column(name) for name in batch.schema.names}
            counts = np.column_stack([columns[f"{n}_counts"].to_numpy() for n in names]).astype(np.float64)
            for name, profile in by_name.items():
                new = profile.value(counts[:, names.index(name)]).astype(np.float32)
                columns[name] = pa.array(new, type=schema.field(name).type)
            values = np.column_stack([columns[n].to_numpy(zero_copy_only=False) for n in names])
            utc = batch.column("utc").cast(pa.int64()).to_numpy()
            detect.feed(utc, values.astype(np.float64), counts)
            writer.write_batch(pa.RecordBatch.from_arrays([columns[n] for n in schema.names], schema=schema))
    _fsync(temp)
    return temp


def _write_events(folder: Path, detected: list[Event]) -> Path:
    """The kept events (link faults, marks) and the ones detected again, in time order, numbered afresh."""
    kept: list[dict[str, Any]] = []
    if (folder / EVENTS).exists():
        kept = [row for row in pq.read_table(folder / EVENTS).to_pylist() if row["kind"] not in DETECTED]
    rows = kept + [e.row() for e in detected]
    rows.sort(key=lambda r: (r["start"], r["kind"]))
    for n, row in enumerate(rows, start=1):
        row["id"], row["episode"] = n, None
    schema = event_schema()
    table = pa.Table.from_pylist(rows, schema=schema)
    temp = folder / "_recal-events.parquet"
    pq.write_table(table, temp, **event_parquet_options(schema))
    _fsync(temp)
    return temp


def _fsync(path: Path) -> None:
    with open(path, "rb") as f:
        os.fsync(f.fileno())
