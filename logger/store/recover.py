"""Recovery of runs that did not close cleanly (``kill -9``, power cut, full disk).

Everything needed is on disk: each leftover journal is sealed into its part with the same function a clean
close uses, the event journal becomes ``_events.parquet``, and ``_run.json`` is finished with status
``recovered``. The rail events are then detected again from the samples by the same processing core the live
run used (:mod:`logger.store.reprocess`), since those going on at the crash were never written. Recovery takes
the run lock, so it never touches a run a live writer still has open, and it is idempotent: a run that is
already complete or recovered is left exactly as it is.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import pyarrow as pa
import pyarrow.parquet as pq

from logger.store.episodes import link_episodes
from logger.store.files import (
    RUN_JSON,
    RunLock,
    StoreError,
    fsync_dir,
    lock_is_free,
    one_line,
    os_error_text,
    read_run_json,
    write_json_atomic,
)
from logger.store.layout import (
    EVENTS_JOURNAL,
    EVENTS_PARQUET,
    journals_in,
    part_name,
    parts_in,
    temp_files_in,
)
from logger.store.meta import finished_metadata, start_part
from logger.store.recal import RECALIBRATING, finish_recal, recal_leftovers
from logger.store.reprocess import detect_again
from logger.store.schema import event_schema
from logger.store.seal import event_parquet_options, read_part_info, seal_journal, write_empty

RECOVERED_REASON = "recovered after an unclean stop"
UNFINISHED = ("recording", "failed")
FINISHED = ("complete", "recovered")


def recover_run(folder: Path) -> dict[str, Any]:
    """Seal whatever an unclean stop left in ``folder`` and finish its ``_run.json``.

    Args:
        folder: A run folder.

    Returns:
        The run metadata after recovery (unchanged when there was nothing to do). If the events could not be
        detected again, ``events_note`` says why (the samples are sealed either way).

    Raises:
        StoreError: The folder is not a run, a live process holds its lock, a file in it is foreign or
            corrupt (named in the message), or writing failed (disk full...). Nothing holding data is deleted.
    """
    folder = Path(folder)
    metadata = read_run_json(folder)
    lock = RunLock(folder)
    lock.acquire("recover")
    try:
        if isinstance(metadata.get(RECALIBRATING), dict):  # a recal stopped after its point of no return
            try:
                return finish_recal(folder)
            except OSError as exc:
                raise StoreError(f"{os_error_text(exc, folder)}; fix that, then run `railtap recover {folder}` "
                                 "again") from None
        for leftover in recal_leftovers(folder):  # a recal stopped before it: the old calibration stands
            leftover.unlink()
        if _is_clean(folder, metadata):
            return metadata
        final = _recover_locked(folder, metadata)
        try:
            detect_again(folder)
        except StoreError as exc:
            return {**final, "events_note": f"sealed, but its events were not detected again ({exc})"}
        return read_run_json(folder)
    finally:
        lock.release()


def find_unfinished(root: Path) -> list[Path]:
    """Run folders directly under ``root`` that need :func:`recover_run`.

    A run needs it when its ``_run.json`` says ``recording`` (or ``failed``: the writer stopped on an error
    and left its journal), or a recalibration of it was cut short, and no live process holds its lock.
    Folders with an unreadable ``_run.json`` are skipped (:func:`recover_run` on them names the problem); a
    missing ``root`` gives an empty list.
    """
    found: list[Path] = []
    if not Path(root).is_dir():
        return found
    for child in sorted(Path(root).iterdir()):
        if not (child / RUN_JSON).is_file():
            continue
        try:
            meta = read_run_json(child)
        except StoreError:
            continue
        cut = meta.get("status") in UNFINISHED or RECALIBRATING in meta or recal_leftovers(child)
        if cut and lock_is_free(child):
            found.append(child)
    return found


def _is_clean(folder: Path, metadata: dict[str, Any]) -> bool:
    """True when the run is finished and nothing is left over: recovery has nothing to do."""
    return (
        metadata.get("status") in FINISHED
        and not journals_in(folder)
        and not temp_files_in(folder)
        and not (folder / EVENTS_JOURNAL).exists()
        and (folder / EVENTS_PARQUET).exists()
    )


def _recover_locked(folder: Path, metadata: dict[str, Any]) -> dict[str, Any]:
    start = start_part(metadata)
    columns = metadata.get("columns")
    path = folder
    try:
        for tmp in temp_files_in(folder):
            path = tmp
            tmp.unlink()  # an interrupted seal or metadata write; its data is still in the journal
        for index, journal in journals_in(folder):
            path = target = folder / part_name(index)
            if target.exists():
                journal.unlink()  # the crash came between sealing and deleting the journal
                continue
            seal_journal(
                journal,
                target,
                run_metadata=start,
                part_index=index,
                time_column="utc",
                expect_columns=columns,
                keep_empty=not parts_in(folder),  # an empty run still gets one (empty) part
            )
        path = folder / EVENTS_PARQUET
        events = _recover_events(folder, start)
        parts = [_part_entry(p) for _, p in parts_in(folder)]
        last = max((p["last_utc"] for p in parts if p.get("last_utc")), default=None)
        final = finished_metadata(start, "recovered", RECOVERED_REASON, last, last, parts, events)
        path = folder / RUN_JSON
        write_json_atomic(path, final)
    except OSError as exc:
        raise StoreError(f"{os_error_text(exc, path)}; fix that, then run `railtap recover {folder}` again") from None
    fsync_dir(folder)
    return final


def _recover_events(folder: Path, start: dict[str, Any]) -> int:
    """Turn ``_events.arrows`` into ``_events.parquet`` (or write an empty one); return the event count."""
    journal, target = folder / EVENTS_JOURNAL, folder / EVENTS_PARQUET
    if journal.exists():
        if target.exists():
            journal.unlink()
        else:
            if seal_journal(
                journal,
                target,
                run_metadata=start,
                part_index=None,
                time_column="start",
                options_for=event_parquet_options,
            ):
                link_episodes(target)
    if not target.exists():
        write_empty(target, event_schema(), run_metadata=start, part_index=None, options_for=event_parquet_options)
    return _read_metadata(target).num_rows


def _part_entry(path: Path) -> dict[str, Any]:
    """The ``parts`` entry of ``_run.json`` for a sealed part (file, rows, first and last utc)."""
    _read_metadata(path)
    info = read_part_info(path)
    return {
        "file": path.name,
        "rows": int(info["rows"]),
        "first_utc": info.get("first_utc"),
        "last_utc": info.get("last_utc"),
    }


def _read_metadata(path: Path) -> pq.FileMetaData:
    """Parquet footer of ``path``, or a one-line StoreError naming the file."""
    try:
        return pq.read_metadata(path)
    except (OSError, pa.ArrowException) as exc:
        raise StoreError(
            f"{path} is not a readable Parquet file ({one_line(str(exc))}); move it out of the run folder"
        ) from None
