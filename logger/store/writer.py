"""RunWriter: record one run into its folder, crash-safe, in bounded memory.

Samples arrive as Arrow record batches. They are buffered and, at least every ``flush_seconds`` of wall
clock, written as one batch to the journal of the current part and fsynced, so ``kill -9`` or a power cut
loses at most about that much. Parts rotate on *data* time (the ``utc`` column): part k holds the rows whose
``utc`` falls in ``[t0 + k * part_seconds, t0 + (k + 1) * part_seconds)``, t0 being the run's first sample,
so a simulated day replayed faster than real time still makes hourly parts. A finished part's journal is
sealed into Parquet at once. A long gap in the data skips slots, but part files stay numbered 0, 1, 2...

The writer is single-threaded: give it its own thread. When no samples come for a while, call :meth:`tick`
so buffered rows still reach the disk on time.
"""

from __future__ import annotations

import contextlib
import errno
import socket
import time
from collections.abc import Callable
from pathlib import Path
from types import TracebackType
from typing import Any, NoReturn

import pyarrow as pa

from logger import __version__
from logger.store.batches import conform, split_by_slot
from logger.store.files import (
    RUN_JSON,
    RunLock,
    StoreError,
    os_error_text,
    utc_now,
    utc_text,
    write_json_atomic,
)
from logger.store.journal import JournalWriter
from logger.store.layout import EVENTS_JOURNAL, journal_name
from logger.store.meta import STORE_KEYS, finished_metadata, start_metadata
from logger.store.rollup import gap_us
from logger.store.schema import channels_of, event_batch, event_schema
from logger.store.seal import temp_name
from logger.store.sealer import PartSealer, SealFailed

MAX_BUFFER_ROWS = 1 << 16


class RunWriter:
    """Writes one run folder: journals, sealed Parquet parts, events and ``_run.json``.

    Args:
        folder: The run folder; created if missing. It must not already hold files.
        schema: Sample schema from :func:`logger.store.schema.sample_schema`.
        metadata: Everything known at start (rig, device header, sources, calibration...). JSON-able;
            datetimes and paths are written as text. ``start_utc``, ``host`` and ``software_version`` are
            filled in when absent.
        part_seconds: Data time covered by one part.
        flush_seconds: Longest wall-clock time rows stay buffered in memory before the journal gets them.
        clock: Monotonic clock in seconds (injectable for tests).
        seal_in_child: Seal parts in a child process each (see :mod:`logger.store.sealer`), so this
            process never holds the memory a seal takes: what a day-long recorder wants. By default they
            are sealed on the sealing thread in this process.

    Raises:
        ValueError: The schema is not a sample schema, an option is out of range, or ``metadata`` uses a key
            the writer owns.
        StoreError: The folder holds files already, cannot be written, or is open in another process.
    """

    def __init__(
        self,
        folder: Path,
        schema: pa.Schema,
        metadata: dict[str, Any],
        *,
        part_seconds: float = 3600.0,
        flush_seconds: float = 0.5,
        clock: Callable[[], float] = time.monotonic,
        seal_in_child: bool = False,
    ) -> None:
        channels_of(schema)
        if part_seconds <= 0 or flush_seconds < 0:
            raise ValueError("part_seconds must be > 0 and flush_seconds >= 0")
        clash = sorted(set(metadata) & set(STORE_KEYS))
        if clash:
            raise ValueError(f"metadata keys {clash} are written by the store itself")
        self.folder = Path(folder)
        self.schema = schema
        self._part_us = max(1, round(part_seconds * 1e6))
        self._flush_s = flush_seconds
        self._clock = clock
        self._buffer: list[pa.RecordBatch] = []
        self._buffered_rows = 0
        self._rows = 0
        self._durable_rows = 0
        self._safe_until_us: int | None = None
        self._t0_us: int | None = None
        self._slot: int | None = None
        self._part_index = 0
        self._parts: list[dict[str, Any]] = []
        self._event_count = 0
        self._events: JournalWriter | None = None
        self._error: StoreError | None = None
        self._final: dict[str, Any] | None = None
        _prepare_folder(self.folder)
        self._lock = RunLock(self.folder)
        self._lock.acquire("record")
        defaults = {
            "start_utc": utc_text(utc_now()),
            "host": socket.gethostname(),
            "software_version": __version__,
        }
        self._start = start_metadata({**defaults, **metadata}, schema, part_seconds)
        self._metadata: dict[str, Any] = {**self._start, "status": "recording"}
        self._sealer = PartSealer(self.folder, self._start, gap_us(metadata), in_child=seal_in_child,
                                  lock_fd=self._lock.fileno())
        self._journal: JournalWriter | None = None
        path = self.folder / RUN_JSON
        try:
            write_json_atomic(path, self._metadata)
            path = self.folder / journal_name(0)
            self._journal = JournalWriter(path, schema)
        except OSError as exc:
            self._lock.release()
            raise StoreError(f"{os_error_text(exc, path)}; fix that or choose another folder") from None
        self._last_flush = clock()

    # ------------------------------------------------------------------ recording

    def append(self, batch: pa.RecordBatch) -> None:
        """Take a batch of samples; write the buffer to the journal when ``flush_seconds`` have passed.

        Raises:
            ValueError: The batch does not match the schema (missing, extra or uncastable columns, nulls).
            StoreError: The run cannot be written (disk full...); the writer is then failed and unlocked.
        """
        self._check_usable()
        batch = conform(batch, self.schema)
        if batch.num_rows == 0:
            return
        if self._t0_us is None:
            self._t0_us = batch.column("utc")[0].cast(pa.int64()).as_py()
        for slot, piece in split_by_slot(batch, self._t0_us, self._part_us, self._slot or 0):
            if self._slot is None:
                self._slot = slot
            elif slot != self._slot:
                self._rotate(slot)
            self._buffer.append(piece)
            self._buffered_rows += piece.num_rows
            self._rows += piece.num_rows
        self._flush_if_due()

    def tick(self) -> None:
        """Flush buffered rows if they have waited ``flush_seconds``; call it when no samples arrive."""
        self._check_usable()
        self._flush_if_due()

    def flush(self) -> None:
        """Write buffered rows to the journal as one record batch and fsync it, now.

        Raises:
            StoreError: As for :meth:`append`.
        """
        self._check_usable()
        self._last_flush = self._clock()
        if not self._buffer:
            return
        batch = pa.concat_batches(self._buffer) if len(self._buffer) > 1 else self._buffer[0]
        assert self._journal is not None
        try:
            self._journal.write(batch)
        except OSError as exc:
            self._fail(exc, self._journal.path)
        self._buffer.clear()
        self._buffered_rows = 0
        self._durable_rows += batch.num_rows
        last = batch.column("utc")[-1].cast(pa.int64()).as_py()
        self._safe_until_us = last if self._safe_until_us is None else max(self._safe_until_us, last)

    def add_event(self, row: dict[str, Any]) -> None:
        """Record one event (brownout, dropout, mark...) in ``_events.arrows``, durable on return.

        Args:
            row: Values by column of :func:`logger.store.schema.event_schema`; ``kind`` and ``start`` are
                required, missing optional columns are null.

        Raises:
            ValueError: Unknown column, missing ``kind`` or ``start``, or a value of the wrong type.
            StoreError: As for :meth:`append`.
        """
        self._check_usable()
        batch = event_batch(row)
        path = self.folder / EVENTS_JOURNAL
        try:
            if self._events is None:
                self._events = JournalWriter(path, event_schema())
            self._events.write(batch)
        except OSError as exc:
            self._fail(exc, path)
        self._event_count += 1

    def close(self, reason: str, extra: dict[str, Any] | None = None) -> dict[str, Any]:
        """Finish the run: flush, seal the open part, write ``_events.parquet`` and the final ``_run.json``.

        Args:
            reason: Why recording stopped, in words for people ("user stop", "duration reached").
            extra: More end-of-run fields for ``_run.json`` (the link's counters), under keys the store does
                not own.

        Returns:
            The final run metadata (as in ``_run.json``). After a failure it is the failed metadata, and
            nothing more is written. Calling close again returns the same dict.

        Raises:
            StoreError: Sealing or writing failed; the journal stays for ``railtap recover``.
        """
        if self._final is not None:
            return self._final
        if self._error is not None:
            return self._metadata
        self.flush()
        self._finish_part()
        self._finish_events()
        self._sealer.shutdown()
        last = utc_text(self._safe_until_us)
        self._metadata = finished_metadata(
            self._start, "complete", reason, utc_text(utc_now()), last, self._parts, self._event_count
        )
        self._metadata.update({k: v for k, v in (extra or {}).items() if k not in STORE_KEYS})
        try:
            write_json_atomic(self.folder / RUN_JSON, self._metadata)
        except OSError as exc:
            self._fail(exc, self.folder / RUN_JSON)
        self._lock.release()
        self._final = self._metadata
        return self._final

    def abandon(self, reason: str = "abandoned before a clean close") -> None:
        """Stop without sealing: push buffered rows to the journal if possible, then close every file as it
        is, mark the run ``failed`` and release the lock, so ``railtap recover`` can seal it later.

        For a caller that must stop after an error of its own. Safe after a failure or a close (no-op).
        """
        if self._final is not None or self._error is not None:
            return
        with contextlib.suppress(StoreError):
            self.flush()
        if self._error is not None:
            return
        self._error = StoreError(f"run {self.folder} was abandoned; run `railtap recover {self.folder}`")
        self._stop_files({"status": "failed", "stop_reason": reason})

    # ------------------------------------------------------------------ state

    @property
    def rows(self) -> int:
        """Rows taken so far (buffered or on disk)."""
        return self._rows

    @property
    def durable_rows(self) -> int:
        """Rows fsynced to a journal or sealed in a part: what survives ``kill -9`` now."""
        return self._durable_rows

    @property
    def part_index(self) -> int:
        """Number of the part being recorded."""
        return self._part_index

    @property
    def error(self) -> StoreError | None:
        """The error that stopped this writer, if any."""
        return self._error

    def __enter__(self) -> RunWriter:
        return self

    def __exit__(self, kind: type[BaseException] | None, exc: BaseException | None, tb: TracebackType | None) -> None:
        self.close("finished" if exc is None else f"stopped by {kind.__name__ if kind else 'error'}: {exc}")

    # ------------------------------------------------------------------ internals

    def _check_usable(self) -> None:
        if self._error is not None:
            raise self._error
        if self._final is not None:
            raise ValueError(f"run {self.folder} is closed")
        self._collect_sealed()

    def _flush_if_due(self) -> None:
        due = self._clock() - self._last_flush >= self._flush_s
        if self._buffer and (due or self._buffered_rows >= MAX_BUFFER_ROWS):
            self.flush()

    def _rotate(self, slot: int) -> None:
        """Close the current part's journal and hand it to the sealer, then start the next part."""
        self.flush()
        self._hand_over_part()
        self._part_index += 1
        self._slot = slot
        path = self.folder / journal_name(self._part_index)
        try:
            self._journal = JournalWriter(path, self.schema)
        except OSError as exc:
            self._fail(exc, path)

    def _collect_sealed(self, wait: bool = False) -> None:
        """Note the parts sealed meanwhile; a seal that failed fails the run as if it had failed here."""
        try:
            self._parts += [sealed.as_dict() for sealed in self._sealer.collect(wait)]
        except SealFailed as exc:
            self._fail(exc.cause, temp_name(exc.path))

    def _hand_over_part(self) -> None:
        """Close the current part's journal and queue it for sealing."""
        assert self._journal is not None
        try:
            self._journal.close()
        except OSError as exc:
            self._fail(exc, self._journal.path)
        self._sealer.add(self._part_index)

    def _finish_part(self) -> None:
        """Seal the last part, after every part before it, and wait for them all."""
        self._hand_over_part()
        self._collect_sealed(wait=True)

    def _finish_events(self) -> None:
        """Seal the event journal (or write an empty event table) through the sealer, as the parts."""
        if self._events is not None:
            try:
                self._events.close()
            except OSError as exc:
                self._fail(exc, self._events.path)
        self._sealer.add_events()
        self._collect_sealed(wait=True)

    def _fail(self, exc: BaseException, path: Path) -> NoReturn:
        """Stop for good: close files without writing more, mark the run failed, unlock, raise StoreError."""
        what = os_error_text(exc, path) if isinstance(exc, OSError) else f"{exc} writing {path}"
        code = exc.errno if isinstance(exc, OSError) else None
        fix = "free space" if code in (errno.ENOSPC, errno.EDQUOT) else "fix the cause"
        if code in (errno.EACCES, errno.EPERM, errno.EROFS):
            fix = "make the folder writable"
        if self._safe_until_us is None:
            safe = "no samples had reached the disk yet"
        else:
            until = (utc_text(self._safe_until_us) or "")[:19].replace("T", " ")
            safe = f"samples up to {until} UTC are safe on disk"
        self._error = StoreError(f"{what}; {fix}, then run `railtap recover {self.folder}`; {safe}")
        self._stop_files({"status": "failed", "error": str(self._error)})
        raise self._error from None

    def _stop_files(self, changes: dict[str, Any]) -> None:
        """Close journals without writing more, note ``changes`` in ``_run.json`` if possible, unlock."""
        for journal in (self._journal, self._events):
            if journal is not None:
                journal.abandon()
        self._sealer.shutdown(cancel=True)  # the lock goes only when no seal is reading a journal
        self._metadata = {**self._metadata, **changes}
        with contextlib.suppress(OSError):
            write_json_atomic(self.folder / RUN_JSON, self._metadata)
        self._lock.release()


def _prepare_folder(folder: Path) -> None:
    """Create the run folder, refusing one that already holds files (a run is never overwritten)."""
    try:
        folder.mkdir(parents=True, exist_ok=True)
        occupied = any(folder.iterdir())
    except OSError as exc:
        raise StoreError(f"{os_error_text(exc, folder)}; choose a folder you can write to") from None
    if occupied:
        raise StoreError(f"{folder} already exists and holds files; a new run needs a new, empty folder")
