"""Writing a raw capture: every chunk of bytes as it arrived, with its arrival time (``--keep-raw``).

The file is a journal like the sample journal (see :mod:`logger.store.journal`), with the two columns of
:data:`logger.sources.replay.SCHEMA`, which :class:`~logger.sources.replay.ReplaySource` reads back. Chunks are
buffered and written at most every half second, so a crash loses at most that much.
"""

from __future__ import annotations

import math
import time
from collections.abc import Callable
from pathlib import Path

import pyarrow as pa

from logger.sources.base import Chunk
from logger.sources.replay import SCHEMA
from logger.store.arrays import from_values
from logger.store.journal import JournalWriter

FLUSH_INTERVAL_S = 0.5


class RawCaptureWriter:
    """Appends chunks to a new raw capture file.

    Args:
        path: the file to create; an existing file is never overwritten (``FileExistsError``).
        clock: monotonic clock deciding when to flush (tests may pass a fake).
    """

    def __init__(self, path: str | Path, clock: Callable[[], float] = time.monotonic) -> None:
        self.path = Path(path)
        self._journal = JournalWriter(self.path, SCHEMA)
        self._clock = clock
        self._arrivals: list[int | None] = []
        self._data: list[bytes] = []
        self._last_flush = clock()
        self.chunks = 0
        self.bytes = 0

    def write(self, chunk: Chunk) -> None:
        """Buffer one chunk (empty ones are skipped); flush when the last flush is half a second old."""
        if chunk.data:
            known = math.isfinite(chunk.wall_time)
            self._arrivals.append(round(chunk.wall_time * 1e6) if known else None)
            self._data.append(chunk.data)
            self.chunks += 1
            self.bytes += len(chunk.data)
        if self._clock() - self._last_flush >= FLUSH_INTERVAL_S:
            self.flush()

    def flush(self) -> None:
        """Write buffered chunks as one batch, synced to disk."""
        self._last_flush = self._clock()
        if not self._data:
            return
        batch = pa.RecordBatch.from_arrays(
            [from_values(self._arrivals, SCHEMA.field("arrival").type), from_values(self._data, pa.binary())],
            schema=SCHEMA,
        )
        self._arrivals, self._data = [], []
        self._journal.write(batch)

    def close(self) -> None:
        """Flush and end the stream; safe to call twice."""
        self.flush()
        self._journal.close()

    def __enter__(self) -> RawCaptureWriter:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()
