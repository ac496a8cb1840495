"""Append-only journal: an Arrow IPC *stream* file that is fsynced after every record batch.

The stream format is a sequence of self-delimiting messages (schema first, then batches), so a file cut
anywhere, by ``kill -9`` or a power cut, still reads back as every batch completed before the cut. The
writer serialises each batch in memory and writes the bytes itself with ``os.write``: a short write or a
full disk surfaces as a plain ``OSError`` naming the journal, and nothing is written after a failure, so a
torn message can only ever be at the very end of the file.
"""

from __future__ import annotations

import os
from collections.abc import Iterator
from pathlib import Path

import pyarrow as pa

from logger.store.files import StoreError, fsync_dir, one_line

_CONTINUATION = b"\xff\xff\xff\xff"


class _Collector:
    """File-like sink that keeps what pyarrow writes until the journal takes it."""

    closed = False

    def __init__(self) -> None:
        self._chunks: list[bytes] = []

    def write(self, data: bytes | memoryview) -> int:
        self._chunks.append(bytes(data))
        return len(data)

    def flush(self) -> None:
        """Nothing to do: the journal writes the bytes."""

    def take(self) -> bytes:
        data = b"".join(self._chunks)
        self._chunks.clear()
        return data


def write_all(fd: int, data: bytes) -> None:
    """Write every byte of ``data`` to ``fd``, looping over short writes (a module function so tests can
    simulate a full disk)."""
    view = memoryview(data)
    while view:
        done = os.write(fd, view)
        view = view[done:]


class JournalWriter:
    """One journal file, created new (never reopened), schema on disk as soon as it exists.

    Args:
        path: File to create; it must not exist.
        schema: Schema of every batch written.

    Raises:
        OSError: Creating or writing the file failed. The caller names the file and gives advice.
    """

    def __init__(self, path: Path, schema: pa.Schema) -> None:
        self.path = path
        self.schema = schema
        self.rows = 0
        self._sink = _Collector()
        self._fd = os.open(path, os.O_WRONLY | os.O_CREAT | os.O_EXCL | getattr(os, "O_BINARY", 0), 0o644)
        try:
            self._stream = pa.ipc.new_stream(pa.PythonFile(self._sink, mode="w"), schema)
            fsync_dir(path.parent)
            # An empty batch puts the schema on disk at once, so a journal is never header-less for long.
            self.write(_empty_batch(schema))
        except BaseException:
            self.abandon()
            raise

    def write(self, batch: pa.RecordBatch) -> None:
        """Append one batch and make it durable (write + fsync) before returning."""
        if self._fd is None:
            raise ValueError(f"journal {self.path} is closed")
        self._stream.write_batch(batch)
        write_all(self._fd, self._sink.take())
        os.fsync(self._fd)
        self.rows += batch.num_rows

    def close(self) -> None:
        """Write the end-of-stream marker, fsync and close."""
        if self._fd is None:
            return
        self._stream.close()
        write_all(self._fd, self._sink.take())
        os.fsync(self._fd)
        self.abandon()

    def abandon(self) -> None:
        """Close the file without writing anything more (after a failed write). Safe to call twice."""
        if self._fd is not None:
            fd, self._fd = self._fd, None
            os.close(fd)


def _empty_batch(schema: pa.Schema) -> pa.RecordBatch:
    return pa.RecordBatch.from_arrays([pa.nulls(0, f.type) for f in schema], schema=schema)


def open_journal(path: Path) -> tuple[pa.Schema, Iterator[pa.RecordBatch]] | None:
    """Open a journal for reading.

    Returns:
        ``(schema, batches)`` where ``batches`` yields every complete batch and stops quietly at a torn
        end; or None when the file holds no complete schema (empty, or cut inside its first write), which
        means it holds no data either.

    Raises:
        StoreError: The file is not an Arrow IPC stream (a foreign or corrupt file), named in the message.
    """
    with open(path, "rb") as handle:
        head = handle.read(8)
    if not head:
        return None
    if not head.startswith(_CONTINUATION[: len(head)]):
        raise StoreError(f"{path} is not a railtap journal (not an Arrow IPC stream); move it out of the run folder")
    source = pa.OSFile(str(path), "rb")
    try:
        reader = pa.ipc.open_stream(source)
    except (pa.ArrowInvalid, OSError) as exc:
        size = os.path.getsize(path)
        source.close()
        if len(head) < 8 or size < 8 + int.from_bytes(head[4:8], "little"):
            return None  # cut inside the schema message: nothing was ever recorded in it
        raise StoreError(f"{path} is a corrupt journal ({one_line(str(exc))}); move it out of the run folder") from None
    return reader.schema, _batches(reader, source)


def _batches(reader: pa.ipc.RecordBatchStreamReader, source: pa.NativeFile) -> Iterator[pa.RecordBatch]:
    """Yield complete batches; a torn or garbled tail ends the stream (everything before it is kept)."""
    try:
        while True:
            try:
                batch = reader.read_next_batch()
            except StopIteration:
                return
            except (pa.ArrowInvalid, OSError):
                return
            yield batch
    finally:
        source.close()


def read_journal_table(path: Path) -> pa.Table | None:
    """Whole journal as a table (for small journals such as events); None when it holds no schema."""
    opened = open_journal(path)
    if opened is None:
        return None
    schema, batches = opened
    return pa.Table.from_batches(list(batches), schema=schema)
