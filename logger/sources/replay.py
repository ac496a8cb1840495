"""Replay of raw captures: every byte as it arrived, with its arrival time, as a source again.

A raw capture (written by :class:`logger.store.raw.RawCaptureWriter`) is an Arrow IPC stream with two columns,
``arrival`` (timestamp[us, UTC]) and ``data`` (binary), one row per chunk read; a torn last batch (a crash
while recording) is skipped. Replay also accepts a plain
byte dump of a port (``cat /dev/ttyACM0 > capture.bin``); it has no arrival times, so its chunks carry
NaN and the pipeline stamps samples from the device clock instead.
"""

from __future__ import annotations

import math
import time
from collections.abc import Callable, Iterator
from pathlib import Path
from typing import BinaryIO

import numpy as np
import pyarrow as pa

from logger.sources.base import Chunk, SourceError

SCHEMA = pa.schema([("arrival", pa.timestamp("us", tz="UTC")), ("data", pa.binary())])
PLAIN_CHUNK = 65536

_STREAM_MAGIC = b"\xff\xff\xff\xff"
_TEXT_BYTES = np.zeros(256, dtype=bool)
_TEXT_BYTES[32:127] = True
_TEXT_BYTES[[9, 10, 13]] = True


class ReplaySource:
    """A :class:`~logger.sources.base.Source` replaying a raw capture or a plain byte dump.

    Args:
        path: the capture.
        speed: ``0`` replays as fast as possible; ``s > 0`` paces chunks by their arrival times,
            ``s`` capture seconds per wall second. Plain byte dumps have no times and are never paced.
        sleep: how to wait (tests may pass a fake).
        clock: monotonic wall clock (tests may pass a fake).
    """

    def __init__(
        self,
        path: str | Path,
        speed: float = 0.0,
        sleep: Callable[[float], None] = time.sleep,
        clock: Callable[[], float] = time.monotonic,
    ) -> None:
        self.path = Path(path)
        self.speed = speed
        self._sleep = sleep
        self._clock = clock
        self._chunks: Iterator[Chunk] | None = None
        self._next: Chunk | None = None
        self._file: BinaryIO | None = None
        self.kind = ""
        """``"capture"`` or ``"plain"`` once open."""
        self.torn = False
        """True when the capture ended in an incomplete batch (the writer was killed)."""
        self._pace: tuple[float, float] | None = None

    @property
    def name(self) -> str:
        """E.g. ``replay of runs/x/_raw.arrows``."""
        return f"replay of {self.path}"

    def open(self) -> None:
        """Open the file and tell a raw capture from a plain byte dump; raises :class:`SourceError`."""
        self.close()
        try:
            self._file = open(self.path, "rb")  # noqa: SIM115 - closed by close()
        except OSError as exc:
            raise SourceError(f"{self.path}: cannot open capture ({exc.strerror or exc})") from None
        head = self._file.read(PLAIN_CHUNK)
        self._file.seek(0)
        if not head:
            self.close()
            raise SourceError(f"{self.path}: empty file; nothing to replay")
        if head.startswith(_STREAM_MAGIC):
            self.kind, self._chunks = "capture", self._capture_chunks(self._open_stream())
        elif looks_like_wire_text(head):
            self.kind, self._chunks = "plain", self._plain_chunks()
        else:
            self.close()
            raise SourceError(
                f"{self.path}: neither a raw capture (Arrow stream) nor a plain dump of wire text; "
                "give the file written by `railtap record` or a byte dump of the port"
            )
        self._next = None
        self._pace = None

    def read(self) -> Chunk | None:
        """The next recorded chunk (waiting for its time when paced); ``None`` at the end."""
        if self._chunks is None:
            raise SourceError(f"{self.path}: replay read before open")
        if self._next is None:
            self._next = next(self._chunks, None)
            if self._next is None:
                return None
        chunk = self._next
        wait = self._wait_s(chunk.host_time)
        if wait > 0:
            self._sleep(min(wait, 0.1))
            if wait > 0.1:
                assert self._pace is not None
                return Chunk(b"", self._pace[1] + (self._clock() - self._pace[0]) * self.speed)
        self._next = None
        return chunk

    def write(self, data: bytes) -> None:
        """A recording cannot be talked to; commands are ignored."""

    def close(self) -> None:
        """Close the file; safe to call twice."""
        if self._file is not None:
            self._file.close()
            self._file = None
        self._chunks = None

    def _wait_s(self, arrival: float) -> float:
        """Wall seconds until ``arrival`` is due; 0 when not pacing."""
        if self.speed <= 0 or not math.isfinite(arrival):
            return 0.0
        if self._pace is None:
            self._pace = (self._clock(), arrival)
        wall0, arrival0 = self._pace
        return wall0 + (arrival - arrival0) / self.speed - self._clock()

    def _open_stream(self) -> pa.ipc.RecordBatchStreamReader:
        try:
            reader = pa.ipc.open_stream(self._file)
        except (pa.ArrowInvalid, OSError) as exc:
            self.close()
            detail = " ".join(str(exc).split())
            raise SourceError(f"{self.path}: raw capture with an unreadable start ({detail})") from None
        if not reader.schema.equals(SCHEMA):
            self.close()
            raise SourceError(f"{self.path}: Arrow stream without the raw capture columns arrival, data")
        return reader

    def _capture_chunks(self, reader: pa.ipc.RecordBatchStreamReader) -> Iterator[Chunk]:
        while True:
            try:
                batch = reader.read_next_batch()
            except StopIteration:
                return
            except (pa.ArrowInvalid, OSError):  # torn by a crash: the complete batches are what we have
                self.torn = True
                return
            yield from _batch_chunks(batch)

    def _plain_chunks(self) -> Iterator[Chunk]:
        assert self._file is not None
        while data := self._file.read(PLAIN_CHUNK):
            yield Chunk(data, math.nan)


def _batch_chunks(batch: pa.RecordBatch) -> Iterator[Chunk]:
    arrival = batch.column(0).cast(pa.int64()).to_numpy(zero_copy_only=False).astype(np.float64) / 1e6
    for t, data in zip(arrival.tolist(), batch.column(1).to_pylist(), strict=True):
        yield Chunk(data, t)


def looks_like_wire_text(head: bytes) -> bool:
    """Whether the start of a file looks like wire protocol lines: nearly all printable ASCII, in lines.

    A dump may start mid-line or with some noise from plugging in, so a few stray bytes are allowed.
    """
    if not head:
        return False
    arr = np.frombuffer(head, dtype=np.uint8)
    text_share = float(_TEXT_BYTES[arr].mean())
    return text_share >= 0.95 and (b"\n" in head or len(head) < 160)
