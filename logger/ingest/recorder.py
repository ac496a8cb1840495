"""The recorder thread: the one consumer that must never lose data, so it fails loudly.

The ingest thread hands it record batches, events and raw chunks through a queue and goes straight back to
the port; slow disks, fsyncs and sealing of parts all happen here. A store failure stops the run with the
store's one-line message; whatever reached the journal stays there for ``railtap recover``.
"""

from __future__ import annotations

import contextlib
import os
import queue
import threading
import time
from pathlib import Path
from typing import Any

import pyarrow as pa

from logger import __version__
from logger.ingest.state import RecordingState
from logger.rig import Rig
from logger.sources.base import Chunk
from logger.store import StoreError, new_run
from logger.store.raw import RawCaptureWriter
from logger.wire import DeviceHeader

_STOP = object()

QUEUE_BATCHES = 64
"""Batches the recorder's queue holds before ingest waits: a batch is 0.1 s of reads while someone watches and
0.5 s otherwise, so 6.4 s to 32 s of data ride out a stalled disk on a live port (sealing never stalls it: parts
are sealed elsewhere)."""


class Recorder:
    """Runs a :class:`RunWriter` on its own thread."""

    def __init__(
        self,
        root: Path,
        label: str,
        schema: pa.Schema,
        metadata: dict[str, Any],
        *,
        part_seconds: float = 3600.0,
        keep_raw: bool = False,
    ) -> None:
        self.error: str | None = None
        self.final: dict[str, Any] | None = None
        self.started = time.monotonic()
        # Bounded, so a source faster than the disk (a replay, the simulator at full speed) waits for it.
        self._queue: queue.Queue[Any] = queue.Queue(maxsize=QUEUE_BATCHES)
        self._writer = new_run(root, label, schema, metadata, part_seconds=part_seconds, seal_in_child=True)
        self.folder: Path = self._writer.folder
        self._raw = RawCaptureWriter(self.folder / "_raw.arrows") if keep_raw else None
        self._stop_reason = "stopped"
        self._extra: dict[str, Any] | None = None
        self.link_base: dict[str, int] = {}
        """The link's counters when this run began, so the run's own share can be told at its end."""
        self.queue_peak = 0
        """Most batches ever waiting in the queue (written by the ingest thread, which alone adds batches): how
        far the recorder fell behind, against :data:`QUEUE_BATCHES` at which ingest would stop reading."""
        self._thread = threading.Thread(target=self._run, name="railtap-recorder", daemon=True)
        self._thread.start()

    def add_batch(self, batch: pa.RecordBatch) -> None:
        self._put(("batch", batch))
        self.queue_peak = max(self.queue_peak, self._queue.qsize())

    def add_event(self, row: dict[str, Any]) -> None:
        self._put(("event", row))

    def add_raw(self, chunk: Chunk) -> None:
        if self._raw is not None:
            self._put(("raw", chunk))

    def _put(self, item: Any) -> None:
        """Queue for the recorder thread, waiting while it is busy; gives up only if it has died."""
        while self._thread.is_alive():
            try:
                self._queue.put(item, timeout=0.5)
                return
            except queue.Full:
                continue

    def state(self) -> RecordingState:
        """Where the run is going and how far it has got, for screens."""
        return RecordingState(
            folder=str(self.folder),
            rows=self.rows,
            bytes_on_disk=_bytes_in(self.folder),
            elapsed_s=time.monotonic() - self.started,
            journal_lag_rows=self.rows - self.durable_rows,
            error=self.error,
        )

    @property
    def alive(self) -> bool:
        return self._thread.is_alive()

    @property
    def rows(self) -> int:
        """Rows handed to the store so far."""
        return self._writer.rows

    @property
    def durable_rows(self) -> int:
        """Rows that would survive a crash right now."""
        return self._writer.durable_rows

    def stop(self, reason: str, timeout: float | None = None, extra: dict[str, Any] | None = None
             ) -> dict[str, Any] | None:
        """Drain the queue, seal the parts and return the run's final metadata (None if it failed); ``extra``
        goes into the final ``_run.json``."""
        self._stop_reason = reason
        self._extra = extra
        self._put(_STOP)
        self._thread.join(timeout)
        return self.final

    def _run(self) -> None:
        try:
            while True:
                try:
                    item = self._queue.get(timeout=0.25)
                except queue.Empty:
                    self._writer.tick()  # buffered rows still reach the journal when the stream pauses
                    continue
                if item is _STOP:
                    break
                self._handle(*item)
            self._close(self._stop_reason)
        except (StoreError, OSError) as exc:
            self.error = str(exc) if isinstance(exc, StoreError) else f"recording failed: {exc}"
            self._abandon()

    def _handle(self, kind: str, item: Any) -> None:
        if kind == "batch":
            self._writer.append(item)
        elif kind == "event":
            self._writer.add_event(item)
        elif self._raw is not None:
            self._raw.write(item)

    def _close(self, reason: str) -> None:
        if self._raw is not None:
            self._raw.close()
        self.final = self._writer.close(reason, self._extra)

    def _abandon(self) -> None:
        """After a failure keep every journal as it is; drain the queue so producers never block."""
        with contextlib.suppress(Exception):  # the original error is the one worth reporting
            self._writer.abandon(f"failed: {self.error}")
        while True:
            try:
                if self._queue.get(timeout=1.0) is _STOP:
                    break
            except queue.Empty:
                break


def _bytes_in(folder: Path) -> int:
    """What the run's files take on disk now; a file sealed or renamed away meanwhile is simply not counted."""
    total = 0
    with contextlib.suppress(FileNotFoundError):
        for entry in os.scandir(folder):
            with contextlib.suppress(FileNotFoundError):
                if entry.is_file():
                    total += entry.stat().st_size
    return total


def run_metadata(rig: Rig, header: DeviceHeader, source: str, gap_s: float) -> dict[str, Any]:
    """What a run records about itself at start: software, source, the rig file as written, the device, and
    the gap rule's limit (so every later pass integrates across the same intervals)."""
    return {
        "software": f"railtap {__version__}",
        "source": source,
        "rig_name": rig.name,
        "rig_file": rig.source,
        "rig": rig.text,
        "device_header": header.body(),
        "gap_s": gap_s,
        "channels_info": [
            {"name": ch.name, "role": ch.role, "unit": ch.unit, "nominal": ch.nominal, "input": ch.input}
            for ch in rig.channels
        ],
        "power_pairs": [{"rail": pair.rail, "volts": rig.channels[pair.volts].name,
                         "amps": rig.channels[pair.amps].name, "sign": pair.sign} for pair in rig.power_pairs()],
        "calibration": {
            ch.name: {"profile_path": ch.profile_path, "profile": ch.profile.to_dict()} if ch.profile is not None
            else {"scaling": "rig file (divider, shunt_ohm, gain, offset_counts)"}
            for ch in rig.channels
        },
    }

