"""Is a run folder whole enough to read? Each file a reader needs is opened once, and a damaged one is named in
one line with what to do, before any figure is computed from it."""

from __future__ import annotations

from pathlib import Path

import pyarrow as pa
import pyarrow.parquet as pq

from logger.store.files import StoreError, one_line, read_run_json
from logger.store.layout import EVENTS_PARQUET, parts_in


def check_readable(folder: Path) -> None:
    """Raise a one-line StoreError naming the first part or event table that cannot be read, or the
    ``_run.json`` that is not a run's. A damaged rollup is left to be written again when it is read."""
    read_run_json(folder)
    for _, part in parts_in(folder):
        _footer(part, "a sample part: move it out of the run folder to review the rest (its samples are lost "
                      "unless the journal it came from is still there)")
    events = folder / EVENTS_PARQUET
    if events.exists():
        _footer(events, "the event table: move it aside and run `railtap recover` on the run to detect the "
                        "rail events again from the samples")


def _footer(path: Path, what: str) -> None:
    try:
        pq.read_metadata(path)
    except (OSError, pa.ArrowException) as exc:
        raise StoreError(f"{path} is not a readable Parquet file ({one_line(str(exc))}); it is {what}") from None
