"""Run storage: folder layout, crash-safe journal, Parquet parts with metadata, recovery.

A run is one folder that any Parquet reader can open (``pandas.read_parquet(RUN)``); everything that is not a
sealed sample part starts with ``_`` so readers skip it. See :mod:`logger.store.layout` for the files.

Typical use, from the recorder's own thread::

    schema = sample_schema(["out_v", "out_a"])
    writer = new_run(root, "bench 30V", schema, {"rig": rig_dict, "device": header_dict})
    for batch in batches:
        writer.append(batch)
    writer.close("user stop")

and at start-up, for runs a crash left open: ``for run in find_unfinished(root): recover_run(run)``.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import pyarrow as pa

from logger.store.files import StoreError, read_run_json, utc_now
from logger.store.layout import run_folder_name
from logger.store.recover import find_unfinished, recover_run
from logger.store.schema import channels_of, event_schema, sample_batch, sample_schema
from logger.store.writer import RunWriter

__all__ = [
    "RunWriter",
    "StoreError",
    "channels_of",
    "event_schema",
    "find_unfinished",
    "new_run",
    "read_run_json",
    "recover_run",
    "run_folder_name",
    "sample_batch",
    "sample_schema",
]


def new_run(root: Path, label: str, schema: pa.Schema, metadata: dict[str, Any], **options: Any) -> RunWriter:
    """Start a run in a new folder under ``root`` named from the current UTC time and ``label``.

    Args:
        root: Folder that holds runs; created if missing.
        label: Free text for the folder name (sanitised), e.g. "bench 30V".
        schema: Sample schema from :func:`sample_schema`.
        metadata: Start metadata, as for :class:`RunWriter`; ``start_utc`` is set to the folder's time.
        **options: ``part_seconds``, ``flush_seconds``, ``clock`` for :class:`RunWriter`.

    Returns:
        An open writer; its folder is ``writer.folder``. A ``-2``, ``-3``... suffix avoids an existing folder.
    """
    start = utc_now()
    base = run_folder_name(start, label)
    folder = Path(root) / base
    n = 1
    while True:
        # Made, not looked for: of recorders starting in the same second into one folder of runs (a lab's
        # benches sharing a disk), only one can make each name, so no two ever share a run folder.
        try:
            folder.mkdir(parents=True)
        except FileExistsError:
            n += 1
            folder = Path(root) / f"{base}-{n}"
            continue
        except OSError:
            pass  # the writer names what is wrong with the folder, in one line
        break
    return RunWriter(folder, schema, {"start_utc": start, **metadata}, **options)
