"""Calibrate a finished run again from its raw counts: new value columns, events detected again.

Every run keeps each channel's raw counts beside its calibrated values, so a profile made after the test
(or a corrected one) can be applied to it. The run goes through the same processing core as it did live
(:mod:`logger.store.reprocess`), with the new profiles from the start: the value columns of every part are
rewritten from the counts, zeros applied while running still apply, brownouts, dropouts and the other rail
events are detected again (link events and marks are kept as they were), the per-second rollups are written
again, and ``_run.json`` records the new calibration and keeps the one it replaces under
``calibration_history``. Recal with the profile a run already had gives back the same run.

All or nothing: new parts and the new event table are written under temporary names (``_recal-*``) first. Once
all are whole and on disk, ``_run.json`` takes the new metadata under ``recalibrating``, and only then are the
originals replaced. A crash before that point leaves the old calibration, and recovery clears the leftovers; a
crash after it is finished by ``railtap recover`` (:func:`finish_recal`).
"""

from __future__ import annotations

import os
from collections.abc import Callable
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

import pyarrow as pa
import pyarrow.parquet as pq

from logger.cal.profile import Profile
from logger.core import Processor
from logger.events.model import Event
from logger.store.check import check_readable
from logger.store.episodes import link_episodes
from logger.store.files import RunLock, StoreError, fsync_dir, one_line, read_run_json, to_json, write_json_atomic
from logger.store.layout import EVENTS_PARQUET, parts_in
from logger.store.meta import start_part
from logger.store.reprocess import blocks, run_processor, sealed_parts, write_events
from logger.store.rollup import gap_us, pairs_of, write_rollup
from logger.store.seal import RUN_KEY, sample_parquet_options

EVENTS = EVENTS_PARQUET
RECALIBRATING = "recalibrating"
"""Key of ``_run.json`` that holds a recalibration's new metadata while its files are being put in place."""
TEMP_PREFIX = "_recal-"


def recalibrate(folder: Path, profiles: list[Profile], progress: Callable[[str], None] = lambda s: None) -> dict:
    """Apply ``profiles`` (one per channel) to the run in ``folder``; returns the new ``_run.json``.

    Raises:
        StoreError: the folder is not a finished run, is in use, or cannot be written; or a profile names a
            channel the run does not have.
    """
    check_readable(folder)  # every part and the event table open, before anything is written
    meta = read_run_json(folder)
    if meta.get("status") not in ("complete", "recovered"):
        raise StoreError(f"{folder}: the run is {meta.get('status', 'unfinished')}; seal it first with "
                         f"`railtap recover {folder}`")
    lock = RunLock(folder)
    lock.acquire("recalibrating")
    temps: list[Path] = []
    where: Path = folder
    try:
        parts, names = sealed_parts(folder)
        for profile in profiles:
            if profile.channel not in names:
                raise StoreError(f"{folder}: the run has no channel {profile.channel!r} (it has {', '.join(names)})")
        new_meta = _updated_metadata(meta, profiles)
        core = run_processor(meta, names, profiles)
        detected: list[Event] = []
        for n, part in enumerate(parts, start=1):
            progress(f"part {n} of {len(parts)}: {part.name}")
            where = part
            temp, events = _rewrite_part(part, names, start_part(new_meta), core)
            temps.append(temp)
            detected += events
        where = folder
        temps.append(write_events(folder, detected + core.finish()))
        fsync_dir(folder)
    except (OSError, pa.ArrowException) as exc:
        for temp in [*temps, *recal_leftovers(folder)]:
            temp.unlink(missing_ok=True)
        lock.release()
        what = exc.strerror if isinstance(exc, OSError) and exc.strerror else one_line(str(exc))
        raise StoreError(f"{where}: cannot recalibrate ({what}); the run is as it was") from None
    except BaseException:
        for temp in [*temps, *recal_leftovers(folder)]:
            temp.unlink(missing_ok=True)
        lock.release()
        raise
    try:
        # The point of no return: every new file is whole and on disk, and _run.json says so. From here a crash
        # is finished by `railtap recover` (or this same command), never left half old and half new.
        write_json_atomic(folder / "_run.json", {**meta, RECALIBRATING: new_meta})
        return finish_recal(folder)
    except OSError as exc:
        raise StoreError(f"{folder}: recalibration stopped ({exc.strerror or exc}); `railtap recover {folder}` "
                         "finishes it") from None
    finally:
        lock.release()


def recal_leftovers(folder: Path) -> list[Path]:
    """New files of a recalibration not yet put in place (``_recal-*``)."""
    return sorted(folder.glob(f"{TEMP_PREFIX}*"))


def finish_recal(folder: Path) -> dict[str, Any]:
    """Put a recalibration's new files in place and write its ``_run.json`` (the caller holds the run lock).

    ``_run.json`` holds the new metadata under ``recalibrating`` once every new file is whole; whatever was not
    yet moved is moved now, so a run is never left with some parts new and some old.
    """
    meta = read_run_json(folder)
    new_meta = meta.get(RECALIBRATING)
    if not isinstance(new_meta, dict):
        raise StoreError(f"{folder}/_run.json: no recalibration to finish")
    for temp in recal_leftovers(folder):
        name = temp.name[len(TEMP_PREFIX):]
        os.replace(temp, folder / (EVENTS if name == "events.parquet" else name))
    fsync_dir(folder)
    for index, _ in parts_in(folder):  # the per-second rollups follow the new values
        write_rollup(folder, index, pairs_of(new_meta), gap_us(new_meta))
    link_episodes(folder / EVENTS)
    new_meta = {k: v for k, v in new_meta.items() if k != RECALIBRATING}
    new_meta["events"] = pq.ParquetFile(folder / EVENTS).metadata.num_rows
    write_json_atomic(folder / "_run.json", new_meta)
    return new_meta


def _updated_metadata(meta: dict[str, Any], profiles: list[Profile]) -> dict[str, Any]:
    now = datetime.now(UTC).isoformat(timespec="seconds")
    calibration = dict(meta.get("calibration", {}))
    history = list(meta.get("calibration_history", []))
    for profile in profiles:
        history.append({"channel": profile.channel, "replaced": now, "was": calibration.get(profile.channel)})
        calibration[profile.channel] = {"profile": profile.to_dict(), "applied": now, "by": "railtap recal"}
    new = {k: v for k, v in meta.items() if k != RECALIBRATING}
    return {**new, "calibration": calibration, "calibration_history": history}


def _rewrite_part(part: Path, names: list[str], run_meta: dict[str, Any], core: Processor
                  ) -> tuple[Path, list[Event]]:
    """The part with new value columns from the core, under a temporary name beside it; streamed by row
    group. Returns it and the events the core found in it."""
    schema = pq.read_schema(part)
    kv = dict(schema.metadata or {})
    kv[RUN_KEY.encode()] = to_json(run_meta).encode()
    schema = schema.with_metadata(kv)
    temp = part.with_name(f"{TEMP_PREFIX}{part.name}")
    events: list[Event] = []
    with pq.ParquetWriter(temp, schema, **sample_parquet_options(schema)) as writer:
        for batch, block in blocks(part, names):
            out = core.feed(block)
            events += out.events
            columns = {name: batch.column(name) for name in batch.schema.names}
            for k, name in enumerate(names):
                columns[name] = pa.array(out.values[:, k], type=schema.field(name).type)
            writer.write_batch(pa.RecordBatch.from_arrays([columns[n] for n in schema.names], schema=schema))
    with open(temp, "rb") as handle:
        os.fsync(handle.fileno())
    return temp, events
