"""Is a run folder whole enough to read? Each file a reader needs is opened once, and a damaged one is named in
one line with what to do, before any figure is computed from it. Sample parts are written with page checksums,
and every reader opens them through :func:`open_part` or :func:`parts_dataset`, which verify them: a damaged page
fails instead of being misread."""

from __future__ import annotations

from collections.abc import Iterator
from contextlib import contextmanager
from functools import cache
from pathlib import Path
from typing import TYPE_CHECKING, Any

import pyarrow as pa
import pyarrow.parquet as pq

from logger.store.files import StoreError, one_line, read_run_json
from logger.store.layout import EVENTS_PARQUET, parts_in

if TYPE_CHECKING:
    import pyarrow.dataset as ds


def check_readable(folder: Path, *, parts: bool = True) -> None:
    """Raise a one-line StoreError naming the first part (unless ``parts`` is false: the caller leaves damaged
    parts out itself) or event table that cannot be read, or the ``_run.json`` that is not a run's. A damaged
    rollup is left to be written again when it is read."""
    read_run_json(folder)
    for _, part in parts_in(folder) if parts else []:
        try:
            pq.read_metadata(part)
        except (OSError, pa.ArrowException) as exc:
            raise StoreError(damaged_part(part, exc)) from None
    events = folder / EVENTS_PARQUET
    if events.exists():
        _footer(events, "the event table: move it aside and run `railtap recover` on the run to detect the "
                        "rail events again from the samples")


def _footer(path: Path, what: str) -> None:
    try:
        pq.read_metadata(path)
    except (OSError, pa.ArrowException) as exc:
        raise StoreError(f"{path} is not a readable Parquet file ({one_line(str(exc))}); it is {what}") from None


@cache
def verified_format() -> ds.ParquetFileFormat:
    """The Parquet format with page checksums verified, for pyarrow datasets over sample parts.

    Built on first use: importing ``pyarrow.dataset`` imports pandas (some 45 MB), which a recorder never needs.
    """
    import pyarrow.dataset as ds

    return ds.ParquetFileFormat(
        default_fragment_scan_options=ds.ParquetFragmentScanOptions(page_checksum_verification=True))


def open_part(part: Path) -> pq.ParquetFile:
    """A sealed sample part, its pages verified against their checksums as they are read."""
    return pq.ParquetFile(part, page_checksum_verification=True, pre_buffer=False)


def parts_dataset(source: Path | list[str], **options: Any) -> ds.Dataset:
    """The sample parts of a run folder (or the files listed) as one pyarrow dataset, pages verified."""
    import pyarrow.dataset as ds

    return ds.dataset(source if isinstance(source, list) else str(source), format=verified_format(), **options)


def damaged_part(part: Path, exc: Exception) -> str:
    """One line naming a sample part that cannot be read, and what each command does about it."""
    return (f"{part} is damaged ({one_line(str(exc))}); review leaves it out, the other commands need it moved "
            "out of the run folder")


@contextmanager
def naming_damage(folder: Path) -> Iterator[None]:
    """Turn a failed read of the run's parts into one line naming the part that fails its checks (each part is
    read through once, only after a failure, to find it); any other failure passes through unchanged."""
    try:
        yield
    except (OSError, pa.ArrowException) as exc:
        for _, part in parts_in(folder):
            try:
                for _ in open_part(part).iter_batches():
                    pass
            except (OSError, pa.ArrowException) as damage:
                raise StoreError(damaged_part(part, damage)) from exc
        raise
