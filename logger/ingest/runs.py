"""The run folders one pipeline records, one at a time.

A run opens at the device's first header (or when recording is switched on), receives every batch and event
until it is stopped, and is sealed: a run stopped while the stream goes on is sealed on a thread of its own, so
ingest goes straight back to the port; the last one is sealed when the pipeline ends. What each run says at
its end (its link counters, how its labels were made, calibration changes) is worked out by the ingest thread
and handed over, so no other thread reads ingest state.
"""

from __future__ import annotations

import threading
from pathlib import Path
from typing import Any

import pyarrow as pa

from logger.ingest.recorder import Recorder, run_metadata
from logger.ingest.state import RecordingState
from logger.rig import Rig
from logger.wire import DeviceHeader


class Runs:
    """Opens, stops and seals run folders under ``root``."""

    def __init__(self, root: Path, label: str, rig: Rig, schema: pa.Schema, source_name: str, *, gap_s: float,
                 part_seconds: float, keep_raw: bool) -> None:
        self.root, self.label, self.rig, self.schema = root, label, rig, schema
        self.source_name = source_name
        self.gap_s, self.part_seconds, self.keep_raw = gap_s, part_seconds, keep_raw
        self.current: Recorder | None = None
        self.final: dict[str, Any] | None = None
        """The final metadata of the run sealed last (None if nothing was recorded)."""
        self.sealed: list[dict[str, Any]] = []
        """Every run sealed, oldest first."""
        self.failed: str | None = None
        """Why a run stopped earlier could not be sealed (its journal is kept for ``railtap recover``)."""
        self._sealers: list[threading.Thread] = []

    def open(self, header: DeviceHeader, link_base: dict[str, int]) -> Recorder:
        """A new run folder; ``link_base`` holds the link counters its own will be counted from."""
        self.current = Recorder(self.root, self.label or self.rig.name, self.schema,
                                run_metadata(self.rig, header, self.source_name, self.gap_s),
                                part_seconds=self.part_seconds, keep_raw=self.keep_raw)
        self.current.link_base = link_base
        return self.current

    def stop(self, reason: str, extra: dict[str, Any]) -> Recorder | None:
        """Stop the present run and seal it on a thread of its own; returns it."""
        old, self.current = self.current, None
        if old is not None:
            sealer = threading.Thread(target=self._seal, args=(old, reason, extra), name="railtap-seal", daemon=True)
            self._sealers.append(sealer)
            sealer.start()
        return old

    def finish(self, reason: str, extra: dict[str, Any]) -> str | None:
        """At the end: wait for runs stopped earlier, then seal the present one; its error, if it failed."""
        for sealer in self._sealers:  # runs stopped earlier first, so ``final`` is the last run's
            sealer.join()
        if self.current is None:
            return None
        self._seal(self.current, reason, extra)
        return self.current.error

    def _seal(self, recorder: Recorder, reason: str, extra: dict[str, Any]) -> None:
        final = recorder.stop(reason, extra=extra)
        self.final = None if final is None else {**final, "folder": str(recorder.folder)}
        if self.final is not None:
            self.sealed.append(self.final)
        elif recorder.error:
            self.failed = f"{recorder.folder}: {recorder.error}; `railtap recover` can finish it"

    def state(self) -> RecordingState | None:
        current = self.current
        return current.state() if current is not None else None
