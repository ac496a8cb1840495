"""A sealed run's samples through the processing core again: for recal, and for recovery's events.

The run keeps what the live pass used: the rig as written, the device header, each channel's calibration at
the start and every zero or profile applied while running (with the device time it took effect from), the
gap rule's limit, and every sample's raw counts on the device clock. Given those, the core computes the same
values, events and per-second figures offline as it did live; a recal swaps in new profiles from the start.
"""

from __future__ import annotations

import os
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq

from logger.cal.apply import Calibrator
from logger.cal.profile import Profile, profile_from_dict
from logger.core import Block, Change, Processor
from logger.events.model import Event
from logger.rig import Rig, RigError, parse_rig
from logger.store.arrays import as_numpy
from logger.store.check import open_part
from logger.store.episodes import link_episodes
from logger.store.files import StoreError, read_run_json, write_json_atomic
from logger.store.layout import EVENTS_PARQUET, parts_in
from logger.store.rollup import SEGMENT, gap_us
from logger.store.schema import channels_of, event_schema
from logger.store.seal import event_parquet_options, row_group_rows
from logger.wire import DeviceHeader

DETECTED = ("brownout", "dropout", "overvoltage", "overcurrent", "flicker", "outside_cal")
"""Event kinds made from the values, so made again; the others (link faults, marks) are kept."""


def run_processor(meta: dict[str, Any], names: list[str], profiles: list[Profile] = ()) -> Processor:
    """A processing core set up as the run's live one was, with ``profiles`` replacing its channels'
    calibration from the start (a profile applied live to such a channel is replaced too; zeros still apply).

    Raises:
        StoreError: the rig or header kept in ``_run.json`` cannot be read, or the channels disagree.
    """
    rig = _rig(meta, names)
    try:
        header = DeviceHeader.parse(meta["device_header"])
        calibrator = Calibrator(rig, header)
        for name, entry in (meta.get("calibration") or {}).items():
            if isinstance(entry, dict) and entry.get("profile") and name in names:
                calibrator.use(names.index(name), profile_from_dict(entry["profile"]))
        for profile in profiles:
            calibrator.use(names.index(profile.channel), profile)
    except (KeyError, ValueError, RigError) as exc:
        raise StoreError(f"the run's _run.json cannot say how it was calibrated ({exc}); "
                         "cannot process it again") from None
    replaced = {p.channel for p in profiles}
    kept = [Change.from_dict(c) for c in meta.get("calibration_changes", [])
            if isinstance(c, dict) and not (c.get("change") == "profile" and c.get("channel") in replaced)]
    changes = [c for c in kept if c is not None]
    return Processor(rig, calibrator, gap_s=gap_us(meta) / 1e6, changes=changes)


def _rig(meta: dict[str, Any], names: list[str]) -> Rig:
    try:
        text = meta.get("rig")
        if not isinstance(text, str):
            raise RigError("the rig kept in _run.json is not the rig file's text")
        rig = parse_rig(text, "the rig kept in _run.json", profiles=False)
    except RigError as exc:
        raise StoreError(f"{exc}; cannot process the run again") from None
    if [ch.name for ch in rig.channels] != names:
        raise StoreError(f"the rig kept in _run.json names channels {[ch.name for ch in rig.channels]}, the parts "
                         f"{names}; cannot process the run again")
    return rig


def blocks(part: Path, names: list[str]) -> Iterator[tuple[pa.RecordBatch, Block]]:
    """Each row group of a part as a core block (counts in the rig's order), with the batch it came from."""
    source = open_part(part)
    has_segment = SEGMENT in source.schema_arrow.names
    for batch in source.iter_batches(batch_size=row_group_rows(source.schema_arrow)):
        t = as_numpy(batch.column("device_us"), np.int64)
        segment = as_numpy(batch.column(SEGMENT), np.int32) if has_segment else np.zeros(len(t), dtype=np.int32)
        counts = np.column_stack([as_numpy(batch.column(f"{n}_counts"), np.uint16) for n in names])
        yield batch, Block(t, as_numpy(batch.column("utc"), np.int64), as_numpy(batch.column("seq"), np.int64),
                           segment, counts)


def sealed_parts(folder: Path) -> tuple[list[Path], list[str]]:
    """The run's parts and channel names, or a StoreError saying there is nothing to process."""
    parts = [path for _, path in parts_in(folder)]
    if not parts:
        raise StoreError(f"{folder}: no sealed parts; if the run was cut short, run `railtap recover {folder}`")
    return parts, channels_of(pq.read_schema(parts[0]))


def detect_again(folder: Path) -> int:
    """Detect the rail events of a sealed run again from its samples, keeping link events and marks; returns
    how many events the run has now. After a crash, the events still going on were never written, and
    recovery calls this so the run's event table is whole."""
    meta = read_run_json(folder)
    if not meta.get("rig"):  # written by something other than a recording (tests of the store): no rules
        return int(meta.get("events") or 0)
    parts, names = sealed_parts(folder)
    core = run_processor(meta, names)
    detected: list[Event] = []
    for part in parts:
        for _, block in blocks(part, names):
            detected += core.feed(block).events
    temp = write_events(folder, detected + core.finish())
    os.replace(temp, folder / EVENTS_PARQUET)
    link_episodes(folder / EVENTS_PARQUET)
    meta["events"] = pq.ParquetFile(folder / EVENTS_PARQUET).metadata.num_rows
    write_json_atomic(folder / "_run.json", meta)
    return meta["events"]


def write_events(folder: Path, detected: list[Event]) -> Path:
    """The kept events (link faults, marks) and the detected ones, in time order, numbered afresh, under a
    temporary name beside the event table; returns it."""
    kept: list[dict[str, Any]] = []
    if (folder / EVENTS_PARQUET).exists():
        kept = [row for row in pq.read_table(folder / EVENTS_PARQUET).to_pylist() if row["kind"] not in DETECTED]
    rows = kept + [e.row() for e in detected if e.kind in DETECTED]
    rows.sort(key=lambda r: (r["start"], r["kind"]))
    for n, row in enumerate(rows, start=1):
        row["id"], row["episode"] = n, None
    schema = event_schema()
    table = pa.Table.from_pylist(rows, schema=schema)
    temp = folder / "_recal-events.parquet"
    pq.write_table(table, temp, **event_parquet_options(schema))
    with open(temp, "rb") as handle:
        os.fsync(handle.fileno())
    return temp
